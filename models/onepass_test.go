package models

import (
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/google/go-cmp/cmp"
)

// TestOnePassUnknownFieldAndRangeErrors: an unknown field and two range
// errors (one the schema finds, one only the semantic pass finds) are all
// reported by one LoadStudy.
func TestOnePassUnknownFieldAndRangeErrors(t *testing.T) {
	data := []byte(`{
	  "designs": [{"name": "harbour", "participant": 20, "cti_ms": [300, 625, 900], "validity": 1.5}],
	  "hypotheses": [
	    {"family": "constant", "params": {"level": {"min": 0.2, "max": 1.8}}},
	    {"family": "linear", "params": {"slope": {"min": 0, "max": 2}}}
	  ]
	}`)
	_, err := LoadStudy(data)
	want := []Problem{
		{"designs[0]", `unknown field "participant"; allowed: agent, cti_ms, cti_weights, cue_ms, eeg_bin_ms, epoch_ms, items, iti_ms, measurement, measures, name, participants, presentation_ms, response_window_ms, streams, trials_per_cti, validity, vary`},
		{"designs[0].cti_ms[1]", "cti_ms[1] must be a whole multiple of epoch_ms = 50 (the default), got 625"},
		{"designs[0].validity", "validity must be in (0, 1], got 1.5"},
	}
	if d := cmp.Diff(want, problemsOf(t, err)); d != "" {
		t.Errorf("(-want +got):\n%s", d)
	}
}

// TestOnePassWrongTypes: a value of the wrong type is reported and left
// out; the rest of the file is still checked, element indices kept.
func TestOnePassWrongTypes(t *testing.T) {
	data := []byte(`{
	  "seed": "seven",
	  "designs": [{"streams": "three", "cti_ms": ["a", 300, 625], "trials_per_cti": 4e1}],
	  "hypotheses": [
	    {"family": "constant", "params": {"level": {"min": 0.2, "max": "high"}}},
	    {"family": "saturating", "params": {"tau": {"min": 1, "max": 0.5}}}
	  ]
	}`)
	_, err := LoadStudy(data)
	got := problemsOf(t, err)
	paths := map[string]int{}
	for _, p := range got {
		paths[p.Path]++
		if strings.Contains(p.Problem, "9223372036854775807") {
			t.Errorf("%s: %s names Go's integer limit", p.Path, p.Problem)
		}
	}
	for _, want := range []string{"seed", "designs[0].streams", "designs[0].cti_ms[0]", "designs[0].cti_ms[2]", "designs[0].trials_per_cti",
		"hypotheses[0].params.level.max", "hypotheses[1].params.tau"} {
		if paths[want] != 1 {
			t.Errorf("%d problems at %s, want 1; all: %v", paths[want], want, got)
		}
	}
	if len(got) != 7 {
		t.Errorf("%d problems, want 7: %v", len(got), err)
	}
}

// TestInvalidStudiesOneMessagePerPath: no path of any invalid study in
// testdata gets two messages.
func TestInvalidStudiesOneMessagePerPath(t *testing.T) {
	files, err := filepath.Glob(filepath.Join(invalidDir, "*.json"))
	if err != nil || len(files) < 10 {
		t.Fatalf("%d files, %v", len(files), err)
	}
	for _, f := range files {
		data, err := os.ReadFile(f)
		if err != nil {
			t.Fatal(err)
		}
		_, err = LoadStudy(data)
		if err == nil {
			t.Errorf("%s: accepted", f)
			continue
		}
		seen := map[string]string{}
		for _, p := range problemsOf(t, err) {
			if prev, dup := seen[p.Path]; dup {
				t.Errorf("%s: path %q has two messages:\n  %s\n  %s", filepath.Base(f), p.Path, prev, p.Problem)
			}
			seen[p.Path] = p.Problem
		}
	}
}

// TestUnknownFieldsOneMessage: an object whose unknown fields two schema
// objects report (its own properties and its dist's branch) gets one
// message naming the fields its dist allows.
func TestUnknownFieldsOneMessage(t *testing.T) {
	data := []byte(`{
	  "designs": [{"measurement": {"lapse": {"dist": "fixed", "value": 0.01, "mean": 1, "bogus": 2}}}],
	  "hypotheses": [
	    {"family": "constant", "params": {"level": {"min": 0.2, "max": 1.8, "generate": {"dist": "uniform", "mean": 1, "sd": 0.2}}}},
	    {"family": "linear", "params": {"slope": {"min": 0, "max": 2}}}
	  ]
	}`)
	_, err := LoadStudy(data)
	want := []Problem{
		{"designs[0].measurement.lapse", `lapse: dist fixed takes no fields "bogus", "mean"; allowed: dist, value`},
		{"hypotheses[0].params.level.generate", `generate: dist uniform takes no fields "mean", "sd"; allowed: dist, max, min`},
	}
	if d := cmp.Diff(want, problemsOf(t, err)); d != "" {
		t.Errorf("(-want +got):\n%s", d)
	}
}

// TestDefaultsNamed: a problem that comes from a default says so.
func TestDefaultsNamed(t *testing.T) {
	data := []byte(`{
	  "designs": [{"name": "d", "participants": 1, "cti_ms": [50], "measures": ["rt", "eeg"]}],
	  "hypotheses": [
	    {"family": "constant", "params": {"level": {"min": 0.2, "max": 1.8}}},
	    {"family": "linear", "params": {"slope": {"min": 0, "max": 2}}}
	  ]
	}`)
	_, err := LoadStudy(data)
	want := []Problem{
		{"designs[0].eeg_bin_ms", "eeg_bin_ms must be <= the shortest CTI (50 ms) when eeg is measured, got 100 (eeg_bin_ms is not in the file: that is its default)"},
		{"replication.group_sizes[0]", `group_sizes[0] = 2 must be <= participants of every design; design "d" has 1 (group_sizes is not in the file and defaults to [2]: 5, 10, 20, ... up to half the smallest design's participants, at least 2)`},
	}
	if d := cmp.Diff(want, problemsOf(t, err)); d != "" {
		t.Errorf("(-want +got):\n%s", d)
	}
}

