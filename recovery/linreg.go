package recovery

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/diff/fd"
	"gonum.org/v1/gonum/mat"
)

// wlsMaxCond is the largest condition number of the weighted design √W·X that
// WLS accepts. Beyond it about four of the sixteen significant digits of a
// float64 survive in β, which is too few to trust a profiled-out parameter
// (common practice: refuse when cond·eps exceeds about 1e-4).
const wlsMaxCond = 1e12

// ErrSingularDesign is returned (wrapped) by WLS when the weighted design has
// no unique least-squares solution.
var ErrSingularDesign = errors.New("recovery: singular design")

// WLS solves the weighted least-squares problem for the n×p design x (one
// row per observation), responses y and non-negative weights w:
//
//	β̂ = argmin_β Σ_i w_i (y_i − x_i·β)²,   RSS = Σ_i w_i (y_i − x_i·β̂)²
//
// by a Householder QR factorisation of √W·X (Golub & Van Loan, Matrix
// Computations, 4th ed., §5.3), which avoids squaring the condition number
// as the normal equations would. Rows with zero weight drop out.
//
// WLS returns an error wrapping ErrSingularDesign when there are fewer
// weighted rows than columns or the weighted design's condition number
// exceeds 1e12, and an error naming the field when y holds a NaN or an
// infinity. It panics when x is empty or ragged, when the lengths of x, y
// and w differ, or when a weight is negative or not finite (caller bugs).
func WLS(x [][]float64, y, w []float64) (beta []float64, rss float64, err error) {
	n := len(x)
	if n == 0 || len(x[0]) == 0 {
		panic("recovery: WLS: empty design x")
	}
	p := len(x[0])
	if len(y) != n || len(w) != n {
		panic(fmt.Sprintf("recovery: WLS: length mismatch: x has %d rows, y %d, w %d", n, len(y), len(w)))
	}
	for i, row := range x {
		if len(row) != p {
			panic(fmt.Sprintf("recovery: WLS: ragged design: row %d has %d columns, want %d", i, len(row), p))
		}
		if w[i] < 0 || math.IsNaN(w[i]) || math.IsInf(w[i], 0) {
			panic(fmt.Sprintf("recovery: WLS: weight w[%d] = %v, want a finite value ≥ 0", i, w[i]))
		}
	}
	for i, v := range y {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, math.NaN(), fmt.Errorf("recovery: WLS: response y[%d] = %v, want a finite value", i, v)
		}
	}
	for i, row := range x {
		for j, v := range row {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return nil, math.NaN(), fmt.Errorf("recovery: WLS: design x[%d][%d] = %v, want a finite value", i, j, v)
			}
		}
	}

	// Keep only rows with positive weight so that the QR sees the rank of
	// the problem actually being solved.
	var rows []int
	for i := range x {
		if w[i] > 0 {
			rows = append(rows, i)
		}
	}
	m := len(rows)
	if m < p {
		return nil, math.NaN(), fmt.Errorf("%w: %d rows with positive weight for %d columns", ErrSingularDesign, m, p)
	}
	a := mat.NewDense(m, p, nil)
	b := mat.NewDense(m, 1, nil)
	for r, i := range rows {
		s := math.Sqrt(w[i])
		for j, v := range x[i] {
			a.Set(r, j, s*v)
		}
		b.Set(r, 0, s*y[i])
	}
	var qr mat.QR
	qr.Factorize(a)
	if c := qr.Cond(); !(c <= wlsMaxCond) { // also catches NaN and +Inf
		return nil, math.NaN(), fmt.Errorf("%w: condition number %.3g exceeds %.0g", ErrSingularDesign, c, wlsMaxCond)
	}
	var sol mat.Dense
	if err := qr.SolveTo(&sol, false, b); err != nil {
		return nil, math.NaN(), fmt.Errorf("%w: %v", ErrSingularDesign, err)
	}
	beta = make([]float64, p)
	for j := range beta {
		beta[j] = sol.At(j, 0)
	}
	for i := range x {
		if w[i] == 0 {
			continue
		}
		r := y[i]
		for j, v := range x[i] {
			r -= v * beta[j]
		}
		rss += w[i] * r * r
	}
	return beta, rss, nil
}

// OLSLogLik returns the maximised Gaussian log likelihood of a least-squares
// fit with residual sum of squares rss over n observations, with the error
// variance at its maximum-likelihood value σ̂² = RSS/n (so σ counts as one of
// the k parameters; for example R's logLik of an lm fit):
//
//	ln L̂ = −n/2 · (ln 2π + ln(RSS/n) + 1)
//
// A perfect fit (rss = 0) gives +Inf. OLSLogLik panics if n is not positive
// or rss is negative or NaN.
func OLSLogLik(rss float64, n int) float64 {
	checkObsCount("OLSLogLik", n)
	if rss < 0 || math.IsNaN(rss) {
		panic(fmt.Sprintf("recovery: OLSLogLik: rss = %v, want rss ≥ 0", rss))
	}
	nf := float64(n)
	return -nf / 2 * (math.Log(2*math.Pi) + math.Log(rss/nf) + 1)
}

