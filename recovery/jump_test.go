package recovery

import (
	"context"
	"math"
	"testing"
)

// TestJumpLocatedOnTwoParameterGrid: on the demo's first design, the
// two-parameter grid of lamp-switch (logistic) has points over tolerance
// that sit at a jump of the exact predictions (an invalid trial flipping
// between a recovered and a misdirected report). The located point is a
// jump: within 1e-3 of each range around it, invalid-trial accuracy at
// some CTI differs by more than 0.3 between two exact predictions.
func TestJumpLocatedOnTwoParameterGrid(t *testing.T) {
	s := loadStudy(t, "../testdata/studies/radio-watch.json")
	s.Designs = s.Designs[:1]
	s.Hypotheses = s.Hypotheses[4:5] // lamp-switch
	c, err := Compile(context.Background(), s, 0)
	if err != nil {
		t.Fatal(err)
	}
	e := c.Surrogate[0][0]
	if e.Hypothesis != "lamp-switch" || !e.Jumps || len(e.JumpPoints) == 0 {
		t.Fatalf("%s: jumps %v, points %v: want a located jump", e.Hypothesis, e.Jumps, e.JumpPoints)
	}
	g := c.grids[0][0]
	pt := e.JumpPoints[0]
	x := []float64{pt[g.Names[0]], pt[g.Names[1]]}
	a, b := make([]float64, g.lay.size()), make([]float64, g.lay.size())
	worst := 0.0
	for i := range x {
		d := 1e-3 * (g.hi[i] - g.lo[i])
		lo, hi := append([]float64(nil), x...), append([]float64(nil), x...)
		lo[i] -= d
		hi[i] += d
		g.Exact(lo, a, nil)
		g.Exact(hi, b, nil)
		for cc := 0; cc < g.lay.C; cc++ {
			worst = math.Max(worst, math.Abs(a[g.lay.iAcc(cc)]-b[g.lay.iAcc(cc)]))
		}
	}
	if worst <= 0.3 {
		t.Errorf("largest change of invalid accuracy around %v is %.3g, want > 0.3 (a jump)", pt, worst)
	}
}
