package api

import (
	_ "embed"
	"encoding/json"
	"fmt"

	"discrimen/models"
)

//go:embed openapi.json
var openAPIJSON []byte

// openAPIDocument returns the served document: api/openapi.json with the
// study file's JSON Schema (models.StudySchema) as components.schemas.Study,
// so the request schema can never drift from the validator's.
func openAPIDocument() ([]byte, error) {
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
	schemas["Study"] = study
	return json.MarshalIndent(doc, "", "  ")
}
