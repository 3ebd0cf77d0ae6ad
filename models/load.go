package models

// Loading a study file: the schema check, the decode and the semantic
// check, merged into one sorted list of problems with their paths.

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"reflect"
	"slices"
	"sort"
	"strconv"
	"strings"

	"github.com/santhosh-tekuri/jsonschema/v6"
)

// LoadStudy reads a study file: schema check, DecodeStudy, then Validate.
// On failure it returns a *ValidationError holding every problem at once,
// schema and semantic, a semantic problem being left out where it repeats a
// schema problem at the same place. Bytes that are not JSON give that one
// problem.
func LoadStudy(data []byte) (*Study, error) {
	s, _, err := CheckStudy(data)
	return s, err
}

// CheckStudy is LoadStudy that also returns the study's warnings (values
// that are allowed but look like a slip, see Study.Warnings). Every part of
// the file that decodes is checked in the same pass: an unknown field or a
// value of the wrong type is reported and left out, and the rest is
// decoded and validated as if the field were omitted. On failure the
// *ValidationError carries the warnings too.
func CheckStudy(data []byte) (*Study, []Problem, error) {
	schemaProbs, isJSON := schemaProblems(data)
	if !isJSON {
		return nil, nil, &ValidationError{Problems: plain(schemaProbs)}
	}
	if len(schemaProbs) > 0 && schemaProbs[0].kind == kindLimit {
		return nil, nil, &ValidationError{Problems: capProblems(plain(schemaProbs)), OverLimit: true}
	}
	s, err := DecodeStudy(data)
	if err != nil {
		// With schema problems present, the decoder failed on one of them;
		// only a value the schema accepts but Go cannot hold adds news.
		// encoding/json names only the first such value; numberProblems
		// finds them all.
		var news []located
		inst, jerr := jsonschema.UnmarshalJSON(bytes.NewReader(data))
		if jerr == nil {
			numberProblems(inst, inst, reflect.TypeFor[Study](), nil, &news)
		}
		if len(news) == 0 {
			news = []located{decodeProblem(data, err)}
		}
		for _, dp := range news {
			if len(schemaProbs) == 0 || (dp.Path != "" && !newCoverage(schemaProbs).covers(dp.Problem)) {
				schemaProbs = append(schemaProbs, dp)
			}
		}
		// Decode what can be decoded, so its semantics are checked in the
		// same pass.
		s = nil
		if jerr == nil {
			if kept, ok := prune(inst, reflect.TypeFor[Study]()); ok {
				if b, merr := json.Marshal(kept); merr == nil {
					s, _ = DecodeStudy(b)
				}
			}
		}
		if s == nil {
			sortProblems(schemaProbs)
			return nil, nil, &ValidationError{Problems: capProblems(plain(schemaProbs))}
		}
	}
	all := schemaProbs
	cov := newCoverage(schemaProbs)
	for _, p := range s.Validate() {
		if !cov.covers(p) {
			all = append(all, located{Problem: p, kind: kindSemantic})
		}
	}
	warnings := s.Warnings()
	if len(all) > 0 {
		sortProblems(all)
		ve := &ValidationError{Problems: capProblems(plain(all)), Warnings: warnings}
		ve.OverBudget = len(all) == 1 && all[0].Path == "" && s.TotalFits() > MaxFits
		return nil, warnings, ve
	}
	return s, warnings, nil
}

