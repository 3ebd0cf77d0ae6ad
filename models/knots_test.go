package models

import (
	"math"
	"reflect"
	"strings"
	"testing"
)

// TestKnotsMatchesConstant: two knots at equal levels predict exactly what
// constant predicts at that level, γ(t) and the agent's readouts alike.
func TestKnotsMatchesConstant(t *testing.T) {
	d := Design{CTIms: []int{300, 600, 900}, Measures: []string{"rt", "accuracy", "eeg"}}
	d.FillDefaults()
	const level = 0.85
	k := Knots{T: []float64{0.2, 0.7}, K: []float64{level, level}}
	for _, x := range []float64{0, 0.1, 0.2, 0.45, 0.7, 1.3, 5} {
		if got := k.At(x); got != level {
			t.Errorf("knots at t = %g: %v, want exactly %v", x, got, level)
		}
	}
	hk := Hypothesis{Name: "k", Family: "knots", KnotsS: []float64{0.2, 0.7},
		Params: map[string]Param{"k1": {Value: fptr(level)}, "k2": {Value: fptr(level)}}}
	hc := Hypothesis{Name: "c", Family: "constant", Params: map[string]Param{"level": {Value: fptr(level)}}}
	l, err := NewListener(&d)
	if err != nil {
		t.Fatal(err)
	}
	a, err := PredictAt(l, &d, hk, nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	b, err := PredictAt(l, &d, hc, nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	a.Name, a.Family, a.Params = b.Name, b.Family, b.Params
	if !reflect.DeepEqual(a, b) {
		t.Fatalf("knots at equal levels %+v\ndiffer from constant %+v", a, b)
	}
	if len(b.Valid.RTms) != 3 || len(b.Neural.ByCTI) != 3 {
		t.Fatalf("prediction shape %+v", b)
	}
}

// TestKnotsMatchesLinear: knots on a straight line predict what linear
// predicts, within 1e-12, for t >= 0 (the last knot where linear reaches
// high, so both hold high after it).
func TestKnotsMatchesLinear(t *testing.T) {
	low, high, slope := 0.3, 1.8, 1.25 // reaches high at t = 1.2 s
	lin := Linear{Low: low, High: high, Slope: slope}
	ts := []float64{0, 0.35, 0.8, (high - low) / slope}
	ks := make([]float64, len(ts))
	for i, x := range ts {
		ks[i] = low + slope*x
	}
	k := Knots{T: ts, K: ks}
	worst := 0.0
	for i := 0; i <= 3000; i++ {
		x := float64(i) / 1000
		worst = math.Max(worst, math.Abs(k.At(x)-lin.At(x)))
	}
	if worst > 1e-12 {
		t.Errorf("knots on a line differ from linear by up to %g, want <= 1e-12", worst)
	}
}

// TestKnotsValidation: knots_s must be strictly increasing within the
// longest CTI, each knot needs its level within the gain range, and
// knots_s belongs to family knots only; each problem once at its path.
func TestKnotsValidation(t *testing.T) {
	cases := []struct {
		name, hyp, path, fragment string
	}{
		{"not increasing", `{"family": "knots", "knots_s": [0, 0.6, 0.6], "params": {"k1": {"value": 1}, "k2": {"value": 1}, "k3": {"value": 1}}}`,
			"hypotheses[1].knots_s[2]", "strictly increasing: knots_s[2] = 0.6 is not above knots_s[1] = 0.6"},
		{"milliseconds", `{"family": "knots", "knots_s": [0, 600], "params": {"k1": {"value": 1}, "k2": {"value": 1}}}`,
			"hypotheses[1].knots_s[1]", `knots_s[1] = 600 s is beyond the longest CTI of design "d" (1.2 s)`},
		{"level missing", `{"family": "knots", "knots_s": [0, 0.6], "params": {"k1": {"value": 1}}}`,
			"hypotheses[1].params", "family knots needs parameter k2"},
		{"level too many", `{"family": "knots", "knots_s": [0, 0.6], "params": {"k1": {"value": 1}, "k2": {"value": 1}, "k3": {"value": 1}}}`,
			"hypotheses[1].params", `parameter "k3" is not allowed for family knots; allowed: one level per entry of knots_s: k1, k2`},
		{"level outside gain", `{"family": "knots", "knots_s": [0, 0.6], "params": {"k1": {"value": 1}, "k2": {"min": 0.5, "max": 2.5}}}`,
			"hypotheses[1].params.k2", `k2 range [0.5, 2.5] must be within [gain_min, gain_max] of every design; design "d" has [0.1, 2] (the default)`},
		{"no knots", `{"family": "knots", "params": {"k1": {"value": 1}}}`,
			"hypotheses[1]", `needs field "knots_s"`},
		{"one knot", `{"family": "knots", "knots_s": [0.3], "params": {"k1": {"value": 1}}}`,
			"hypotheses[1].knots_s", "knots_s must have 2..12 entries, got 1"},
		{"knots on another family", `{"family": "constant", "knots_s": [0, 0.6], "params": {"level": {"value": 1}}}`,
			"hypotheses[1].knots_s", "knots_s is only for family knots, not constant"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			data := `{"designs": [{"name": "d", "participants": 4}], "hypotheses": [
			  {"family": "constant", "params": {"level": {"min": 0.2, "max": 1.8}}}, ` + tc.hyp + `],
			  "replication": {"group_sizes": [2]}}`
			_, err := LoadStudy([]byte(data))
			if err == nil {
				t.Fatal("accepted")
			}
			ps := problemsOf(t, err)
			if len(ps) != 1 || ps[0].Path != tc.path || !strings.Contains(ps[0].Problem, tc.fragment) {
				t.Fatalf("problems %v, want one at %s containing %q", ps, tc.path, tc.fragment)
			}
		})
	}
	ok := `{"designs": [{"name": "d", "participants": 4}], "hypotheses": [
	  {"family": "constant", "params": {"level": {"min": 0.2, "max": 1.8}}},
	  {"family": "knots", "knots_s": [0, 0.3, 0.6, 1.2], "params": {"k1": {"value": 0.3}, "k2": {"min": 0.2, "max": 1.9}, "k3": {"min": 0.2, "max": 1.9}, "k4": {"value": 1.5}}}],
	  "replication": {"group_sizes": [2]}}`
	s, err := LoadStudy([]byte(ok))
	if err != nil {
		t.Fatal(err)
	}
	if got := strings.Join(s.Hypotheses[1].FreeParams(), ","); got != "k2,k3" {
		t.Errorf("free parameters %s, want k2,k3", got)
	}
	p, err := NewPrecision(s.Hypotheses[1], &s.Designs[0], []float64{0.5, 1.1})
	if err != nil {
		t.Fatal(err)
	}
	// halfway between t = 0.3 (k2 = 0.5) and 0.6 (k3 = 1.1): 0.8
	if got := p.At(0.45); math.Abs(got-0.8) > 1e-15 {
		t.Errorf("γ(0.45) = %v, want 0.8", got)
	}
}

// TestFreeParamsNaturalOrder: with ten or more knots, k2 comes before k10.
func TestFreeParamsNaturalOrder(t *testing.T) {
	h := Hypothesis{Params: map[string]Param{}}
	lo, hi := 0.1, 2.0
	for _, n := range []string{"k10", "k2", "k1", "k11", "k9"} {
		h.Params[n] = Param{Min: &lo, Max: &hi}
	}
	got := strings.Join(h.FreeParams(), ",")
	if want := "k1,k2,k9,k10,k11"; got != want {
		t.Errorf("FreeParams = %s, want %s", got, want)
	}
	for _, c := range []struct {
		a, b string
		want bool
	}{{"midpoint", "width", true}, {"width", "midpoint", false}, {"k02", "k10", true}, {"k10", "k10", false}, {"k1", "k1a", true}} {
		if got := naturalLess(c.a, c.b); got != c.want {
			t.Errorf("naturalLess(%q, %q) = %v, want %v", c.a, c.b, got, c.want)
		}
	}
}
