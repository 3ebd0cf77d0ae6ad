package api

import (
	_ "embed"
	"encoding/json"
	"fmt"
	"sort"
	"strings"

	"discrimen/models"
)

//go:embed openapi.json
var openAPIJSON []byte

// studyDefPrefix names the study schema's $defs once they are moved into
// components.schemas: "#/$defs/design" becomes
// "#/components/schemas/Study_design".
const studyDefPrefix = "Study_"

// OpenAPIDocument returns the served document: api/openapi.json with the
// study file's JSON Schema (models.StudySchema) as components.schemas.Study,
// so the request schema can never drift from the validator's.
//
// The schema is embedded without its $id and $schema, and its $defs become
// components of their own (Study_NAME) with every "#/$defs/NAME" reference
// rewritten to match: a nested $id changes the base URI of the references
// under it, which many OpenAPI tools do not follow, so "#/$defs/..." would
// not resolve for them.
func OpenAPIDocument() ([]byte, error) {
	var doc map[string]any
	if err := json.Unmarshal(openAPIJSON, &doc); err != nil {
		return nil, fmt.Errorf("api: openapi.json: %w", err)
	}
	var study map[string]any
	if err := json.Unmarshal(models.StudySchema(), &study); err != nil {
		return nil, fmt.Errorf("api: the study schema: %w", err)
	}
	comps, _ := doc["components"].(map[string]any)
	schemas, _ := comps["schemas"].(map[string]any)
	if schemas == nil {
		return nil, fmt.Errorf("api: openapi.json has no components.schemas")
	}
	delete(study, "$id")
	delete(study, "$schema")
	defs, _ := study["$defs"].(map[string]any)
	delete(study, "$defs")
	names := make([]string, 0, len(defs))
	for name := range defs {
		names = append(names, name)
	}
	sort.Strings(names)
	for _, name := range names {
		if _, taken := schemas[studyDefPrefix+name]; taken {
			return nil, fmt.Errorf("api: openapi.json already has a schema %s%s", studyDefPrefix, name)
		}
		schemas[studyDefPrefix+name] = defs[name]
	}
	schemas["Study"] = study
	if err := rewriteStudyRefs(study); err != nil {
		return nil, err
	}
	for _, name := range names {
		if err := rewriteStudyRefs(defs[name]); err != nil {
			return nil, err
		}
	}
	return json.MarshalIndent(doc, "", "  ")
}

// rewriteStudyRefs points every "#/$defs/NAME" reference under v at
// "#/components/schemas/Study_NAME"; any other local reference of the
// study schema is an error, since it would not resolve in the document.
func rewriteStudyRefs(v any) error {
	switch x := v.(type) {
	case map[string]any:
		if ref, ok := x["$ref"].(string); ok {
			name, ok := strings.CutPrefix(ref, "#/$defs/")
			if !ok || strings.Contains(name, "/") {
				return fmt.Errorf("api: the study schema's reference %q is not of the form #/$defs/NAME", ref)
			}
			x["$ref"] = "#/components/schemas/" + studyDefPrefix + name
		}
		for _, e := range x {
			if err := rewriteStudyRefs(e); err != nil {
				return err
			}
		}
	case []any:
		for _, e := range x {
			if err := rewriteStudyRefs(e); err != nil {
				return err
			}
		}
	}
	return nil
}