// prune returns the part of a parsed study file (numbers as json.Number)
// that decodes into Go type t: unknown fields are dropped, and so is a
// field whose value has the wrong JSON type or is a number t cannot hold
// (its default fills in); a bad array element becomes the zero value so
// that the other elements keep their indices. ok is false when v itself
// does not fit t.
func prune(v any, t reflect.Type) (any, bool) {
	for t.Kind() == reflect.Pointer {
		t = t.Elem()
	}
	if v == nil || t == reflect.TypeFor[json.RawMessage]() {
		return v, true
	}
	switch t.Kind() {
	case reflect.Struct:
		m, ok := v.(map[string]any)
		if !ok {
			return nil, false
		}
		out := map[string]any{}
		for i := 0; i < t.NumField(); i++ {
			f := t.Field(i)
			name, _, _ := strings.Cut(f.Tag.Get("json"), ",")
			if !f.IsExported() || name == "" || name == "-" {
				continue
			}
			if fv, has := m[name]; has {
				if pv, ok := prune(fv, f.Type); ok {
					out[name] = pv
				}
			}
		}
		return out, true
	case reflect.Map:
		m, ok := v.(map[string]any)
		if !ok {
			return nil, false
		}
		out := map[string]any{}
		for k, ev := range m {
			if pv, ok := prune(ev, t.Elem()); ok {
				out[k] = pv
			}
		}
		return out, true
	case reflect.Slice:
		a, ok := v.([]any)
		if !ok {
			return nil, false
		}
		out := make([]any, len(a))
		for i, ev := range a {
			pv, ok := prune(ev, t.Elem())
			if !ok {
				pv = zeroJSON(t.Elem())
			}
			out[i] = pv
		}
		return out, true
	case reflect.String:
		_, ok := v.(string)
		return v, ok
	case reflect.Bool:
		_, ok := v.(bool)
		return v, ok
	case reflect.Int, reflect.Int64:
		n, ok := v.(json.Number)
		if !ok {
			return nil, false
		}
		_, err := strconv.ParseInt(n.String(), 10, 64)
		return v, err == nil
	case reflect.Uint64:
		n, ok := v.(json.Number)
		if !ok {
			return nil, false
		}
		_, err := strconv.ParseUint(n.String(), 10, 64)
		return v, err == nil
	case reflect.Float64:
		n, ok := v.(json.Number)
		if !ok {
			return nil, false
		}
		_, err := strconv.ParseFloat(n.String(), 64)
		return v, err == nil
	}
	return v, true
}

// zeroJSON is the JSON zero value of Go type t.
func zeroJSON(t reflect.Type) any {
	for t.Kind() == reflect.Pointer {
		t = t.Elem()
	}
	switch t.Kind() {
	case reflect.Struct, reflect.Map:
		return map[string]any{}
	case reflect.Slice:
		return []any{}
	case reflect.String:
		return ""
	case reflect.Bool:
		return false
	}
	return json.Number("0")
}

// coverage answers whether a schema problem already speaks of a value: at
// the same path, or at its parent or child (a missing field is reported on
// its object by the schema and on the field by Validate). Array-length and
// repeat problems cover only their own path, since they say nothing of the
// elements, and so do unknown-field problems, which say nothing of the
// fields the object has. The paths are kept in sets, so each question
// costs the length of one path, not a pass over every schema problem.
type coverage struct {
	exact   map[string]bool // every schema problem's path
	paths   map[string]bool // canonical paths of value and object problems
	parents map[string]bool // canonical parents of those paths
}

func newCoverage(schemaProbs []located) coverage {
	c := coverage{exact: map[string]bool{}, paths: map[string]bool{}, parents: map[string]bool{}}
	for _, sp := range schemaProbs {
		if !(sp.kind == kindSchemaUnknown && sp.Path == "") {
			// (an unknown field of the study object says nothing of its
			// budget, the one semantic problem of the file as a whole)
			c.exact[sp.Path] = true
		}
		if sp.kind == kindSchemaArray || sp.kind == kindSchemaUnknown {
			continue
		}
		segs := splitPath(sp.Path)
		c.paths[strings.Join(segs, "\x00")] = true
		if len(segs) > 0 {
			c.parents[strings.Join(segs[:len(segs)-1], "\x00")] = true
		}
	}
	return c
}

func (c coverage) covers(p Problem) bool {
	if c.exact[p.Path] {
		return true
	}
	segs := splitPath(p.Path)
	// p is a child of a schema problem's path, or its parent.
	if len(segs) > 0 && c.paths[strings.Join(segs[:len(segs)-1], "\x00")] {
		return true
	}
	return c.parents[strings.Join(segs, "\x00")]
}

