package models

import (
	"encoding/json"
	"errors"
	"fmt"
	"slices"
	"strings"
	"testing"
)

// studyWith returns a valid study file whose first design is the given
// JSON object members (without braces), for the cap tests.
func studyWith(design string) []byte {
	return []byte(`{"name": "berth-watch (invented scenario)", "designs": [{"name": "harbour-radio", "participants": 10` + design + `}],
 "hypotheses": [{"name": "steady", "family": "constant", "params": {"level": {"min": 0.2, "max": 1.8}}},
                {"name": "ramp", "family": "linear", "params": {"slope": {"min": 0, "max": 2}}}],
 "replication": {"group_sizes": [5]}}`)
}

// varyValues is the vary member of a design with one block of n
// participant counts.
func varyValues(n int) string { return `, "vary": [` + varyBlock(n) + `]` }

func varyBlock(n int) string {
	vals := make([]string, n)
	for i := range vals {
		vals[i] = fmt.Sprint(5 + i)
	}
	return `{"field": "participants", "values": [` + strings.Join(vals, ",") + `]}`
}

func overLimit(t *testing.T, file []byte) []Problem {
	t.Helper()
	_, err := LoadStudy(file)
	var ve *ValidationError
	if !errors.As(err, &ve) {
		t.Fatalf("LoadStudy: got %v, want a *ValidationError", err)
	}
	if !ve.OverLimit {
		t.Fatalf("OverLimit = false for %v", ve.Problems)
	}
	return ve.Problems
}

func TestLimits(t *testing.T) {
	long := strings.Repeat("x", MaxNameLength+1)
	cases := []struct {
		name string
		file []byte
		want Problem
	}{
		{"vary block of 20,000 values", studyWith(varyValues(20000)),
			Problem{"designs[0].vary[0].values", "a vary block may have at most 100 values, got 20000"}},
		{"vary block of 101 values", studyWith(varyValues(101)),
			Problem{"designs[0].vary[0].values", "a vary block may have at most 100 values, got 101"}},
		{"design name of 101 characters", []byte(strings.Replace(string(studyWith("")), `"harbour-radio"`, `"`+long+`"`, 1)),
			Problem{"designs[0].name", "a string may be at most 100 characters, got 101"}},
		{"name of 101 characters, 2 bytes each", []byte(strings.Replace(string(studyWith("")), `"berth-watch (invented scenario)"`, `"`+strings.Repeat("é", 101)+`"`, 1)),
			Problem{"name", "a string may be at most 100 characters, got 101"}},
		{"label of 101 characters", studyWith(`, "vary": [{"field": "streams", "values": [4], "labels": ["` + long + `"]}]`),
			Problem{"designs[0].vary[0].labels[0]", "a string may be at most 100 characters, got 101"}},
		{"cti_ms of 1001 entries", studyWith(`, "cti_ms": [` + strings.Repeat("50,", 1000) + `50]`),
			Problem{"designs[0].cti_ms", "an array may have at most 1000 values, got 1001"}},
		{"three blocks of 100 values: 300 variants", studyWith(`, "vary": [` + varyBlock(100) + "," + varyBlock(100) + "," + varyBlock(100) + `]`),
			Problem{"designs", "the designs expand to 300 variants (each vary value makes one; a design without vary blocks is one); the cap is 256 variants per study"}},
		{"nested 13 deep in a vary value", studyWith(`, "vary": [{"field": "cti_ms", "values": [[[[[[[[1]]]]]]]]}]`),
			Problem{"designs[0].vary[0].values[0][0][0][0][0][0][0]", "the file nests 13 levels deep here; the cap is 12 levels"}},
		{"params with 65 members", []byte(strings.Replace(string(studyWith("")), `{"level": {"min": 0.2, "max": 1.8}}`, `{`+members(65)+`}`, 1)),
			Problem{"hypotheses[0].params", "an object may have at most 64 members, got 65"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			got := overLimit(t, c.file)
			if len(got) != 1 || got[0] != c.want {
				t.Errorf("problems = %q, want [%q]", got, c.want)
			}
		})
	}
}

func members(n int) string {
	m := make([]string, n)
	for i := range m {
		m[i] = fmt.Sprintf(`"p%d": {"value": 1}`, i)
	}
	return strings.Join(m, ",")
}

