package recovery

import (
	"encoding/csv"
	"errors"
	"math"
	"os"
	"strconv"
	"strings"
	"testing"

	"gonum.org/v1/gonum/diff/fd"
	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/mat"
)

// loadCars reads testdata/cars.csv: R's datasets::cars (Ezekiel 1930,
// Methods of Correlation Analysis), 50 rows of speed (mph) and stopping
// distance (ft). The values were written from memory; the reference
// results of model.md §9 and R's coefficients reproduce to all printed
// digits, which they would not if a row were wrong.
func loadCars(t testing.TB) (speed, dist []float64) {
	t.Helper()
	f, err := os.Open("testdata/cars.csv")
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rows, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if len(rows) != 51 || rows[0][0] != "speed" || rows[0][1] != "dist" {
		t.Fatalf("cars.csv: want header speed,dist and 50 rows, got %d lines starting %v", len(rows), rows[0])
	}
	for _, r := range rows[1:] {
		s, err1 := strconv.ParseFloat(r[0], 64)
		d, err2 := strconv.ParseFloat(r[1], 64)
		if err1 != nil || err2 != nil {
			t.Fatalf("cars.csv: bad row %v", r)
		}
		speed = append(speed, s)
		dist = append(dist, d)
	}
	return speed, dist
}

func carsDesign(speed []float64) (x [][]float64, w []float64) {
	for _, s := range speed {
		x = append(x, []float64{1, s})
		w = append(w, 1)
	}
	return x, w
}

// TestWLSCars checks OLS on cars against R's lm(dist ~ speed): coefficients
// −17.579095 and 3.932409, residual sum of squares 11353.52 (from memory).
func TestWLSCars(t *testing.T) {
	speed, dist := loadCars(t)
	x, w := carsDesign(speed)
	beta, rss, err := WLS(x, dist, w)
	if err != nil {
		t.Fatal(err)
	}
	if !scalar.EqualWithinAbsOrRel(beta[0], -17.579095, 1e-6, 1e-6) ||
		!scalar.EqualWithinAbsOrRel(beta[1], 3.932409, 1e-6, 1e-6) {
		t.Errorf("beta = %v, want [-17.579095 3.932409]", beta)
	}
	if !scalar.EqualWithinAbsOrRel(rss, 11353.52, 1e-2, 1e-6) {
		t.Errorf("rss = %v, want 11353.52", rss)
	}
}

// TestWLSWeightsEqualRepeats guards the meaning of the weights: an integer
// weight w_i is the same as repeating row i w_i times (and weight 0 drops
// it), which follows from Σ_i w_i r_i².
func TestWLSWeightsEqualRepeats(t *testing.T) {
	speed, dist := loadCars(t)
	x, _ := carsDesign(speed)
	w := make([]float64, len(x))
	var xr [][]float64
	var yr, wr []float64
	for i := range x {
		w[i] = float64(i % 3) // 0, 1, 2
		for r := 0; r < i%3; r++ {
			xr = append(xr, x[i])
			yr = append(yr, dist[i])
			wr = append(wr, 1)
		}
	}
	bw, rssw, err := WLS(x, dist, w)
	if err != nil {
		t.Fatal(err)
	}
	br, rssr, err := WLS(xr, yr, wr)
	if err != nil {
		t.Fatal(err)
	}
	if !floats.EqualApprox(bw, br, 1e-10) || !scalar.EqualWithinAbsOrRel(rssw, rssr, 1e-8, 1e-10) {
		t.Errorf("weighted %v rss %v, repeated %v rss %v", bw, rssw, br, rssr)
	}
}

func TestWLSExactFit(t *testing.T) {
	// y = 2 − 3a + 0.5b exactly: β recovered, RSS 0.
	x := [][]float64{{1, 0, 0}, {1, 1, 0}, {1, 0, 1}, {1, 2, 3}, {1, -1, 4}}
	y := make([]float64, len(x))
	w := []float64{1, 2, 0.5, 3, 1}
	for i, r := range x {
		y[i] = 2 - 3*r[1] + 0.5*r[2]
	}
	beta, rss, err := WLS(x, y, w)
	if err != nil {
		t.Fatal(err)
	}
	if !floats.EqualApprox(beta, []float64{2, -3, 0.5}, 1e-12) || rss > 1e-20 {
		t.Errorf("beta = %v rss = %v, want [2 -3 0.5] and 0", beta, rss)
	}
}