// splitPath cuts a dotted path into segments: "a.b[2]" → a, b, [2].
func splitPath(p string) []string {
	var out []string
	for i := 0; i < len(p); {
		switch p[i] {
		case '.':
			i++
		case '[':
			j := i + 1
			if j < len(p) && p[j] == '"' {
				// a quoted key: find the closing quote that is not escaped
				for j++; j < len(p) && p[j] != '"'; j++ {
					if p[j] == '\\' {
						j++
					}
				}
			}
			k := strings.IndexByte(p[min(j, len(p)):], ']')
			if k < 0 {
				out = append(out, p[i:])
				return out
			}
			end := min(j, len(p)) + k + 1
			out = append(out, p[i:end])
			i = end
		default:
			j := i
			for j < len(p) && p[j] != '.' && p[j] != '[' {
				j++
			}
			out = append(out, p[i:j])
			i = j
		}
	}
	return out
}

// comparePaths orders paths segment by segment, indices numerically, so
// designs[2] comes before designs[10].
func comparePaths(a, b string) int { return compareSegments(splitPath(a), splitPath(b)) }

func compareSegments(as, bs []string) int {
	for i := 0; i < len(as) && i < len(bs); i++ {
		x, y := as[i], bs[i]
		if x == y {
			continue
		}
		xi, xerr := strconv.Atoi(strings.Trim(x, "[]"))
		yi, yerr := strconv.Atoi(strings.Trim(y, "[]"))
		if strings.HasPrefix(x, "[") && strings.HasPrefix(y, "[") && xerr == nil && yerr == nil {
			return xi - yi
		}
		return strings.Compare(x, y)
	}
	return len(as) - len(bs)
}

func sortProblems(ps []located) {
	// The message breaks ties so the order never depends on the schema
	// validator's map iteration.
	// Each path is split once, not at every comparison.
	type keyed struct {
		segs []string
		p    located
	}
	ks := make([]keyed, len(ps))
	for i, p := range ps {
		ks[i] = keyed{splitPath(p.Path), p}
	}
	sort.SliceStable(ks, func(i, j int) bool {
		if c := compareSegments(ks[i].segs, ks[j].segs); c != 0 {
			return c < 0
		}
		return ks[i].p.Problem.Problem < ks[j].p.Problem.Problem
	})
	for i := range ks {
		ps[i] = ks[i].p
	}
}

// numberProblems walks a parsed study file along the Go type it decodes
// into and reports each number that type cannot hold: an integer field
// written with a fraction or an exponent (3e2, 40.0), or beyond its range,
// and a float beyond float64. Numbers keep their text in json.Number, so
// the check sees what the file says.
func numberProblems(root, v any, t reflect.Type, tokens []string, out *[]located) {
	for t.Kind() == reflect.Pointer {
		t = t.Elem()
	}
	if t == reflect.TypeFor[json.RawMessage]() {
		return // vary values: Expand reports these against their field
	}
	switch x := v.(type) {
	case map[string]any:
		switch t.Kind() {
		case reflect.Struct:
			for i := 0; i < t.NumField(); i++ {
				f := t.Field(i)
				name, _, _ := strings.Cut(f.Tag.Get("json"), ",")
				if fv, ok := x[name]; ok && name != "" && name != "-" {
					numberProblems(root, fv, f.Type, append(slices.Clone(tokens), name), out)
				}
			}
		case reflect.Map:
			keys := make([]string, 0, len(x))
			for k := range x {
				keys = append(keys, k)
			}
			sort.Strings(keys)
			for _, k := range keys {
				numberProblems(root, x[k], t.Elem(), append(slices.Clone(tokens), k), out)
			}
		}
	case []any:
		if t.Kind() == reflect.Slice {
			for i, e := range x {
				numberProblems(root, e, t.Elem(), append(slices.Clone(tokens), strconv.Itoa(i)), out)
			}
		}
	case json.Number:
		var bad bool
		switch t.Kind() {
		case reflect.Int, reflect.Int64:
			_, err := strconv.ParseInt(x.String(), 10, 64)
			bad = err != nil
		case reflect.Uint64:
			_, err := strconv.ParseUint(x.String(), 10, 64)
			bad = err != nil
		case reflect.Float64:
			_, err := strconv.ParseFloat(x.String(), 64)
			bad = err != nil
		default:
			return
		}
		if !bad {
			return
		}
		loc := resolve(root, tokens)
		msg := fmt.Sprintf("%s must be %s, got %s", loc.subject(), intText(t.Kind()), x)
		if t.Kind() == reflect.Float64 {
			msg = fmt.Sprintf("%s must be a finite number (at most %s in size), got %s", loc.subject(), g3(math.MaxFloat64), x)
		}
		*out = append(*out, located{Problem: Problem{Path: loc.path(), Problem: msg}, kind: kindDecode})
	}
}

