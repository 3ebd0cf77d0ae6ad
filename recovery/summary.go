package recovery

import (
	"fmt"
	"math"
	"sort"

	"gonum.org/v1/gonum/stat"
)

// normal975 is the 0.975 quantile of the standard normal, Φ⁻¹(0.975), the
// multiplier of 95% intervals (written 1.96 in model.md §6).
const normal975 = 1.959963984540054

// TieTolerance is the absolute difference of criterion values within which
// candidates tie and share a dataset's win (model.md §6).
const TieTolerance = 1e-6

// WinShares splits one dataset's win among candidates by their criterion
// values (smaller is better): every candidate whose value is within tol of
// the minimum gets an equal share,
//
//	share_j = 1/|T| for j ∈ T = {j : v_j ≤ min_k v_k + tol}, else 0
//
// so a tie is never broken by list order (model.md §6; Wilson & Collins
// 2019, eLife 8:e49547). NaN and +Inf values (a failed fit, or AICc without
// residual degrees of freedom) never win; −Inf (an unbounded likelihood)
// beats every finite value. When no value can win, shares is
// all zero and failed is true: the caller reports the dataset as a fit
// failure rather than as a win. WinShares panics when values is empty or
// tol is negative or NaN.
func WinShares(values []float64, tol float64) (shares []float64, failed bool) {
	if len(values) == 0 {
		panic("recovery: WinShares: no criterion values")
	}
	if !(tol >= 0) {
		panic(fmt.Sprintf("recovery: WinShares: tol = %v, want tol ≥ 0", tol))
	}
	shares = make([]float64, len(values))
	best := math.Inf(1)
	for _, v := range values {
		if canWin(v) && v < best {
			best = v
		}
	}
	if math.IsInf(best, 1) {
		return shares, true
	}
	var tied int
	for _, v := range values {
		if canWin(v) && v <= best+tol {
			tied++
		}
	}
	for j, v := range values {
		if canWin(v) && v <= best+tol {
			shares[j] = 1 / float64(tied)
		}
	}
	return shares, false
}

func canWin(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 1) }

// Confusion is a model-recovery confusion matrix for one criterion (Wilson &
// Collins 2019, eLife 8:e49547): row i is a generating hypothesis, column j
// a candidate, in the same order (each hypothesis is both).
type Confusion struct {
	// Counts[i][j] is the number of datasets of generator i won by
	// candidate j; fractional when ties share a win.
	Counts [][]float64
	// P[i][j] = Counts[i][j]/N[i] = P(candidate j wins | generator i).
	P [][]float64
	// CILow and CIHigh bound P[i][j] by the 95% Wilson score interval.
	CILow, CIHigh [][]float64
	// Inversion[i][j] = P(generator i | candidate j wins) under a uniform
	// prior over generators; a column nobody wins is all 0.
	Inversion [][]float64
	// RecoveryRate is the mean of the diagonal of P.
	RecoveryRate float64
	// MIBits is the mutual information between generator (uniform prior)
	// and winner in bits; NormalizedMI divides it by log2 K.
	MIBits, NormalizedMI float64
	// N[i] is the number of datasets of generator i with a winner.
	N []int
	// Failures[i] is the number of datasets of generator i where no
	// candidate could win (all fits failed); they are not in N or Counts.
	Failures []int
}

