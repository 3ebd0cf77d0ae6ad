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
	schemaProbs, isJSON := schemaProblems(data)
	if !isJSON {
		return nil, &ValidationError{Problems: plain(schemaProbs)}
	}
	if len(schemaProbs) > 0 && schemaProbs[0].kind == kindLimit {
		return nil, &ValidationError{Problems: capProblems(plain(schemaProbs)), OverLimit: true}
	}
	s, err := DecodeStudy(data)
	if err != nil {
		// With schema problems present, the decoder failed on one of them;
		// only a value the schema accepts but Go cannot hold adds news.
		// encoding/json names only the first such value; numberProblems
		// finds them all.
		var news []located
		if inst, jerr := jsonschema.UnmarshalJSON(bytes.NewReader(data)); jerr == nil {
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
		sortProblems(schemaProbs)
		return nil, &ValidationError{Problems: capProblems(plain(schemaProbs))}
	}
	all := schemaProbs
	cov := newCoverage(schemaProbs)
	for _, p := range s.Validate() {
		if !cov.covers(p) {
			all = append(all, located{Problem: p, kind: kindSemantic})
		}
	}
	if len(all) > 0 {
		sortProblems(all)
		ve := &ValidationError{Problems: capProblems(plain(all))}
		ve.OverBudget = len(all) == 1 && all[0].Path == "" && s.TotalFits() > MaxFits
		return nil, ve
	}
	return s, nil
}

// coverage answers whether a schema problem already speaks of a value: at
// the same path, or at its parent or child (a missing field is reported on
// its object by the schema and on the field by Validate). Array-length and
// repeat problems cover only their own path, since they say nothing of the
// elements. The paths are kept in sets, so each question costs the length
// of one path, not a pass over every schema problem.
type coverage struct {
	exact   map[string]bool // every schema problem's path
	paths   map[string]bool // canonical paths of value and object problems
	parents map[string]bool // canonical parents of those paths
}

func newCoverage(schemaProbs []located) coverage {
	c := coverage{exact: map[string]bool{}, paths: map[string]bool{}, parents: map[string]bool{}}
	for _, sp := range schemaProbs {
		c.exact[sp.Path] = true
		if sp.kind == kindSchemaArray {
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
		msg := fmt.Sprintf("%s must be a whole number in plain digits (no fraction, no exponent) within %s, got %s", loc.subject(), intLimit(t.Kind()), x)
		if t.Kind() == reflect.Float64 {
			msg = fmt.Sprintf("%s must be a number within ±%s, got %s", loc.subject(), g(math.MaxFloat64), x)
		}
		*out = append(*out, located{Problem: Problem{Path: loc.path(), Problem: msg}, kind: kindDecode})
	}
}

func intLimit(k reflect.Kind) string {
	switch k {
	case reflect.Uint, reflect.Uint8, reflect.Uint16, reflect.Uint32, reflect.Uint64:
		return "[0, " + strconv.FormatUint(math.MaxUint64, 10) + "]"
	}
	return "±" + strconv.FormatInt(math.MaxInt64, 10)
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
			msg = fmt.Sprintf("%s must be a whole number in plain digits (no fraction, no exponent) within %s, got %s", loc.subject(), intLimit(te.Type.Kind()), display(loc.leaf()))
		case reflect.Float32, reflect.Float64:
			msg = fmt.Sprintf("%s must be a number within ±%s, got %s", loc.subject(), g(math.MaxFloat64), display(loc.leaf()))
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