// TestLimitsAtCaps: a file at the caps is checked as usual, not refused.
func TestLimitsAtCaps(t *testing.T) {
	if _, err := LoadStudy(studyWith(varyValues(MaxVaryValues))); err != nil {
		t.Fatalf("a vary block of %d values: %v", MaxVaryValues, err)
	}
	name := strings.Repeat("n", MaxNameLength)
	if _, err := LoadStudy([]byte(strings.Replace(string(studyWith("")), `"harbour-radio"`, `"`+name+`"`, 1))); err != nil {
		t.Fatalf("a name of %d characters: %v", MaxNameLength, err)
	}
}

// TestExpandCaps: Expand refuses a block over the cap without expanding
// it, for callers that do not go through LoadStudy.
func TestExpandCaps(t *testing.T) {
	d := validStudy().Designs[0]
	vals := make([]json.RawMessage, MaxVaryValues+1)
	for i := range vals {
		vals[i] = json.RawMessage(fmt.Sprint(2 + i))
	}
	d.Vary = []Variation{{Field: "participants", Values: vals}}
	_, err := d.Expand()
	var ve *ValidationError
	if !errors.As(err, &ve) || len(ve.Problems) != 1 || ve.Problems[0].Path != "vary[0].values" ||
		ve.Problems[0].Problem != "a vary block may have at most 100 values, got 101" {
		t.Fatalf("Expand: %v", err)
	}
	// Three blocks of 100 are each under the block cap, over the study's.
	d.Vary = []Variation{{Field: "participants", Values: vals[:100]}, {Field: "participants", Values: vals[:100]}, {Field: "participants", Values: vals[:100]}}
	_, err = d.Expand()
	if !errors.As(err, &ve) || len(ve.Problems) != 1 || ve.Problems[0].Path != "vary[2].values" ||
		ve.Problems[0].Problem != "the design's vary blocks reach 300 variants at this block; the cap is 256 variants per study" {
		t.Fatalf("Expand of 300 variants: %v", err)
	}
}

// TestValidateVariantCap: a study built in Go with too many variants is
// refused by Validate too.
func TestValidateVariantCap(t *testing.T) {
	s := validStudy()
	vals := make([]json.RawMessage, 100)
	for i := range vals {
		vals[i] = json.RawMessage(fmt.Sprint(20 + i))
	}
	d := s.Designs[0]
	d.Vary = []Variation{{Field: "participants", Values: vals}}
	for i := range 3 {
		d.Name = fmt.Sprintf("channel-%d", i)
		if i == 0 {
			s.Designs[0] = d
		} else {
			s.Designs = append(s.Designs, d)
		}
	}
	want := Problem{"designs", "the designs expand to 300 variants; the cap is 256 variants per study"}
	if ps := s.Validate(); !slices.Contains(ps, want) {
		t.Errorf("Validate = %v, want %v among them", ps, want)
	}
	if _, err := s.ExpandedDesigns(); err == nil || err.Error() != want.String() {
		t.Errorf("ExpandedDesigns: %v, want %v", err, want)
	}
}

// TestVariantNameLength: a variant named after a long value is refused
// with a hint to label it.
func TestVariantNameLength(t *testing.T) {
	ctis := make([]string, 60)
	for i := range ctis {
		ctis[i] = fmt.Sprint(50 * (i + 1))
	}
	_, err := LoadStudy(studyWith(`, "vary": [{"field": "cti_ms", "values": [[` + strings.Join(ctis, ",") + `]]}]`))
	var ve *ValidationError
	if !errors.As(err, &ve) || ve.OverLimit || len(ve.Problems) != 1 {
		t.Fatalf("LoadStudy: %v", err)
	}
	p := ve.Problems[0]
	if p.Path != "designs[0].vary[0].values[0]" || !strings.Contains(p.Problem, "is 302 characters; the cap is 201: give the vary block labels") {
		t.Errorf("problem = %q", p)
	}
}

// TestProblemCap: at most MaxProblems problems are listed, then a count.
func TestProblemCap(t *testing.T) {
	bad := strings.TrimSuffix(strings.Repeat("-1,", 300), ",")
	_, err := LoadStudy(studyWith(`, "cti_ms": [` + bad + `]`))
	var ve *ValidationError
	if !errors.As(err, &ve) {
		t.Fatalf("LoadStudy: %v", err)
	}
	if len(ve.Problems) != MaxProblems+1 {
		t.Fatalf("%d problems, want %d", len(ve.Problems), MaxProblems+1)
	}
	last := ve.Problems[MaxProblems]
	if last.Path != "" || !strings.HasSuffix(last.Problem, " more problems are not listed (at most 200 are); fix these and check again") {
		t.Errorf("closing problem = %q", last)
	}
}