// NewConfusion builds the confusion matrix from win shares: winners[i][d] is
// the share vector (from WinShares) of dataset d of generator i, one entry
// per candidate, summing to 1, or all zero for a failed dataset. With K
// hypotheses and a uniform prior p(i) = 1/K:
//
//	P[i][j] = Counts[i][j] / N[i]
//	Inversion[i][j] = P[i][j] / Σ_i' P[i'][j]   (0 when the column sum is 0)
//	RecoveryRate = (1/K) Σ_i P[i][i]
//	MI = Σ_ij p(i) P[i][j] log2(P[i][j] / q(j)),  q(j) = Σ_i p(i) P[i][j]
//	NormalizedMI = MI / log2 K
//
// (Cover & Thomas, Elements of Information Theory, 2nd ed., §2.4; terms with
// P[i][j] = 0 contribute 0). Each cell's 95% interval is WilsonInterval on
// the possibly fractional count. A generator with no usable dataset has a
// NaN row in P, CILow, CIHigh, which makes Inversion, RecoveryRate and the
// MI NaN too: the matrix is undefined without it.
//
// NewConfusion panics when there are fewer than 2 generators, or when a
// share vector has the wrong length, a negative or NaN entry, or sums to
// neither 0 nor 1 (within 1e-9).
func NewConfusion(winners [][][]float64) Confusion {
	k := len(winners)
	if k < 2 {
		panic(fmt.Sprintf("recovery: NewConfusion: %d generators, want at least 2", k))
	}
	c := Confusion{
		Counts:    newSquare(k),
		P:         newSquare(k),
		CILow:     newSquare(k),
		CIHigh:    newSquare(k),
		Inversion: newSquare(k),
		N:         make([]int, k),
		Failures:  make([]int, k),
	}
	for i, datasets := range winners {
		for d, shares := range datasets {
			if len(shares) != k {
				panic(fmt.Sprintf("recovery: NewConfusion: winners[%d][%d] has %d shares, want %d (one per candidate)", i, d, len(shares), k))
			}
			var sum float64
			for j, s := range shares {
				if !(s >= 0) {
					panic(fmt.Sprintf("recovery: NewConfusion: winners[%d][%d][%d] = %v, want a share ≥ 0", i, d, j, s))
				}
				sum += s
			}
			switch {
			case sum == 0:
				c.Failures[i]++
				continue
			case math.Abs(sum-1) > 1e-9:
				panic(fmt.Sprintf("recovery: NewConfusion: winners[%d][%d] sums to %v, want 1 (or all 0 for a failed dataset)", i, d, sum))
			}
			c.N[i]++
			for j, s := range shares {
				c.Counts[i][j] += s
			}
		}
	}

	pGen := 1 / float64(k)
	colSum := make([]float64, k)
	for i := range c.P {
		n := float64(c.N[i])
		for j := range c.P[i] {
			if c.N[i] == 0 {
				c.P[i][j], c.CILow[i][j], c.CIHigh[i][j] = math.NaN(), math.NaN(), math.NaN()
			} else {
				c.P[i][j] = c.Counts[i][j] / n
				// A count can exceed N by rounding when shares are thirds.
				c.CILow[i][j], c.CIHigh[i][j] = WilsonInterval(math.Min(c.Counts[i][j], n), n)
			}
			colSum[j] += c.P[i][j]
		}
		c.RecoveryRate += pGen * c.P[i][i]
	}
	for i := range c.Inversion {
		for j := range c.Inversion[i] {
			if colSum[j] == 0 {
				continue // nobody wins column j: P(generator | j wins) is undefined, reported as 0
			}
			c.Inversion[i][j] = c.P[i][j] / colSum[j]
		}
	}
	for i := range c.P {
		for j, pij := range c.P[i] {
			if pij == 0 {
				continue
			}
			q := pGen * colSum[j]
			c.MIBits += pGen * pij * math.Log2(pij/q)
		}
	}
	c.NormalizedMI = c.MIBits / math.Log2(float64(k))
	return c
}

func newSquare(k int) [][]float64 {
	m := make([][]float64, k)
	for i := range m {
		m[i] = make([]float64, k)
	}
	return m
}

// WilsonInterval returns the 95% Wilson score interval for a binomial
// proportion with x successes in n trials (Wilson 1927, JASA 22:209),
// with p̂ = x/n and z = Φ⁻¹(0.975):
//
//	(p̂ + z²/2n ± z·√(p̂(1−p̂)/n + z²/4n²)) / (1 + z²/n)
//
// x may be fractional (shared wins). Unlike the Wald interval it stays
// inside [0, 1] and is not degenerate at p̂ = 0 or 1. WilsonInterval panics
// unless n > 0 and 0 ≤ x ≤ n.
func WilsonInterval(x, n float64) (lo, hi float64) {
	if !(n > 0) || !(x >= 0) || x > n {
		panic(fmt.Sprintf("recovery: WilsonInterval: x = %v, n = %v, want n > 0 and 0 ≤ x ≤ n", x, n))
	}
	p := x / n
	z2 := normal975 * normal975
	den := 1 + z2/n
	centre := (p + z2/(2*n)) / den
	half := normal975 / den * math.Sqrt(p*(1-p)/n+z2/(4*n*n))
	return math.Max(0, centre-half), math.Min(1, centre+half)
}

