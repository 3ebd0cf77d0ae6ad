package models

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"
)

// family is the tiny private interface every precision family's property
// test runs through: its course, and the bounds it must respect.
type family interface {
	Precision
}

func TestFamilyFormulas(t *testing.T) {
	cti := []int{300, 600, 900, 1200}
	cases := []struct {
		name string
		p    Precision
		t    float64
		want float64
	}{
		{"constant", Constant{Level: 0.7}, 0.4, 0.7},
		{"linear inside", Linear{Low: 0.1, High: 2, Slope: 1.5}, 0.5, 0.1 + 1.5*0.5},
		{"linear capped", Linear{Low: 0.1, High: 2, Slope: 1.5}, 2, 2},
		{"exponential mid", Exponential{Low: 0.1, High: 2, Rate: 3, Horizon: 1.2}, 0.6, 0.1 + 1.9*(math.Exp(1.8)-1)/(math.Exp(3.6)-1)},
		{"exponential small rate", Exponential{Low: 0.1, High: 2, Rate: 0.2, Horizon: 1.2}, 0.6, 0.1 + 1.9*(math.Exp(0.12)-1)/(math.Exp(0.24)-1)},
		{"exponential after horizon", Exponential{Low: 0.1, High: 2, Rate: 3, Horizon: 1.2}, 1.5, 2},
		{"saturating at tau", Saturating{Low: 0.1, High: 2, Tau: 0.3}, 0.3, 0.1 + 1.9*(1-math.Exp(-1))},
		{"logistic at midpoint", Logistic{Low: 0.1, High: 2, Midpoint: 0.6, Width: 0.1}, 0.6, 1.05},
		{"logistic one width late", Logistic{Low: 0.1, High: 2, Midpoint: 0.6, Width: 0.1}, 0.7, 0.1 + 1.9/(1+math.Exp(-1))},
		{"hazard with vanished survival", NewHazard(0.1, 2, 0.2, 0.2, cti, nil), 50, 2},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			if got := c.p.At(c.t); !scalar.EqualWithinAbsOrRel(got, c.want, 1e-12, 1e-12) {
				t.Errorf("γ(%g) = %.15g, want %.15g", c.t, got, c.want)
			}
		})
	}
}

// TestFamilyProperties runs every family through the same checks: finite,
// inside [low, high], starting at low (except constant and hazard), and
// overflow-safe at extreme parameters.
func TestFamilyProperties(t *testing.T) {
	cti := []int{300, 600, 900, 1200}
	const lo, hi = 0.1, 2.0
	cases := []struct {
		name      string
		f         family
		startsLow bool
	}{
		{"linear", Linear{lo, hi, 1}, true},
		{"linear steep", Linear{lo, hi, 1e6}, true},
		{"exponential", Exponential{lo, hi, 3, 1.2}, true},
		{"exponential huge rate", Exponential{lo, hi, 5000, 1.2}, true},
		{"exponential tiny rate", Exponential{lo, hi, 1e-15, 1.2}, true},
		{"saturating", Saturating{lo, hi, 0.3}, true},
		{"saturating tiny tau", Saturating{lo, hi, 1e-9}, true},
		{"logistic", Logistic{lo, hi, 0.6, 0.1}, false},
		{"logistic sharp", Logistic{lo, hi, 0.6, 1e-9}, false},
		{"hazard", NewHazard(lo, hi, 0.2, 0.2, cti, nil), false},
		{"hazard sharp", NewHazard(lo, hi, 1e-6, 0.2, cti, nil), false},
		{"hazard weighted", NewHazard(lo, hi, 0.3, 0.1, cti, []float64{4, 1, 1, 0}), false},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			for i := 0; i <= 3000; i++ {
				tt := float64(i) / 1000
				g := c.f.At(tt)
				if math.IsNaN(g) || math.IsInf(g, 0) || g < lo-1e-12 || g > hi+1e-12 {
					t.Fatalf("γ(%g) = %g outside [%g, %g]", tt, g, lo, hi)
				}
			}
			if c.startsLow && !scalar.EqualWithinAbsOrRel(c.f.At(0), lo, 1e-12, 1e-12) {
				t.Errorf("γ(0) = %g, want low = %g", c.f.At(0), lo)
			}
		})
	}
}

// TestHazardDiscreteLimit checks the subjective hazard's φ → 0 limit just
// before each onset against the discrete hazard p_j / Σ_{i≥j} p_i: for four
// equal CTIs 1/4, 1/3, 1/2, 1 (Niemi & Näätänen 1981, Psychological
// Bulletin 89:133).
func TestHazardDiscreteLimit(t *testing.T) {
	cti := []int{300, 600, 900, 1200}
	h := NewHazard(0, 1, 1e-4, 0.2, cti, nil)
	want := []float64{1.0 / 4, 1.0 / 3, 1.0 / 2, 1}
	for j, c := range cti {
		tt := float64(c)/1000 - 0.1
		if got := h.Rate(tt); !scalar.EqualWithinAbs(got, want[j], 1e-9) {
			t.Errorf("h(%g) = %.12g, want %.12g", tt, got, want[j])
		}
	}
	// Unequal weights: p = (0.4, 0.3, 0.2, 0.1) → 0.4, 0.5, 2/3, 1.
	hw := NewHazard(0, 1, 1e-4, 0.2, cti, []float64{4, 3, 2, 1})
	wantW := []float64{0.4, 0.5, 2.0 / 3, 1}
	for j, c := range cti {
		tt := float64(c)/1000 - 0.1
		if got := hw.Rate(tt); !scalar.EqualWithinAbs(got, wantW[j], 1e-9) {
			t.Errorf("weighted h(%g) = %.12g, want %.12g", tt, got, wantW[j])
		}
	}
	// Far past the last CTI the survival underflows 1 − erf; erfc keeps h
	// defined, and h = 1 once the survival is below 1e-300.
	for _, tt := range []float64{1.25, 1.4, 3, 50} {
		if r := h.Rate(tt); math.IsNaN(r) || r < 0 || r > 1 {
			t.Errorf("h(%g) = %g, want a value in [0, 1]", tt, r)
		}
	}
	if r := h.Rate(50); r != 1 {
		t.Errorf("h(50) = %g, want 1 (survival below 1e-300)", r)
	}
}

// TestHazardPeaksBeforeOnsets guards the non-monotone shape: with moderate
// timing noise the hazard rises before the first onset, dips after it and
// rises again.
func TestHazardPeaksBeforeOnsets(t *testing.T) {
	h := NewHazard(0, 1, 0.1, 0.2, []int{300, 600, 900, 1200}, nil)
	before, after := h.Rate(0.2), h.Rate(0.4)
	if !(before > after) {
		t.Errorf("h(0.2) = %g should exceed h(0.4) = %g (a peak before the first onset)", before, after)
	}
	if !(h.Rate(1.1) > h.Rate(0.4)) {
		t.Errorf("h(1.1) = %g should exceed h(0.4) = %g", h.Rate(1.1), h.Rate(0.4))
	}
}
