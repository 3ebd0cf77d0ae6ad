package models

import (
	"bytes"
	_ "embed"
	"encoding/json"
	"errors"
	"fmt"
	"net/url"
	"regexp"
	"slices"
	"sort"
	"strconv"
	"strings"
	"sync"

	"github.com/santhosh-tekuri/jsonschema/v6"
	"github.com/santhosh-tekuri/jsonschema/v6/kind"
	"golang.org/x/text/language"
	"golang.org/x/text/message"
)

// studySchemaFile is the schema as written, without its family parts.
//
//go:embed schema/study.schema.json
var studySchemaFile []byte

// studySchemaJSON is the full schema: the file with the family enum and
// one branch per family filled in from the family table, so the schema,
// the validator and the evaluator cannot disagree about a family.
var studySchemaJSON = func() []byte {
	dec := json.NewDecoder(bytes.NewReader(studySchemaFile))
	dec.UseNumber()
	var doc map[string]any
	if err := dec.Decode(&doc); err != nil {
		panic("models: embedded study schema is not JSON: " + err.Error())
	}
	hyp := doc["$defs"].(map[string]any)["hypothesis"].(map[string]any)
	delete(hyp, "$comment")
	props := hyp["properties"].(map[string]any)
	props["family"] = map[string]any{"enum": Families, "description": "Precision family; its parameters are listed in the branch for it."}
	var branches []any
	for _, f := range families {
		branches = append(branches, familySchema(f)...)
	}
	hyp["allOf"] = branches
	out, err := json.MarshalIndent(doc, "", "  ")
	if err != nil {
		panic("models: study schema: " + err.Error())
	}
	return append(out, '\n')
}()

// paramRef is the schema definition for a parameter of that sign.
var paramRef = map[Sign]string{AnySign: "#/$defs/param", Positive: "#/$defs/param_positive", NonNegative: "#/$defs/param_nonnegative"}

// familySchema is the schema branches that apply when family is f.Name:
// one for a family with a fixed parameter list; for a family whose list
// comes from knots_s, one that requires knots_s and one per knot count
// naming that many parameters. Every other family's branch forbids knots_s.
func familySchema(f Family) []any {
	isFamily := map[string]any{"family": map[string]any{"const": f.Name}}
	paramsFor := func(h Hypothesis) map[string]any {
		props := map[string]any{}
		required := []string{}
		for _, p := range f.Params(h) {
			props[p.Name] = map[string]any{"$ref": paramRef[p.Sign]}
			if p.Required() {
				required = append(required, p.Name)
			}
		}
		return map[string]any{"$comment": f.Formula, "properties": props, "required": required, "additionalProperties": false}
	}
	if !f.UsesKnots {
		return []any{map[string]any{
			"if": map[string]any{"properties": isFamily, "required": []string{"family"}},
			"then": map[string]any{
				"properties": map[string]any{
					"params":  paramsFor(Hypothesis{Family: f.Name}),
					"knots_s": map[string]any{"description": "is only for family knots, not " + f.Name, "not": map[string]any{}},
				},
			},
		}}
	}
	out := []any{map[string]any{
		"if": map[string]any{"properties": isFamily, "required": []string{"family"}},
		"then": map[string]any{
			"$comment": f.Formula,
			"required": []string{"knots_s"},
			"properties": map[string]any{"params": map[string]any{
				"additionalProperties": map[string]any{"$ref": paramRef[Positive]}}},
		},
	}}
	for n := MinKnots; n <= MaxKnots; n++ {
		h := Hypothesis{Family: f.Name, KnotsS: make([]float64, n)}
		out = append(out, map[string]any{
			"if": map[string]any{"properties": map[string]any{"family": map[string]any{"const": f.Name},
				"knots_s": map[string]any{"type": "array", "minItems": n, "maxItems": n}}, "required": []string{"family", "knots_s"}},
			"then": map[string]any{"properties": map[string]any{"params": paramsFor(h)}},
		})
	}
	return out
}