// ParamRecovery summarises how well one parameter of a hypothesis fitted to
// its own data recovers the true values (model.md §6).
type ParamRecovery struct {
	Hypothesis, Parameter string
	// N is the number of participants with a finite estimate.
	N int
	// R is the Pearson correlation of estimate with truth, Bias the mean of
	// est − truth, RMSE the root mean squared error, Slope the least-squares
	// slope of est on truth (1 when unbiased in scale).
	R, Bias, RMSE, Slope float64
	// Coverage is the share of reliable fits whose est ± 1.96·SE covers the
	// truth; NaN when there is no reliable fit.
	Coverage float64
	// Flat marks a parameter whose likelihood profile is flat (see
	// FlatProfile); set by the caller.
	Flat bool
}

// RecoverParam compares true and estimated values of one parameter across
// participants:
//
//	R = Pearson r(truth, est)          (gonum stat.Correlation)
//	Bias = mean(est − truth),  RMSE = √mean((est − truth)²)
//	Slope = b in est ≈ a + b·truth     (gonum stat.LinearRegression)
//	Coverage = #{reliable, |est − truth| ≤ 1.96·SE} / #{reliable}
//
// Participants with a NaN estimate are skipped; N counts the rest. A fit
// counts towards coverage only when reliable[i] is true and se[i] is finite.
// R and Slope are NaN with fewer than two participants or when the truths
// do not vary; Bias and RMSE are NaN when N is 0. Hypothesis, Parameter and
// Flat are left for the caller. RecoverParam panics when the slice lengths
// differ.
func RecoverParam(truth, est, se []float64, reliable []bool) ParamRecovery {
	n := len(truth)
	if len(est) != n || len(se) != n || len(reliable) != n {
		panic(fmt.Sprintf("recovery: RecoverParam: length mismatch: truth %d, est %d, se %d, reliable %d", n, len(est), len(se), len(reliable)))
	}
	var t, e []float64
	var sumErr, sumSq float64
	var covered, eligible int
	for i := range truth {
		if math.IsNaN(est[i]) {
			continue
		}
		t = append(t, truth[i])
		e = append(e, est[i])
		d := est[i] - truth[i]
		sumErr += d
		sumSq += d * d
		if reliable[i] && !math.IsNaN(se[i]) && !math.IsInf(se[i], 0) {
			eligible++
			if math.Abs(d) <= normal975*se[i] {
				covered++
			}
		}
	}
	r := ParamRecovery{
		N:        len(t),
		R:        math.NaN(),
		Slope:    math.NaN(),
		Bias:     math.NaN(),
		RMSE:     math.NaN(),
		Coverage: math.NaN(),
	}
	if r.N > 0 {
		r.Bias = sumErr / float64(r.N)
		r.RMSE = math.Sqrt(sumSq / float64(r.N))
	}
	if eligible > 0 {
		r.Coverage = float64(covered) / float64(eligible)
	}
	if r.N >= 2 && stat.Variance(t, nil) > 0 {
		r.R = stat.Correlation(t, e, nil)
		_, r.Slope = stat.LinearRegression(t, e, nil, false)
	}
	return r
}

// FlatProfile reports whether a parameter with standard error se on the
// allowed range [lo, hi] is practically unidentified:
//
//	flat ⇔ SE > (hi − lo)/4, or SE is NaN or ±Inf
//
// The rule: a ±2 SE interval (about 95%) is then wider than the whole range,
// so the data do not narrow down the value beyond what the range already
// says (common practice; no single source). FlatProfile panics unless
// lo < hi.
func FlatProfile(se float64, lo, hi float64) bool {
	if !(lo < hi) {
		panic(fmt.Sprintf("recovery: FlatProfile: range [%v, %v], want lo < hi", lo, hi))
	}
	if math.IsNaN(se) || math.IsInf(se, 0) {
		return true
	}
	return se > flatSE*(hi-lo)
}

// flatSE is FlatProfile's threshold as a fraction of the range.
const flatSE = 0.25

// Tradeoff is the correlation across participants between the estimates
// of two parameters of one hypothesis (model.md §6): a strong correlation
// means the data constrain a combination of the two rather than each.
type Tradeoff struct {
	Hypothesis, A, B string
	// R is the Pearson correlation over the N participants with both
	// estimates finite; NaN when N < 2 or an estimate does not vary.
	R float64
	N int
}

