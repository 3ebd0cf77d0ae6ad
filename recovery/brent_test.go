package recovery

import (
	"math"
	"testing"
)

// TestBrentMin: Brent's method finds the minimum of a smooth function to
// its tolerance in few evaluations, and of a V-shaped kink by its golden
// steps (Brent 1973, ch. 5: the method converges on any unimodal function).
func TestBrentMin(t *testing.T) {
	cases := []struct {
		name       string
		f          func(float64) float64
		a, b, x    float64
		want       float64
		tol        float64
		maxEvals   int
		wantEvalsL int
	}{
		{"quadratic", func(x float64) float64 { return (x - 0.3) * (x - 0.3) }, -1, 1, 0.9, 0.3, 1e-8, 60, 12},
		{"cosine", math.Cos, 2, 4, 2.5, math.Pi, 1e-8, 60, 14},
		{"kink", func(x float64) float64 { return math.Abs(x-0.123) + 0.1*math.Max(0, x-0.123) }, -1, 1, 0.7, 0.123, 1e-7, 100, 60},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			x, fx, evals := brentMin(c.f, c.a, c.b, c.x, c.f(c.x), c.tol, c.maxEvals, 0, 0, 0)
			if math.Abs(x-c.want) > 10*c.tol+1e-7 {
				t.Errorf("x = %.10g, want %.10g", x, c.want)
			}
			if fx != c.f(x) {
				t.Errorf("f(x) = %g, returned %g", c.f(x), fx)
			}
			if evals > c.wantEvalsL {
				t.Errorf("%d evaluations, want at most %d", evals, c.wantEvalsL)
			}
		})
	}
}
