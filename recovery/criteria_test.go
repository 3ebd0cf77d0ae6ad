package recovery

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"
)

// TestCriteriaCars checks ln L̂, AIC and BIC of the OLS fit dist ~ speed on
// R's cars data (Ezekiel 1930, shipped with R's datasets; reference values
// from R's logLik/AIC/BIC as listed in model.md §9): k = 3 counts intercept,
// slope and the error variance, n = 50.
func TestCriteriaCars(t *testing.T) {
	speed, dist := loadCars(t)
	x := make([][]float64, len(speed))
	w := make([]float64, len(speed))
	for i, s := range speed {
		x[i] = []float64{1, s}
		w[i] = 1
	}
	_, rss, err := WLS(x, dist, w)
	if err != nil {
		t.Fatal(err)
	}
	n, k := len(dist), 3
	logL := OLSLogLik(rss, n)
	for _, c := range []struct {
		name      string
		got, want float64
	}{
		{"lnL", logL, -206.5784},
		{"AIC", AIC(logL, k), 419.1569},
		{"BIC", BIC(logL, k, n), 424.8929},
		// AICc = 419.1569 + 2·3·4/46 = 419.1569 + 0.5217391 (hand-computed
		// from the formula of Hurvich & Tsai 1989).
		{"AICc", AICc(logL, k, n), 419.6786},
	} {
		// The references carry 4 decimals.
		if !scalar.EqualWithinAbs(c.got, c.want, 6e-5) {
			t.Errorf("%s = %.6f, want %.4f", c.name, c.got, c.want)
		}
	}
}

func TestCriteriaFormulas(t *testing.T) {
	for _, c := range []struct {
		name      string
		got, want float64
	}{
		{"AIC no parameters", AIC(-10, 0), 20},
		{"AIC", AIC(-10, 4), 28},
		{"BIC n=1 has no penalty", BIC(-10, 4, 1), 20},
		{"BIC n=e^2", BIC(-10, 3, 7), 3*math.Log(7) + 20},
		{"AICc", AICc(-10, 2, 10), 24 + 12.0/7},
		{"AICc k=0 equals AIC", AICc(-10, 0, 5), 20},
		{"AICc n-k-1=0", AICc(-10, 4, 5), math.Inf(1)},
		{"AICc n-k-1<0", AICc(-10, 6, 5), math.Inf(1)},
	} {
		t.Run(c.name, func(t *testing.T) {
			if math.IsInf(c.want, 1) {
				if !math.IsInf(c.got, 1) {
					t.Fatalf("got %v, want +Inf", c.got)
				}
				return
			}
			if !scalar.EqualWithinAbsOrRel(c.got, c.want, 1e-12, 1e-12) {
				t.Fatalf("got %v, want %v", c.got, c.want)
			}
		})
	}
}

func TestCriteriaPanics(t *testing.T) {
	for _, c := range []struct {
		name string
		f    func()
	}{
		{"AIC negative k", func() { AIC(0, -1) }},
		{"AICc zero n", func() { AICc(0, 1, 0) }},
		{"BIC negative k", func() { BIC(0, -1, 10) }},
		{"BIC zero n", func() { BIC(0, 1, 0) }},
	} {
		t.Run(c.name, func(t *testing.T) { statsMustPanic(t, c.f) })
	}
}

func statsMustPanic(t *testing.T, f func()) {
	t.Helper()
	defer func() {
		if recover() == nil {
			t.Fatal("no panic")
		}
	}()
	f()
}

// TestCriterionOf guards against the old string criteria, which fell back
// to BIC for any name they did not know.
func TestCriterionOf(t *testing.T) {
	f := &Fit{AIC: 1, AICc: 2, BIC: 3}
	for _, tc := range []struct {
		c     Criterion
		want  float64
		label string
	}{{BICCriterion, 3, "BIC"}, {AICCriterion, 1, "AIC"}, {AICcCriterion, 2, "AICc"}} {
		if got := tc.c.Of(f); got != tc.want {
			t.Errorf("%s.Of = %v, want %v", tc.c, got, tc.want)
		}
		if got := tc.c.Label(); got != tc.label {
			t.Errorf("%s.Label = %q, want %q", tc.c, got, tc.label)
		}
	}
	if got := BICCriterion.Of(&Fit{Failed: true, BIC: 3}); !math.IsNaN(got) {
		t.Errorf("failed fit: %v, want NaN", got)
	}
	for _, f := range []*Fit{f, {Failed: true}} {
		func() {
			defer func() {
				if r := recover(); r == nil {
					t.Error("unknown criterion did not panic")
				}
			}()
			Criterion("bics").Of(f)
		}()
	}
}