func TestWLSErrors(t *testing.T) {
	ones := func(n int) []float64 {
		v := make([]float64, n)
		for i := range v {
			v[i] = 1
		}
		return v
	}
	for _, c := range []struct {
		name     string
		x        [][]float64
		y, w     []float64
		singular bool
		field    string
	}{
		{"collinear columns", [][]float64{{1, 2}, {2, 4}, {3, 6}}, []float64{1, 2, 3}, ones(3), true, ""},
		{"constant regressor beside intercept", [][]float64{{1, 5}, {1, 5}, {1, 5}}, []float64{1, 2, 3}, ones(3), true, ""},
		{"fewer rows than columns", [][]float64{{1, 2, 3}, {4, 5, 6}}, []float64{1, 2}, ones(2), true, ""},
		{"zero weights leave one row", [][]float64{{1, 1}, {1, 2}, {1, 3}}, []float64{1, 2, 3}, []float64{0, 1, 0}, true, ""},
		{"NaN response", [][]float64{{1, 1}, {1, 2}, {1, 3}}, []float64{1, 2, math.NaN()}, ones(3), false, "y[2]"},
		{"infinite design", [][]float64{{1, 1}, {1, math.Inf(1)}, {1, 3}}, []float64{1, 2, 3}, ones(3), false, "x[1][1]"},
	} {
		t.Run(c.name, func(t *testing.T) {
			_, _, err := WLS(c.x, c.y, c.w)
			if err == nil {
				t.Fatal("no error")
			}
			if c.singular != errors.Is(err, ErrSingularDesign) {
				t.Errorf("errors.Is(err, ErrSingularDesign) = %v, want %v (err: %v)", !c.singular, c.singular, err)
			}
			if c.field != "" && !strings.Contains(err.Error(), c.field) {
				t.Errorf("error %q does not name %s", err, c.field)
			}
		})
	}
}

func TestWLSPanics(t *testing.T) {
	x := [][]float64{{1, 1}, {1, 2}, {1, 3}}
	y := []float64{1, 2, 3}
	for _, c := range []struct {
		name string
		f    func()
	}{
		{"empty", func() { WLS(nil, nil, nil) }},
		{"short y", func() { WLS(x, y[:2], []float64{1, 1, 1}) }},
		{"short w", func() { WLS(x, y, []float64{1, 1}) }},
		{"ragged", func() { WLS([][]float64{{1, 1}, {1}, {1, 3}}, y, []float64{1, 1, 1}) }},
		{"negative weight", func() { WLS(x, y, []float64{1, -1, 1}) }},
		{"NaN weight", func() { WLS(x, y, []float64{1, math.NaN(), 1}) }},
	} {
		t.Run(c.name, func(t *testing.T) { statsMustPanic(t, c.f) })
	}
}

func TestOLSLogLik(t *testing.T) {
	// rss = n gives σ̂² = 1: ln L = −n/2 (ln 2π + 1).
	if got, want := OLSLogLik(20, 20), -10*(math.Log(2*math.Pi)+1); !scalar.EqualWithinAbsOrRel(got, want, 1e-12, 1e-12) {
		t.Errorf("OLSLogLik(20, 20) = %v, want %v", got, want)
	}
	if got := OLSLogLik(0, 5); !math.IsInf(got, 1) {
		t.Errorf("perfect fit: OLSLogLik(0, 5) = %v, want +Inf", got)
	}
	statsMustPanic(t, func() { OLSLogLik(-1, 5) })
	statsMustPanic(t, func() { OLSLogLik(1, 0) })
}

// carsNegLogLik is −ln L(β0, β1, σ) of the Gaussian linear model on cars:
//
//	−ln L = n/2 ln 2π + n ln σ + Σ_i (y_i − β0 − β1 x_i)² / (2σ²)
func carsNegLogLik(speed, dist []float64) func([]float64) float64 {
	return func(p []float64) float64 {
		b0, b1, sigma := p[0], p[1], p[2]
		var ss float64
		for i, s := range speed {
			r := dist[i] - b0 - b1*s
			ss += r * r
		}
		n := float64(len(speed))
		return n/2*math.Log(2*math.Pi) + n*math.Log(sigma) + ss/(2*sigma*sigma)
	}
}