const subRangeHyps = `"designs": [{"name": "d", "participants": 4}], "replication": {"group_sizes": [2]}, "hypotheses": [
  {"family": "constant", "params": {"level": {"min": 0.2, "max": 1.8}}},`

// TestGenerateSubRange: uniform, loguniform and normal take a generating
// sub-range inside the fit range; draws lie inside it; bounds outside the
// fit range, reversed bounds and a normal mean outside the range are
// errors at their path.
func TestGenerateSubRange(t *testing.T) {
	for _, gen := range []string{
		`{"dist": "uniform", "min": 0.05, "max": 0.3}`,
		`{"dist": "loguniform", "min": 0.05, "max": 0.3}`,
		`{"dist": "normal", "mean": 0.2, "sd": 0.5, "min": 0.05, "max": 0.3}`,
	} {
		s, err := LoadStudy([]byte(`{` + subRangeHyps + `
		  {"family": "saturating", "params": {"tau": {"min": 0.02, "max": 0.6, "generate": ` + gen + `}}}]}`))
		if err != nil {
			t.Fatalf("%s: %v", gen, err)
		}
		p := s.Hypotheses[1].Params["tau"]
		lo, hi := math.Inf(1), math.Inf(-1)
		for i := 1; i < 1000; i++ {
			v := p.Quantile(float64(i) / 1000)
			lo, hi = math.Min(lo, v), math.Max(hi, v)
		}
		if lo < 0.05 || hi > 0.3 || lo > 0.06 || hi < 0.29 {
			t.Errorf("%s: draws span [%g, %g], want inside and filling [0.05, 0.3]", gen, lo, hi)
		}
	}
	cases := []struct{ gen, path, fragment string }{
		{`{"dist": "uniform", "min": 0.01, "max": 0.3}`, "hypotheses[1].params.tau.generate.min", "generate min must lie within the fit's range [min, max] = [0.02, 0.6], got 0.01"},
		{`{"dist": "uniform", "min": 0.1, "max": 0.9}`, "hypotheses[1].params.tau.generate.max", "generate max must lie within the fit's range [min, max] = [0.02, 0.6], got 0.9"},
		{`{"dist": "loguniform", "min": 0.4, "max": 0.3}`, "hypotheses[1].params.tau.generate", "generate min must be < generate max (the generating range), got [0.4, 0.3]"},
		{`{"dist": "normal", "mean": 0.9, "sd": 0.1}`, "hypotheses[1].params.tau.generate.mean", "generate mean = 0.9 must lie within the fit's range [min, max] = [0.02, 0.6]"},
		{`{"dist": "normal", "mean": 0.5, "sd": 0.1, "max": 0.4}`, "hypotheses[1].params.tau.generate.mean", "generate mean = 0.5 must lie within the generating range [0.02, 0.4]"},
	}
	for _, tc := range cases {
		_, err := LoadStudy([]byte(`{` + subRangeHyps + `
		  {"family": "saturating", "params": {"tau": {"min": 0.02, "max": 0.6, "generate": ` + tc.gen + `}}}]}`))
		if err == nil {
			t.Errorf("%s: accepted", tc.gen)
			continue
		}
		ps := problemsOf(t, err)
		if len(ps) != 1 || ps[0].Path != tc.path || !strings.Contains(ps[0].Problem, tc.fragment) {
			t.Errorf("%s: problems %v, want one at %s containing %q", tc.gen, ps, tc.path, tc.fragment)
		}
	}
}

// TestWarnings: a time parameter in milliseconds and CTIs in seconds are
// warnings, not errors; every study in testdata has none.
func TestWarnings(t *testing.T) {
	s, warnings, err := CheckStudy([]byte(`{
	  "designs": [{"name": "d", "participants": 4, "epoch_ms": 1, "cti_ms": [1, 2, 3], "eeg_bin_ms": 1, "presentation_ms": 400}],
	  "replication": {"group_sizes": [2]},
	  "hypotheses": [
	    {"family": "logistic", "params": {"midpoint": {"min": 200, "max": 1200}, "width": {"value": 0.1}}},
	    {"family": "saturating", "params": {"tau": {"value": 0.2}}}
	  ]}`))
	if err != nil {
		t.Fatal(err)
	}
	want := []Problem{
		{"designs[0].cti_ms", "every CTI is below 10 ms (the longest is 3 ms); cti_ms are in milliseconds: were seconds written?"},
		{"hypotheses[0].params.midpoint", `midpoint range [200, 1200] s reaches beyond the longest CTI + response window of any design (1.503 s, design "d"); midpoint is in seconds: were milliseconds written?`},
	}
	if d := cmp.Diff(want, warnings); d != "" {
		t.Errorf("(-want +got):\n%s", d)
	}
	if d := cmp.Diff(want, s.Warnings()); d != "" {
		t.Errorf("Study.Warnings (-want +got):\n%s", d)
	}
	files, _ := filepath.Glob("../testdata/studies/*.json")
	for _, f := range files {
		data, err := os.ReadFile(f)
		if err != nil {
			t.Fatal(err)
		}
		_, w, err := CheckStudy(data)
		if err != nil || len(w) != 0 {
			t.Errorf("%s: err %v, warnings %v", f, err, w)
		}
	}
}