// intText says what an integer field takes. The schema bounds every
// integer field well inside int64, so the Go type's own limit is not named.
func intText(k reflect.Kind) string {
	switch k {
	case reflect.Uint, reflect.Uint8, reflect.Uint16, reflect.Uint32, reflect.Uint64:
		return "a whole number >= 0 in plain digits (no fraction, no exponent)"
	}
	return "a whole number in plain digits (no fraction, no exponent)"
}

// decodeProblem turns a DecodeStudy error into a problem, finding the path of
// the offending value from the error's byte offset.
func decodeProblem(data []byte, err error) located {
	var te *json.UnmarshalTypeError
	if errors.As(err, &te) {
		inst, _ := jsonschema.UnmarshalJSON(bytes.NewReader(data))
		loc := resolve(inst, tokensAtOffset(data, te.Offset))
		var msg string
		switch te.Type.Kind() {
		case reflect.Int, reflect.Int8, reflect.Int16, reflect.Int32, reflect.Int64,
			reflect.Uint, reflect.Uint8, reflect.Uint16, reflect.Uint32, reflect.Uint64:
			msg = fmt.Sprintf("%s must be %s, got %s", loc.subject(), intText(te.Type.Kind()), display(loc.leaf()))
		case reflect.Float32, reflect.Float64:
			msg = fmt.Sprintf("%s must be a finite number (at most %s in size), got %s", loc.subject(), g3(math.MaxFloat64), display(loc.leaf()))
		default:
			msg = fmt.Sprintf("%s cannot be read as %s, got %s", loc.subject(), te.Type, display(loc.leaf()))
		}
		return located{Problem: Problem{Path: loc.path(), Problem: msg}, kind: kindDecode}
	}
	return located{Problem: Problem{Path: "", Problem: strings.TrimPrefix(err.Error(), "models: study file: ")}, kind: kindDecode}
}

// tokensAtOffset returns the instance location of the scalar that ends at
// byte offset off (encoding/json reports a type error there).
func tokensAtOffset(data []byte, off int64) []string {
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.UseNumber()
	type frame struct {
		array   bool
		index   int
		key     string
		wantKey bool
	}
	var stack []*frame
	cur := func() []string {
		p := make([]string, 0, len(stack))
		for _, f := range stack {
			if f.array {
				p = append(p, strconv.Itoa(f.index))
			} else {
				p = append(p, f.key)
			}
		}
		return p
	}
	done := func() {
		if len(stack) == 0 {
			return
		}
		if top := stack[len(stack)-1]; top.array {
			top.index++
		} else {
			top.wantKey = true
		}
	}
	for {
		tok, err := dec.Token()
		if err != nil {
			return nil
		}
		if len(stack) > 0 {
			if top := stack[len(stack)-1]; !top.array && top.wantKey {
				if k, ok := tok.(string); ok {
					top.key, top.wantKey = k, false
					continue
				}
			}
		}
		switch t := tok.(type) {
		case json.Delim:
			switch t {
			case '{':
				stack = append(stack, &frame{wantKey: true})
			case '[':
				stack = append(stack, &frame{array: true})
			default:
				stack = stack[:len(stack)-1]
				done()
			}
		default:
			if dec.InputOffset() >= off {
				return cur()
			}
			done()
		}
	}
}