// TestSlopeSEHessianCars: at the ML optimum the observed information of the
// Gaussian linear model is block diagonal in (β, σ) with the β block XᵀX/σ̂²,
// so the slope's SE from a numerical Hessian of −ln L equals the closed form
//
//	SE(β1) = √(σ̂² / Sxx),  σ̂² = RSS/n,  Sxx = Σ (x_i − x̄)²
//
// (any regression textbook; with the ML σ̂² rather than RSS/(n−2), so
// 0.40712 rather than R's 0.41551).
func TestSlopeSEHessianCars(t *testing.T) {
	speed, dist := loadCars(t)
	x, w := carsDesign(speed)
	beta, rss, err := WLS(x, dist, w)
	if err != nil {
		t.Fatal(err)
	}
	n := float64(len(speed))
	mean := floats.Sum(speed) / n
	var sxx float64
	for _, s := range speed {
		sxx += (s - mean) * (s - mean)
	}
	sigma2 := rss / n
	closed := math.Sqrt(sigma2 / sxx)
	// Consistency with R's summary(lm) SE 0.4155 (from memory) after the
	// degrees-of-freedom correction √(n/(n−2)).
	if !scalar.EqualWithinAbs(closed*math.Sqrt(n/(n-2)), 0.4155, 5e-5) {
		t.Errorf("closed-form SE with n−2 = %v, want 0.4155", closed*math.Sqrt(n/(n-2)))
	}

	opt := []float64{beta[0], beta[1], math.Sqrt(sigma2)}
	nll := carsNegLogLik(speed, dist)

	// Direct: gonum's fd.Hessian, then invert.
	var h mat.SymDense
	fd.Hessian(&h, nll, opt, &fd.Settings{Formula: fd.Central, Step: 1e-3})
	var chol mat.Cholesky
	if !chol.Factorize(&h) {
		t.Fatal("Hessian of −ln L at the optimum is not positive definite")
	}
	var cov mat.SymDense
	if err := chol.InverseTo(&cov); err != nil {
		t.Fatal(err)
	}
	if got := math.Sqrt(cov.At(1, 1)); !scalar.EqualWithinRel(got, closed, 1e-4) {
		t.Errorf("fd.Hessian SE(slope) = %v, closed form %v", got, closed)
	}

	// Through HessianSE with its default steps.
	se, hcov, reliable, why := HessianSE(nll, opt, nil)
	if !reliable {
		t.Fatalf("HessianSE unreliable: %s", why)
	}
	if !scalar.EqualWithinRel(se[1], closed, 1e-4) {
		t.Errorf("HessianSE SE(slope) = %v, closed form %v", se[1], closed)
	}
	// SE(σ̂) = σ̂/√(2n) for the ML variance parameterised by σ.
	if want := math.Sqrt(sigma2 / (2 * n)); !scalar.EqualWithinRel(se[2], want, 1e-4) {
		t.Errorf("HessianSE SE(sigma) = %v, want σ̂/√(2n) = %v", se[2], want)
	}
	if c := hcov.At(1, 2); math.Abs(c) > 1e-6*se[1]*se[2] {
		t.Errorf("cov(slope, sigma) = %v, want 0 at the optimum", c)
	}
}