// hypothesisAt reads the family and knot count of a hypothesis object of a
// parsed study file, enough to name its family's parameters.
func hypothesisAt(obj map[string]any) Hypothesis {
	fam, _ := obj["family"].(string)
	h := Hypothesis{Family: fam}
	if ks, ok := obj["knots_s"].([]any); ok {
		h.KnotsS = make([]float64, len(ks))
	}
	return h
}

// studySchemaID is the schema's $id; the compiler resolves $refs against it.
const studySchemaID = "urn:discrimen:study.schema.json"

// StudySchema returns a copy of the study file's JSON Schema (draft 2020-12).
func StudySchema() []byte { return bytes.Clone(studySchemaJSON) }

type compiledSchema struct {
	schema *jsonschema.Schema
	doc    any // the schema document, to read bounds and descriptions for messages
}

// loadSchema compiles the embedded schema once. A schema that does not
// compile is a build defect, not a data failure, hence the panic.
var loadSchema = sync.OnceValue(func() compiledSchema {
	doc, err := jsonschema.UnmarshalJSON(bytes.NewReader(studySchemaJSON))
	if err != nil {
		panic("models: embedded study schema is not JSON: " + err.Error())
	}
	c := jsonschema.NewCompiler()
	if err := c.AddResource(studySchemaID, doc); err != nil {
		panic("models: embedded study schema: " + err.Error())
	}
	sch, err := c.Compile(studySchemaID)
	if err != nil {
		panic("models: embedded study schema does not compile: " + err.Error())
	}
	return compiledSchema{schema: sch, doc: doc}
})

// problemKind records where a problem came from, so LoadStudy can tell which
// semantic problems repeat a schema problem.
type problemKind int

const (
	kindSemantic      problemKind = iota
	kindSchema                    // a schema problem about one value or object
	kindSchemaArray               // a schema problem about an array's length or repeats
	kindDecode                    // the value passed the schema but does not fit its Go type
	kindSchemaUnknown             // unknown fields of an object: says nothing of the fields it has
	kindLimit                     // a value over a size cap (limits.go); nothing else is checked
)

type located struct {
	Problem
	kind problemKind
}

// ValidateSchema checks raw study bytes against the study file's JSON Schema
// and returns every problem, with paths in our dotted form
// ("designs[0].validity"). Bytes that are not one JSON value give a single
// problem with an empty path.
func ValidateSchema(data []byte) []Problem {
	lp, _ := schemaProblems(data)
	return plain(lp)
}

func plain(lp []located) []Problem {
	if len(lp) == 0 {
		return nil
	}
	out := make([]Problem, len(lp))
	for i, p := range lp {
		out[i] = p.Problem
	}
	return out
}

