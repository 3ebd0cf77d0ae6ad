package recovery

import (
	"context"
	"os"
	"slices"
	"testing"

	"discrimen/models"
)

// demoTwoParameterGrid builds the prediction grid of the demo's
// two-parameter hypothesis (lamp-switch, logistic) on its first design.
func demoTwoParameterGrid(t *testing.T, workers int) *PredictionGrid {
	t.Helper()
	data, err := os.ReadFile("../testdata/studies/radio-watch.json")
	if err != nil {
		t.Fatal(err)
	}
	st, err := models.LoadStudy(data)
	if err != nil {
		t.Fatal(err)
	}
	designs, err := st.ExpandedDesigns()
	if err != nil {
		t.Fatal(err)
	}
	d := &designs[0]
	l, err := models.NewListener(d)
	if err != nil {
		t.Fatal(err)
	}
	for _, h := range st.Hypotheses {
		if len(h.FreeParams()) == 2 {
			g, err := BuildPredictionGrid(context.Background(), l, d, h, workers)
			if err != nil {
				t.Fatal(err)
			}
			return g
		}
	}
	t.Fatal("the demo has no two-parameter hypothesis")
	return nil
}

// TestRefineTwoParameterGrid guards the refinement of larger grids: on the
// demo's lamp-switch grid the largest interpolation error not at a jump,
// at 200 random points (seed 1), is 2.32 ln-units for a typical dataset
// without refinement (5.73 when jumpNear tried only the nearest node);
// refined, every Halton check point not at a jump is within tolerance and
// the random points' error is below 2 (1.70 measured).
func TestRefineTwoParameterGrid(t *testing.T) {
	g := demoTwoParameterGrid(t, 2)
	if g.refine.Added == 0 || g.Nodes() != 41*41+g.refine.Added {
		t.Fatalf("nodes %d, added %d: want lines added to the 41×41 grid", g.Nodes(), g.refine.Added)
	}
	if g.refine.Exhausted || g.refine.Worst > gridTolerance {
		t.Errorf("check points left over tolerance: worst %.3g, exhausted %v", g.refine.Worst, g.refine.Exhausted)
	}
	e := g.MeasureError(1, 200)
	if e.SmoothError >= 2 {
		t.Errorf("smooth error at random points %.3g, want below 2 (2.32 unrefined)", e.SmoothError)
	}
	// Refining again from the same start repeats exactly, on any workers.
	h := demoTwoParameterGrid(t, 1)
	for i := range g.axes {
		if !slices.Equal(g.axes[i], h.axes[i]) {
			t.Fatalf("axis %d differs between 2 workers and 1", i)
		}
	}
	if !slices.Equal(g.values, h.values) {
		t.Fatal("grid values differ between 2 workers and 1")
	}
}

func TestHalton(t *testing.T) {
	// Base 2: 1/2, 1/4, 3/4, 1/8; base 3: 1/3, 2/3, 1/9 (the van der
	// Corput sequence, Halton 1960).
	for _, c := range []struct {
		i, base int
		want    float64
	}{{1, 2, 0.5}, {2, 2, 0.25}, {3, 2, 0.75}, {4, 2, 0.125}, {1, 3, 1.0 / 3}, {2, 3, 2.0 / 3}, {3, 3, 1.0 / 9}} {
		if got := halton(c.i, c.base); got < c.want-1e-15 || got > c.want+1e-15 {
			t.Errorf("halton(%d, %d) = %v, want %v", c.i, c.base, got, c.want)
		}
	}
}
