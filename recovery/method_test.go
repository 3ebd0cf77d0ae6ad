package recovery

import (
	"encoding/json"
	"reflect"
	"strings"
	"testing"
)

// TestCurrentMethodQuotesTheCode: every field of the method block is the
// constant the code runs with.
func TestCurrentMethodQuotesTheCode(t *testing.T) {
	m := CurrentMethod()
	ints := []struct {
		name      string
		got, want int
	}{
		{"starts", m.Starts, nStarts},
		{"start_spacing", m.StartSpacing, startSpacing},
		{"search_evals_per_dim", m.SearchEvalsPerDim, searchSettings(1).MaxEvals},
		{"search_stall_per_dim", m.SearchStallPerDim, searchSettings(1).Stall},
		{"grid_nodes_1d", m.GridNodes1D, gridPoints[1]},
		{"grid_nodes_2d", m.GridNodes2D, gridPoints[2]},
		{"grid_nodes_3d", m.GridNodes3D, gridPoints[3]},
		{"grid_nodes_4d", m.GridNodes4D, gridPoints[4]},
		{"surrogate_points", m.SurrogatePoints, surrogatePoints},
		{"bms_max_iterations", m.BMSMaxIterations, bmsMaxIter},
		{"group_bootstrap_rounds", m.GroupBootstrapRounds, groupBootstrapRounds},
	}
	for _, c := range ints {
		if c.got != c.want {
			t.Errorf("%s = %d, want %d", c.name, c.got, c.want)
		}
	}
	nm := searchSettings(3)
	floats := []struct {
		name      string
		got, want float64
	}{
		{"rescore_window", m.RescoreWindow, rescoreWindow},
		{"lapse_max", m.LapseMax, lapseMax},
		{"ar_max", m.ARMax, arMax},
		{"search_simplex", m.SearchSimplex, nm.Size},
		{"search_abs_tol", m.SearchAbsTol, nm.Absolute},
		{"search_rel_tol", m.SearchRelTol, nm.Relative},
		{"search_spread", m.SearchSpread, nm.Spread},
		{"se_rough_step", m.SERoughStep, seRoughStep},
		{"se_fine_step", m.SEFineStep, seFineStep},
		{"se_max_change", m.SEMaxChange, hessianMaxSEChange},
		{"se_edge", m.SEEdge, seEdge},
		{"flat_se", m.FlatSE, flatSE},
		{"tie_tolerance", m.TieTolerance, TieTolerance},
		{"bms_tolerance", m.BMSTolerance, bmsTol},
	}
	for _, c := range floats {
		// The same constant on both sides: equal bit for bit.
		if c.got != c.want {
			t.Errorf("%s = %v, want %v", c.name, c.got, c.want)
		}
	}
	if nm.MaxEvals != 3*m.SearchEvalsPerDim || nm.Stall != 3*m.SearchStallPerDim {
		t.Errorf("three dimensions: %d evaluations and stall %d, want %d and %d", nm.MaxEvals, nm.Stall, 3*m.SearchEvalsPerDim, 3*m.SearchStallPerDim)
	}
	// FlatProfile's threshold is flat_se of the range.
	if FlatProfile(0.99*m.FlatSE, 0, 1) || !FlatProfile(1.01*m.FlatSE, 0, 1) {
		t.Errorf("FlatProfile does not switch at flat_se = %v of the range", m.FlatSE)
	}
}

// TestMethodJSON: report.json carries the block under "method" with one
// key per field, every value set, and it decodes back to the same value.
func TestMethodJSON(t *testing.T) {
	r := &Report{Study: "s", Method: CurrentMethod()}
	b, err := r.JSON()
	if err != nil {
		t.Fatal(err)
	}
	var doc map[string]json.RawMessage
	if err := json.Unmarshal(b, &doc); err != nil {
		t.Fatal(err)
	}
	var block map[string]float64
	if err := json.Unmarshal(doc["method"], &block); err != nil {
		t.Fatalf("method block %s: %v", doc["method"], err)
	}
	typ := reflect.TypeOf(Method{})
	if len(block) != typ.NumField() {
		t.Errorf("method block has %d keys, Method %d fields", len(block), typ.NumField())
	}
	for i := range typ.NumField() {
		key, _, _ := strings.Cut(typ.Field(i).Tag.Get("json"), ",")
		if v, ok := block[key]; !ok || v <= 0 {
			t.Errorf("method.%s = %v (present %v), want a positive value", key, v, ok)
		}
	}
	// The inter-trial interval is a design's field (iti_ms), not a
	// method constant: it is in each design's report, not here.
	if _, ok := block["iti_ms"]; ok {
		t.Errorf("method block holds iti_ms; it belongs to the designs")
	}
	for key, want := range map[string]float64{"starts": 3, "lapse_max": 0.5, "ar_max": 0.99, "se_max_change": 0.2, "grid_nodes_1d": 129,
		"grid_nodes_2d": 41, "surrogate_points": 40, "tie_tolerance": 1e-6} {
		if block[key] != want {
			t.Errorf("method.%s = %v, want %v", key, block[key], want)
		}
	}
	var back Report
	if err := json.Unmarshal(b, &back); err != nil {
		t.Fatal(err)
	}
	if back.Method != r.Method {
		t.Errorf("method after a round trip %+v, want %+v", back.Method, r.Method)
	}
}