// schemaProblems returns the schema problems; ok is false when data is not JSON.
func schemaProblems(data []byte) (problems []located, ok bool) {
	inst, err := jsonschema.UnmarshalJSON(bytes.NewReader(data))
	if err != nil {
		return []located{{Problem: Problem{Path: "", Problem: notJSONMessage(data, err)}, kind: kindSchema}}, false
	}
	if lp := limitProblems(inst); lp != nil {
		// Over a size cap: nothing else is checked, so the work stays
		// linear in the file (limits.go).
		for _, p := range lp {
			problems = append(problems, located{Problem: p, kind: kindLimit})
		}
		sortProblems(problems)
		return problems, true
	}
	cs := loadSchema()
	err = cs.schema.Validate(inst)
	if err == nil {
		return nil, true
	}
	var ve *jsonschema.ValidationError
	if !errors.As(err, &ve) {
		return []located{{Problem: Problem{Path: "", Problem: err.Error()}, kind: kindSchema}}, true
	}
	var leaves []*jsonschema.ValidationError
	collectLeaves(ve, &leaves)
	seen := map[Problem]bool{}
	// Unknown fields of one object can be reported by more than one schema
	// object (the object's own properties and a branch for its dist): they
	// make one problem, naming every unknown field and the fields every
	// branch allows.
	type unknown struct {
		loc     location
		extra   map[string]bool
		allowed []string // nil until a schema object lists properties
	}
	unknowns := map[string]*unknown{}
	var order []string
	for _, leaf := range leaves {
		if ap, isAP := leaf.ErrorKind.(*kind.AdditionalProperties); isAP {
			loc := resolve(inst, leaf.InstanceLocation)
			u, ok := unknowns[loc.path()]
			if !ok {
				u = &unknown{loc: loc, extra: map[string]bool{}}
				unknowns[loc.path()] = u
				order = append(order, loc.path())
			}
			for _, e := range ap.Properties {
				u.extra[e] = true
			}
			if props, ok := schemaAt(cs.doc, leaf.SchemaURL)["properties"].(map[string]any); ok {
				var allowed []string
				for p := range props {
					if u.allowed == nil || slices.Contains(u.allowed, p) {
						allowed = append(allowed, p)
					}
				}
				u.allowed = allowed
			}
			continue
		}
		p := describe(cs.doc, inst, leaf)
		if seen[p.Problem] {
			continue
		}
		seen[p.Problem] = true
		problems = append(problems, p)
	}
	for _, path := range order {
		u := unknowns[path]
		extra := make([]string, 0, len(u.extra))
		for e := range u.extra {
			extra = append(extra, e)
		}
		problems = append(problems, located{Problem: Problem{Path: path, Problem: extraMessage(u.loc, u.allowed, extra)}, kind: kindSchemaUnknown})
	}
	sortProblems(problems)
	return problems, true
}

func collectLeaves(e *jsonschema.ValidationError, out *[]*jsonschema.ValidationError) {
	if len(e.Causes) == 0 {
		*out = append(*out, e)
		return
	}
	for _, c := range e.Causes {
		collectLeaves(c, out)
	}
}

// notJSONMessage says where the bytes stop being JSON, by line and column.
func notJSONMessage(data []byte, err error) string {
	var se *json.SyntaxError
	if errors.As(err, &se) {
		line, col := lineCol(data, se.Offset)
		return fmt.Sprintf("the file is not valid JSON: line %d, column %d: %s", line, col, strings.TrimPrefix(se.Error(), "json: "))
	}
	if strings.Contains(err.Error(), "after top-level value") {
		return "the file is not valid JSON: data follows the study object"
	}
	if strings.Contains(err.Error(), "EOF") {
		return "the file is not valid JSON: it ends before the study object is complete"
	}
	return "the file is not valid JSON: " + strings.TrimPrefix(err.Error(), "json: ")
}

func lineCol(data []byte, offset int64) (line, col int) {
	if offset > int64(len(data)) {
		offset = int64(len(data))
	}
	line, col = 1, 1
	for _, b := range data[:offset] {
		if b == '\n' {
			line++
			col = 1
		} else {
			col++
		}
	}
	// Offset points just past the offending byte.
	if col > 1 {
		col--
	}
	return line, col
}

// location is an instance location resolved against the document, so that
// array indices and object keys print differently.
type location struct {
	tokens  []string
	isIndex []bool
	values  []any // values[i] is the value at tokens[:i]; values[len(tokens)] the leaf
}

func resolve(inst any, tokens []string) location {
	loc := location{tokens: tokens, isIndex: make([]bool, len(tokens)), values: make([]any, len(tokens)+1)}
	v := inst
	loc.values[0] = v
	for i, t := range tokens {
		switch c := v.(type) {
		case []any:
			loc.isIndex[i] = true
			n, err := strconv.Atoi(t)
			if err == nil && n >= 0 && n < len(c) {
				v = c[n]
			} else {
				v = nil
			}
		case map[string]any:
			v = c[t]
		default:
			v = nil
		}
		loc.values[i+1] = v
	}
	return loc
}

var identRE = regexp.MustCompile(`^[A-Za-z_][A-Za-z0-9_]*$`)

func (l location) path() string { return l.pathTo(len(l.tokens)) }