// hessianRelStep is the default finite-difference step relative to
// max(|x_i|, 1): about eps^(1/4), the step that balances truncation and
// rounding error of a central second difference (Press et al., Numerical
// Recipes, 3rd ed., §5.7; from memory).
const hessianRelStep = 1.2e-4

// hessianMaxSEChange is the largest relative change of a standard error
// between finite-difference steps h and 2h that HessianSE still calls
// reliable (common practice; model.md §5 asks only that it not "change much").
const hessianMaxSEChange = 0.2

// HessianSE returns standard errors from the observed information: f is the
// negative log likelihood −ln L, x its minimiser, and the covariance is the
// inverse of the numerical Hessian H of f at x (Efron & Hinkley 1978,
// Biometrika 65:457, on observed versus expected information):
//
//	H_ij ≈ [f(x+h_i e_i+h_j e_j) − f(x+h_i e_i−h_j e_j) − f(x−h_i e_i+h_j e_j) + f(x−h_i e_i−h_j e_j)] / (4 h_i h_j)
//	Cov = H⁻¹,   SE_i = √Cov_ii
//
// computed with gonum's diff/fd.Hessian (central stencil) in coordinates
// scaled by the per-parameter steps. steps holds h_i; nil means
// h_i = 1.2e-4·max(|x_i|, 1). The Hessian is computed twice, at h and 2h.
//
// reliable is false, with the reason in why, when f is not finite at a
// stencil point, when H is not positive definite at either step (its
// Cholesky factorisation fails: a flat or saddle direction, or x is not a
// minimum), or when any SE changes by more than 20% between h and 2h (a kink
// or a step that is too large or too small). se and cov are from step h;
// when H at step h is not positive definite, se is all NaN and cov is nil.
// f is called serially. HessianSE panics when x is empty, when steps has the
// wrong length, or when a step is not finite and positive.
func HessianSE(f func([]float64) float64, x []float64, steps []float64) (se []float64, cov *mat.SymDense, reliable bool, why string) {
	p := len(x)
	if p == 0 {
		panic("recovery: HessianSE: empty parameter vector x")
	}
	h := make([]float64, p)
	switch {
	case steps == nil:
		for i, v := range x {
			h[i] = hessianRelStep * math.Max(math.Abs(v), 1)
		}
	case len(steps) != p:
		panic(fmt.Sprintf("recovery: HessianSE: len(steps) = %d, want len(x) = %d or nil", len(steps), p))
	default:
		for i, s := range steps {
			if !(s > 0) || math.IsInf(s, 0) {
				panic(fmt.Sprintf("recovery: HessianSE: steps[%d] = %v, want a finite value > 0", i, s))
			}
		}
		copy(h, steps)
	}

	nan := func() []float64 {
		v := make([]float64, p)
		for i := range v {
			v[i] = math.NaN()
		}
		return v
	}
	se1, cov1, why1 := hessianCov(f, x, h, 1)
	if why1 != "" {
		return nan(), nil, false, "at step h: " + why1
	}
	se2, _, why2 := hessianCov(f, x, h, 2)
	if why2 != "" {
		return se1, cov1, false, "at step 2h: " + why2
	}
	for i := range se1 {
		if change := math.Abs(se2[i]-se1[i]) / se1[i]; change > hessianMaxSEChange {
			return se1, cov1, false, fmt.Sprintf("SE of parameter %d changes by %.0f%% between step h and 2h (%.4g vs %.4g)", i, 100*change, se1[i], se2[i])
		}
	}
	return se1, cov1, true, ""
}

// hessianCov computes H at steps scale·h and its inverse. why is non-empty
// when the inverse does not exist.
func hessianCov(f func([]float64) float64, x, h []float64, scale float64) (se []float64, cov *mat.SymDense, why string) {
	p := len(x)
	// g(z) = f(x + z∘h) has Hessian D·H·D with D = diag(h), so a unit step
	// in z is a step h_i in parameter i.
	g := func(z []float64) float64 {
		xx := make([]float64, p)
		for i := range xx {
			xx[i] = x[i] + z[i]*h[i]
		}
		return f(xx)
	}
	var hz mat.SymDense
	fd.Hessian(&hz, g, make([]float64, p), &fd.Settings{Formula: fd.Central, Step: scale})
	hess := mat.NewSymDense(p, nil)
	for i := 0; i < p; i++ {
		for j := i; j < p; j++ {
			v := hz.At(i, j) / (h[i] * h[j])
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return nil, nil, fmt.Sprintf("Hessian entry (%d,%d) is %v (f is not finite near x)", i, j, v)
			}
			hess.SetSym(i, j, v)
		}
	}
	var chol mat.Cholesky
	if ok := chol.Factorize(hess); !ok {
		return nil, nil, "Hessian is not positive definite (a flat or saddle direction)"
	}
	cov = mat.NewSymDense(p, nil)
	if err := chol.InverseTo(cov); err != nil {
		return nil, nil, fmt.Sprintf("Hessian is numerically singular (%v)", err)
	}
	se = make([]float64, p)
	for i := range se {
		v := cov.At(i, i)
		if !(v > 0) || math.IsInf(v, 0) {
			return nil, nil, fmt.Sprintf("variance of parameter %d is %v", i, v)
		}
		se[i] = math.Sqrt(v)
	}
	return se, cov, ""
}
