package recovery

import (
	"context"
	"strings"
	"testing"
)

// knotsStudy is invented (a watch officer listening for berth numbers on
// three radio channels): a steady hypothesis whose true levels are drawn
// from a sub-range away from the fit's bounds, and a knots hypothesis with
// two free knots (a 41² prediction grid), the second drawn from a
// sub-range too.
const knotsStudy = `{
  "name": "knots recovery (invented)", "seed": 11,
  "designs": [{"name": "three-channels", "participants": 6, "trials_per_cti": 30, "cti_ms": [300, 600, 900]}],
  "hypotheses": [
    {"name": "steady", "family": "constant",
     "params": {"level": {"min": 0.2, "max": 1.8, "generate": {"dist": "uniform", "min": 0.6, "max": 1.2}}}},
    {"name": "stepped", "family": "knots", "knots_s": [0, 0.45, 0.9],
     "params": {"k1": {"value": 0.3},
                "k2": {"min": 0.2, "max": 1.9, "generate": {"dist": "normal", "mean": 1, "sd": 0.4, "min": 0.5, "max": 1.5}},
                "k3": {"min": 0.2, "max": 1.9}}}
  ],
  "replication": {"group_sizes": [3]}
}`

// TestKnotsThroughTheEngine runs a knots hypothesis with two free knots
// through the recovery engine; every true value drawn from a generating
// sub-range lies inside it.
func TestKnotsThroughTheEngine(t *testing.T) {
	if testing.Short() {
		t.Skip("builds a 41² prediction grid")
	}
	s := mustStudy(t, knotsStudy)
	rep, err := Run(context.Background(), s, Options{Workers: 2})
	if err != nil {
		t.Fatal(err)
	}
	sub := map[string][2]float64{"steady/level": {0.6, 1.2}, "stepped/k2": {0.5, 1.5}, "stepped/k3": {0.2, 1.9}}
	n := 0
	for _, ds := range rep.Fits[0] {
		gen := ds.Fits[0].Generator
		h := s.Hypotheses[0]
		if gen == s.Hypotheses[1].Name {
			h = s.Hypotheses[1]
		}
		for i, name := range h.FreeParams() {
			r, ok := sub[h.Name+"/"+name]
			if !ok {
				t.Fatalf("no range for %s/%s", h.Name, name)
			}
			if v := ds.Truth.Free[i]; v < r[0] || v > r[1] {
				t.Errorf("%s participant %d: true %s = %g outside its generating range [%g, %g]", h.Name, ds.Fits[0].Participant, name, v, r[0], r[1])
			}
			n++
		}
	}
	// 6 participants × (1 free parameter of steady + 2 of stepped)
	if n != 6*3 {
		t.Errorf("checked %d true values, want 18", n)
	}
	for _, e := range rep.Designs[0].Surrogate {
		t.Logf("grid of %s: %d nodes, ln L error %.3g, over tolerance %v, smooth error %.3g, jumps %v (%d jump points)",
			e.Hypothesis, e.GridNodes, e.LogLikError, e.OverTolerance, e.SmoothError, e.Jumps, len(e.JumpPoints))
	}
	var self int
	for _, pr := range rep.Designs[0].ParamRecovery {
		if pr.Hypothesis == "stepped" {
			self++
			t.Logf("stepped %s: r = %.3g, bias %.3g, RMSE %.3g", pr.Parameter, pr.R, pr.Bias, pr.RMSE)
		}
	}
	if self != 2 {
		t.Errorf("parameter recovery lists %d parameters of stepped, want k2 and k3", self)
	}
}

// TestThreeFreeKnots: three free knots (a 17³ grid) run through the
// engine and are each listed in parameter recovery.
func TestThreeFreeKnots(t *testing.T) {
	if testing.Short() {
		t.Skip("builds a 17³ prediction grid")
	}
	s := mustStudy(t, strings.Replace(knotsStudy, `"k1": {"value": 0.3}`, `"k1": {"min": 0.2, "max": 1.9}`, 1))
	rep, err := Run(context.Background(), s, Options{Workers: 2})
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, pr := range rep.Designs[0].ParamRecovery {
		if pr.Hypothesis == "stepped" {
			names = append(names, pr.Parameter)
			t.Logf("stepped %s: r = %.3g, bias %.3g, RMSE %.3g", pr.Parameter, pr.R, pr.Bias, pr.RMSE)
		}
	}
	if strings.Join(names, ",") != "k1,k2,k3" {
		t.Errorf("parameter recovery of stepped lists %v, want k1, k2, k3", names)
	}
	for _, e := range rep.Designs[0].Surrogate {
		if e.Hypothesis == "stepped" {
			t.Logf("grid of stepped: %d nodes, ln L error %.3g, over tolerance %v, smooth error %.3g, jumps %v", e.GridNodes, e.LogLikError, e.OverTolerance, e.SmoothError, e.Jumps)
			// 17³ = 4913 nodes, plus the refinement's planes (at most as
			// many again).
			if e.GridNodes < 17*17*17 || e.GridNodes > 2*17*17*17 {
				t.Errorf("grid of stepped has %d nodes, want 17³ = 4913 to twice that", e.GridNodes)
			}
		}
	}
}