func (l location) pathTo(n int) string {
	var b strings.Builder
	for i, t := range l.tokens[:n] {
		switch {
		case l.isIndex[i]:
			b.WriteString("[" + t + "]")
		case identRE.MatchString(t):
			if b.Len() > 0 {
				b.WriteByte('.')
			}
			b.WriteString(t)
		default:
			q, _ := json.Marshal(t)
			b.WriteString("[" + string(q) + "]")
		}
	}
	return b.String()
}

func (l location) leaf() any { return l.values[len(l.tokens)] }

// objectAt returns the value at tokens[:n] if it is an object.
func (l location) objectAt(n int) map[string]any {
	if n < 0 || n > len(l.tokens) {
		return nil
	}
	m, _ := l.values[n].(map[string]any)
	return m
}

// name is the value's key with the indices after it ("cti_ms",
// "values[2]"), for naming its elements.
func (l location) name() string {
	n := len(l.tokens)
	j := n - 1
	for j >= 0 && l.isIndex[j] {
		j--
	}
	var b strings.Builder
	if j >= 0 {
		b.WriteString(l.tokens[j])
	}
	for _, t := range l.tokens[j+1 : n] {
		b.WriteString("[" + t + "]")
	}
	return b.String()
}

// subject names the value a message is about: its key, an indexed element
// ("cti_ms[2]"), or "parent key" for the generic keys of priors and
// parameters ("tau min", "lapse max").
func (l location) subject() string {
	n := len(l.tokens)
	if n == 0 {
		return "study"
	}
	last := l.tokens[n-1]
	if l.isIndex[n-1] {
		// the nearest key with the indices after it, and for a vary value
		// the field it varies: "cti_ms[2]", "values[1] (streams)"
		s := l.name()
		j := n - 1
		for j >= 0 && l.isIndex[j] {
			j--
		}
		if j >= 0 && l.tokens[j] == "values" {
			if f, ok := l.objectAt(j)["field"].(string); ok {
				s += " (" + f + ")"
			}
		}
		return s
	}
	switch last {
	case "value", "min", "max", "mean", "sd", "mu", "sigma", "dist":
		if n >= 2 && !l.isIndex[n-2] {
			return l.tokens[n-2] + " " + last
		}
	}
	return last
}

// isParams reports whether the value at tokens[:n] is hypotheses[i].params.
func (l location) isParams(n int) bool {
	return n == 3 && l.tokens[0] == "hypotheses" && l.isIndex[1] && l.tokens[2] == "params"
}

// schemaAt returns the schema object at the fragment of a schema URL.
func schemaAt(doc any, schemaURL string) map[string]any {
	_, frag, _ := strings.Cut(schemaURL, "#")
	if f, err := url.PathUnescape(frag); err == nil {
		frag = f
	}
	v := doc
	for _, tok := range strings.Split(strings.TrimPrefix(frag, "/"), "/") {
		if tok == "" {
			continue
		}
		tok = strings.ReplaceAll(strings.ReplaceAll(tok, "~1", "/"), "~0", "~")
		switch c := v.(type) {
		case map[string]any:
			v = c[tok]
		case []any:
			n, err := strconv.Atoi(tok)
			if err != nil || n < 0 || n >= len(c) {
				return nil
			}
			v = c[n]
		default:
			return nil
		}
	}
	m, _ := v.(map[string]any)
	return m
}

// display renders an instance value for a message, cut to a readable length.
func display(v any) string {
	var s string
	switch x := v.(type) {
	case json.Number:
		s = x.String()
	case nil:
		s = "null"
	default:
		b, err := json.Marshal(x)
		if err != nil {
			s = fmt.Sprint(x)
		} else {
			s = string(b)
		}
	}
	if r := []rune(s); len(r) > 60 {
		s = string(r[:57]) + "..."
	}
	return s
}

func numText(v any) (string, bool) {
	switch x := v.(type) {
	case json.Number:
		return x.String(), true
	case float64:
		return strconv.FormatFloat(x, 'g', -1, 64), true
	}
	return "", false
}