func TestHessianSE(t *testing.T) {
	// f = ½ (x−m)ᵀ Σ⁻¹ (x−m) has Hessian Σ⁻¹ everywhere, so the covariance
	// is Σ itself (a central difference is exact on a quadratic up to
	// rounding).
	sigma := mat.NewSymDense(3, []float64{
		4, 1.2, -0.3,
		1.2, 1, 0.1,
		-0.3, 0.1, 0.25,
	})
	var sc mat.Cholesky
	if !sc.Factorize(sigma) {
		t.Fatal("test covariance is not positive definite")
	}
	var prec mat.SymDense
	if err := sc.InverseTo(&prec); err != nil {
		t.Fatal(err)
	}
	m := []float64{1, -2, 30}
	quad := func(x []float64) float64 {
		d := mat.NewVecDense(3, nil)
		for i := range x {
			d.SetVec(i, x[i]-m[i])
		}
		return 0.5 * mat.Inner(d, &prec, d)
	}
	flat := func(x []float64) float64 { return (x[0] - 1) * (x[0] - 1) } // x[1] does not matter
	// x[1]⁴ has zero curvature at 0 but a central difference sees 8h² at
	// step h and 32h² at 2h, so the SE halves with the step.
	quartic := func(x []float64) float64 { return x[0]*x[0]/2 + x[1]*x[1]*x[1]*x[1] }
	wall := func(x []float64) float64 { // −ln L is +Inf outside the support
		if x[1] < 0 {
			return math.Inf(1)
		}
		return x[0]*x[0] + x[1]*x[1]
	}
	saddle := func(x []float64) float64 { return x[0]*x[0] - x[1]*x[1] }

	for _, c := range []struct {
		name     string
		f        func([]float64) float64
		x, steps []float64
		reliable bool
		why      string
	}{
		{"quadratic default steps", quad, m, nil, true, ""},
		{"quadratic given steps", quad, m, []float64{1e-2, 1e-3, 1e-1}, true, ""},
		{"flat direction", flat, []float64{1, 0}, nil, false, "at step h: Hessian is not positive definite"},
		{"saddle", saddle, []float64{0, 0}, nil, false, "not positive definite"},
		{"step-sensitive curvature", quartic, []float64{0, 0}, []float64{1e-2, 1e-2}, false, "changes by"},
		{"infinite beyond a bound", wall, []float64{0, 0}, nil, false, "not finite"},
	} {
		t.Run(c.name, func(t *testing.T) {
			for rep := 0; rep < 2; rep++ { // a second run must repeat exactly
				se, cov, reliable, why := HessianSE(c.f, c.x, c.steps)
				if reliable != c.reliable {
					t.Fatalf("reliable = %v (%s), want %v", reliable, why, c.reliable)
				}
				if !strings.Contains(why, c.why) {
					t.Errorf("why = %q, want it to contain %q", why, c.why)
				}
				if len(se) != len(c.x) {
					t.Fatalf("len(se) = %d, want %d", len(se), len(c.x))
				}
				if !c.reliable {
					continue
				}
				for i := 0; i < 3; i++ {
					if !scalar.EqualWithinRel(se[i], math.Sqrt(sigma.At(i, i)), 1e-6) {
						t.Errorf("se[%d] = %v, want %v", i, se[i], math.Sqrt(sigma.At(i, i)))
					}
					for j := 0; j < 3; j++ {
						if !scalar.EqualWithinAbsOrRel(cov.At(i, j), sigma.At(i, j), 1e-7, 1e-6) {
							t.Errorf("cov(%d,%d) = %v, want %v", i, j, cov.At(i, j), sigma.At(i, j))
						}
					}
				}
			}
		})
	}

	t.Run("unreliable at step h gives NaN and nil", func(t *testing.T) {
		se, cov, _, _ := HessianSE(flat, []float64{1, 0}, nil)
		if cov != nil || !math.IsNaN(se[0]) || !math.IsNaN(se[1]) {
			t.Errorf("se = %v, cov = %v; want NaN and nil", se, cov)
		}
	})
	t.Run("step-sensitive keeps the step-h estimate", func(t *testing.T) {
		// Step h = 0.01: H_11 ≈ 8h² = 8e-4, so SE_1 = 1/√(8e-4).
		se, cov, _, _ := HessianSE(quartic, []float64{0, 0}, []float64{1e-2, 1e-2})
		if cov == nil || !scalar.EqualWithinRel(se[1], 1/math.Sqrt(8e-4), 1e-6) {
			t.Errorf("se = %v, want se[1] = %v", se, 1/math.Sqrt(8e-4))
		}
	})
}

func TestHessianSEPanics(t *testing.T) {
	f := func(x []float64) float64 { return x[0] * x[0] }
	for _, c := range []struct {
		name string
		fn   func()
	}{
		{"empty x", func() { HessianSE(f, nil, nil) }},
		{"steps length", func() { HessianSE(f, []float64{1}, []float64{1, 2}) }},
		{"zero step", func() { HessianSE(f, []float64{1}, []float64{0}) }},
		{"NaN step", func() { HessianSE(f, []float64{1}, []float64{math.NaN()}) }},
	} {
		t.Run(c.name, func(t *testing.T) { statsMustPanic(t, c.fn) })
	}
}