// Tradeoffs returns the Pearson correlation (gonum stat.Correlation) of the
// estimates for every pair of parameters, in the order (0,1), (0,2), …,
// (1,2), …; est[p][j] is participant p's estimate of parameter names[j].
// A participant enters a pair when both its estimates are not NaN.
// Tradeoffs panics when a row of est does not have len(names) entries.
func Tradeoffs(hyp string, names []string, est [][]float64) []Tradeoff {
	for p, row := range est {
		if len(row) != len(names) {
			panic(fmt.Sprintf("recovery: Tradeoffs: est[%d] has %d values, want %d (one per name)", p, len(row), len(names)))
		}
	}
	var out []Tradeoff
	for a := 0; a < len(names); a++ {
		for b := a + 1; b < len(names); b++ {
			var xa, xb []float64
			for _, row := range est {
				if math.IsNaN(row[a]) || math.IsNaN(row[b]) {
					continue
				}
				xa = append(xa, row[a])
				xb = append(xb, row[b])
			}
			t := Tradeoff{Hypothesis: hyp, A: names[a], B: names[b], N: len(xa), R: math.NaN()}
			if t.N >= 2 && stat.Variance(xa, nil) > 0 && stat.Variance(xb, nil) > 0 {
				t.R = stat.Correlation(xa, xb, nil)
			}
			out = append(out, t)
		}
	}
	return out
}

// Quantiles summarises a sample: its size, mean and empirical quantiles.
type Quantiles struct {
	N                             int
	Mean, Q05, Q25, Q50, Q75, Q95 float64
}

// NewQuantiles summarises the non-NaN values of x. Quantiles are gonum's
// stat.Quantile with stat.Empirical on a sorted copy: the smallest sample
// value q with at least a fraction p of the sample ≤ q (the inverse of the
// empirical CDF; Hyndman & Fan 1996, Am. Stat. 50:361, type 1). With no
// values every statistic is NaN and N is 0.
func NewQuantiles(x []float64) Quantiles {
	s := make([]float64, 0, len(x))
	for _, v := range x {
		if !math.IsNaN(v) {
			s = append(s, v)
		}
	}
	if len(s) == 0 {
		nan := math.NaN()
		return Quantiles{Mean: nan, Q05: nan, Q25: nan, Q50: nan, Q75: nan, Q95: nan}
	}
	sort.Float64s(s)
	q := func(p float64) float64 { return stat.Quantile(p, stat.Empirical, s, nil) }
	return Quantiles{
		N:    len(s),
		Mean: stat.Mean(s, nil),
		Q05:  q(0.05), Q25: q(0.25), Q50: q(0.5), Q75: q(0.75), Q95: q(0.95),
	}
}

// Mimicry is the cross-fitting summary of one pair of hypotheses: the
// distribution of ΔBIC = BIC_A − BIC_B over datasets generated by A and over
// datasets generated by B (Wagenmakers et al. 2004, J. Math. Psychol. 48:28,
// the parametric bootstrap cross-fitting method). Negative ΔBIC favours A;
// the pair is distinguishable when the two distributions barely overlap.
type Mimicry struct {
	A, B         string
	WhenA, WhenB Quantiles
}

// MimicryPair summarises ΔBIC = BIC_A − BIC_B for datasets generated by a
// (dBICWhenA) and by b (dBICWhenB) with NewQuantiles; NaN values (failed
// fits) are dropped.
func MimicryPair(a, b string, dBICWhenA, dBICWhenB []float64) Mimicry {
	return Mimicry{A: a, B: b, WhenA: NewQuantiles(dBICWhenA), WhenB: NewQuantiles(dBICWhenB)}
}

// atBoundEdge is AtBoundShare's margin as a fraction of the range.
const atBoundEdge = 0.001

// AtBoundShare is the share of the finite estimates of one parameter that
// end at an end of its allowed range [lo, hi]:
//
//	AtBound = #{est : est ≤ lo + 0.001·(hi − lo) or est ≥ hi − 0.001·(hi − lo)} / #{finite est}
//
// A search that ends there has usually been stopped by the range rather
// than by the data, so its estimate, standard error and coverage are
// those of the range (the 0.1% margin is our choice). NaN and ±Inf
// estimates (failed fits) are skipped; AtBoundShare is NaN when none is
// left. It panics unless lo < hi.
func AtBoundShare(est []float64, lo, hi float64) float64 {
	if !(lo < hi) {
		panic(fmt.Sprintf("recovery: AtBoundShare: range [%v, %v], want lo < hi", lo, hi))
	}
	edge := atBoundEdge * (hi - lo)
	var n, at int
	for _, v := range est {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			continue
		}
		n++
		if v <= lo+edge || v >= hi-edge {
			at++
		}
	}
	if n == 0 {
		return math.NaN()
	}
	return float64(at) / float64(n)
}