// rangeText renders the bounds a schema object places on a number:
// "in 2..6" for integers, "in (0, 1]" for reals, "> 0", ">= 1".
func rangeText(s map[string]any) string {
	lo, hasLo := numText(s["minimum"])
	loOpen := false
	if x, ok := numText(s["exclusiveMinimum"]); ok {
		lo, hasLo, loOpen = x, true, true
	}
	hi, hasHi := numText(s["maximum"])
	hiOpen := false
	if x, ok := numText(s["exclusiveMaximum"]); ok {
		hi, hasHi, hiOpen = x, true, true
	}
	switch {
	case hasLo && hasHi:
		if s["type"] == "integer" && !loOpen && !hiOpen {
			return "in " + lo + ".." + hi
		}
		l, r := "[", "]"
		if loOpen {
			l = "("
		}
		if hiOpen {
			r = ")"
		}
		return "in " + l + lo + ", " + hi + r
	case hasLo && loOpen:
		return "> " + lo
	case hasLo:
		return ">= " + lo
	case hasHi && hiOpen:
		return "< " + hi
	case hasHi:
		return "<= " + hi
	}
	return "in range"
}

func article(t string) string {
	switch t {
	case "integer", "array", "object":
		return "an " + t
	case "null":
		return "null"
	}
	return "a " + t
}

func quoteAll(names []string) string {
	q := make([]string, len(names))
	for i, n := range names {
		q[i] = strconv.Quote(n)
	}
	return strings.Join(q, ", ")
}

// describe turns one leaf error of the schema validator into our Problem.
func describe(doc any, inst any, e *jsonschema.ValidationError) located {
	loc := resolve(inst, e.InstanceLocation)
	subj := loc.subject()
	sch := schemaAt(doc, e.SchemaURL)
	k := kindSchema
	var msg string
	switch ek := e.ErrorKind.(type) {
	case *kind.Type:
		want := make([]string, len(ek.Want))
		for i, w := range ek.Want {
			want[i] = article(w)
		}
		msg = fmt.Sprintf("%s must be %s, got %s", subj, strings.Join(want, " or "), display(loc.leaf()))
		if n, ok := loc.leaf().(json.Number); ok && strings.Contains(loc.path(), "cti_ms[") {
			if v, err := n.Float64(); err == nil && v > 0 && v < 10 {
				msg += "; cti_ms is in milliseconds: were seconds written?"
			}
		}
	case *kind.Enum:
		want := make([]string, len(ek.Want))
		for i, w := range ek.Want {
			want[i] = fmt.Sprint(w)
		}
		msg = fmt.Sprintf("%s must be one of %s, got %s", subj, strings.Join(want, ", "), display(loc.leaf()))
	case *kind.Minimum, *kind.Maximum, *kind.ExclusiveMinimum, *kind.ExclusiveMaximum:
		msg = fmt.Sprintf("%s must be %s, got %s", subj, rangeText(sch), display(loc.leaf()))
	case *kind.MinItems, *kind.MaxItems:
		k = kindSchemaArray
		n := 0
		if a, ok := loc.leaf().([]any); ok {
			n = len(a)
		}
		lo, hi := -1, -1
		if x, ok := numText(sch["minItems"]); ok {
			lo, _ = strconv.Atoi(x)
		}
		if x, ok := numText(sch["maxItems"]); ok {
			hi, _ = strconv.Atoi(x)
		}
		msg = countText(subj, lo, hi, n)
	case *kind.UniqueItems:
		k = kindSchemaArray
		i, j := ek.Duplicates[0], ek.Duplicates[1]
		var v any
		if a, ok := loc.leaf().([]any); ok && j < len(a) {
			v = a[j]
		}
		name := loc.name()
		msg = fmt.Sprintf("%s must not repeat a value: %s[%d] and %s[%d] are both %s", subj, name, i, name, j, display(v))
	case *kind.MinLength:
		msg = fmt.Sprintf("%s must not be empty", subj)
	case *kind.Required:
		msg = requiredMessage(loc, ek.Missing)
	case *kind.AdditionalProperties:
		var allowed []string
		if props, ok := sch["properties"].(map[string]any); ok {
			for p := range props {
				allowed = append(allowed, p)
			}
		}
		msg = extraMessage(loc, allowed, ek.Properties)
		k = kindSchemaUnknown
	case *kind.Not:
		d, _ := sch["description"].(string)
		if d == "" {
			d = "is not allowed here"
		}
		msg = subj + " " + d
	case *kind.FalseSchema:
		msg = subj + " is not allowed here"
	case *kind.Pattern:
		msg = fmt.Sprintf("%s must match the pattern %s, got %s", subj, ek.Want, display(loc.leaf()))
	default:
		msg = subj + ": " + e.ErrorKind.LocalizedString(message.NewPrinter(language.English))
	}
	return located{Problem: Problem{Path: loc.path(), Problem: msg}, kind: k}
}