// TestSchemaCaps: the schema carries the caps an editor can check, with the
// same numbers as limits.go.
func TestSchemaCaps(t *testing.T) {
	var doc map[string]any
	if err := json.Unmarshal(StudySchema(), &doc); err != nil {
		t.Fatal(err)
	}
	defs := doc["$defs"].(map[string]any)
	props := defs["variation"].(map[string]any)["properties"].(map[string]any)
	got := []any{
		doc["properties"].(map[string]any)["name"].(map[string]any)["maxLength"],
		defs["name"].(map[string]any)["maxLength"],
		props["values"].(map[string]any)["maxItems"],
		props["labels"].(map[string]any)["maxItems"],
		props["labels"].(map[string]any)["items"].(map[string]any)["maxLength"],
	}
	want := []any{float64(MaxNameLength), float64(MaxNameLength), float64(MaxVaryValues), float64(MaxVaryValues), float64(MaxNameLength)}
	for i := range want {
		if got[i] != want[i] {
			t.Errorf("schema cap %d = %v, want %v", i, got[i], want[i])
		}
	}
}

// BenchmarkLoadStudyVary measures LoadStudy on one vary block: at the cap
// (checked and expanded in full) and far over it (refused before any
// expansion).
func BenchmarkLoadStudyVary(b *testing.B) {
	for _, n := range []int{MaxVaryValues, 20000} {
		file := studyWith(varyValues(n))
		b.Run(fmt.Sprintf("values=%d", n), func(b *testing.B) {
			b.SetBytes(int64(len(file)))
			b.ReportAllocs()
			for b.Loop() {
				_, err := LoadStudy(file)
				var ve *ValidationError
				if (n > MaxVaryValues) != (errors.As(err, &ve) && ve.OverLimit) {
					b.Fatalf("LoadStudy: %v", err)
				}
			}
		})
	}
}

// BenchmarkLoadStudyAtCaps measures LoadStudy on files as large as the caps
// allow: 100 cti_ms values of 1000 CTIs each (the schema checks every list
// for repeats), 16 designs of 16 values (256 variants, each validated), and
// a design with 2000 bad entries and 200 variants.
func BenchmarkLoadStudyAtCaps(b *testing.B) {
	ctis := make([]string, MaxArrayEntries)
	for i := range ctis {
		ctis[i] = fmt.Sprint(50 * (i + 1))
	}
	list := "[" + strings.Join(ctis, ",") + "]"
	values := make([]string, MaxVaryValues)
	labels := make([]string, MaxVaryValues)
	for i := range values {
		values[i] = list
		labels[i] = fmt.Sprintf(`"ctis-%d"`, i)
	}
	longLists := studyWith(`, "vary": [{"field": "cti_ms", "values": [` + strings.Join(values, ",") + `], "labels": [` + strings.Join(labels, ",") + `]}]`)
	designs := make([]string, 16)
	for i := range designs {
		designs[i] = fmt.Sprintf(`{"name": "channel-%d", "participants": 10, "vary": [%s]}`, i, varyBlock(16))
	}
	manyVariants := []byte(strings.Replace(string(studyWith("")), `{"name": "harbour-radio", "participants": 10}`, strings.Join(designs, ","), 1))
	// A design with 2000 bad entries and 200 variants: its variants are not
	// checked one by one (that cost 180 ms for this 11 KB file).
	bad := make([]string, MaxArrayEntries)
	for i := range bad {
		bad[i] = fmt.Sprint(-i)
	}
	badDesign := studyWith(`, "cti_ms": [` + strings.Join(bad, ",") + `], "cti_weights": [` + strings.Join(bad, ",") + `], "vary": [` +
		varyBlock(100) + `,` + strings.Replace(varyBlock(100), `"participants"`, `"trials_per_cti"`, 1) + `]`)
	for _, c := range []struct {
		name string
		file []byte
	}{{"cti_lists=100x1000", longLists}, {"variants=256", manyVariants}, {"bad_design_variants=200", badDesign}} {
		b.Run(c.name, func(b *testing.B) {
			b.SetBytes(int64(len(c.file)))
			for b.Loop() {
				_, err := LoadStudy(c.file)
				var ve *ValidationError
				if errors.As(err, &ve) && ve.OverLimit {
					b.Fatalf("LoadStudy: %v", err)
				}
			}
		})
	}
}