func requiredMessage(loc location, missing []string) string {
	n := len(loc.tokens)
	obj := loc.objectAt(n)
	switch {
	case loc.isParams(n):
		fam, _ := loc.objectAt(2)["family"].(string)
		return familyNeedsMessage(fam, missing)
	case n == 4 && loc.isParams(3):
		return paramNeedsMessage(loc.tokens[3], missing)
	}
	if d, ok := obj["dist"].(string); ok {
		return fmt.Sprintf("%s: dist %s needs %s", loc.subject(), d, joinNames(missing))
	}
	return fmt.Sprintf("%s needs %s", loc.subject(), joinFields(missing))
}

func joinFields(names []string) string {
	if len(names) == 1 {
		return "field " + strconv.Quote(names[0])
	}
	return "fields " + quoteAll(names)
}

func joinNames(names []string) string {
	return strings.Join(names, " and ")
}

func familyNeedsMessage(family string, missing []string) string {
	sort.Strings(missing)
	if len(missing) == 1 {
		return fmt.Sprintf("family %s needs parameter %s", family, missing[0])
	}
	return fmt.Sprintf("family %s needs parameters %s", family, strings.Join(missing, ", "))
}

func paramNeedsMessage(name string, missing []string) string {
	return fmt.Sprintf("%s needs value (fixed) or min and max (free); missing %s", name, joinNames(missing))
}

func extraMessage(loc location, allowed []string, extra []string) string {
	n := len(loc.tokens)
	sort.Strings(extra)
	if loc.isParams(n) {
		return unknownParamsMessage(hypothesisAt(loc.objectAt(2)), extra)
	}
	allowed = slices.Clone(allowed)
	sort.Strings(allowed)
	noun := "field"
	if len(extra) > 1 {
		noun = "fields"
	}
	if d, ok := loc.objectAt(n)["dist"].(string); ok {
		return fmt.Sprintf("%s: dist %s takes no %s %s; allowed: %s", loc.subject(), d, noun, quoteAll(extra), strings.Join(allowed, ", "))
	}
	return fmt.Sprintf("unknown %s %s; allowed: %s", noun, quoteAll(extra), strings.Join(allowed, ", "))
}

func unknownParamsMessage(h Hypothesis, extra []string) string {
	family := h.Family
	allowed := "(none: the family is unknown)"
	if f, ok := LookupFamily(family); ok {
		allowed = strings.Join(ParamNames(f.Params(h)), ", ")
		if f.UsesKnots {
			allowed = "one level per entry of knots_s"
			if len(h.KnotsS) > 0 {
				allowed += ": " + strings.Join(ParamNames(f.Params(h)), ", ")
			}
		}
	}
	noun := "parameter"
	if len(extra) > 1 {
		noun = "parameters"
	}
	verb := "is"
	if len(extra) > 1 {
		verb = "are"
	}
	return fmt.Sprintf("%s %s %s not allowed for family %s; allowed: %s", noun, quoteAll(extra), verb, family, allowed)
}
