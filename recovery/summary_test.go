package recovery

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/floats/scalar"
)

func TestWinShares(t *testing.T) {
	nan, inf := math.NaN(), math.Inf(1)
	for _, c := range []struct {
		name   string
		values []float64
		want   []float64
		failed bool
	}{
		{"unique minimum", []float64{3, 1, 2}, []float64{0, 1, 0}, false},
		{"exact tie", []float64{1, 5, 1}, []float64{0.5, 0, 0.5}, false},
		{"tie within tolerance", []float64{10, 10 + 9e-7, 11}, []float64{0.5, 0.5, 0}, false},
		{"just outside tolerance", []float64{10, 10 + 2e-6, 11}, []float64{1, 0, 0}, false},
		{"three-way tie", []float64{-4, -4, -4}, []float64{1.0 / 3, 1.0 / 3, 1.0 / 3}, false},
		{"NaN never wins", []float64{nan, 7, 8}, []float64{0, 1, 0}, false},
		{"+Inf never wins", []float64{inf, 7, inf}, []float64{0, 1, 0}, false},
		{"all NaN is a failure", []float64{nan, nan}, []float64{0, 0}, true},
		{"all NaN or +Inf is a failure", []float64{nan, inf}, []float64{0, 0}, true},
	} {
		t.Run(c.name, func(t *testing.T) {
			got, failed := WinShares(c.values, TieTolerance)
			if failed != c.failed {
				t.Errorf("failed = %v, want %v", failed, c.failed)
			}
			if !floats.EqualApprox(got, c.want, 1e-15) {
				t.Errorf("shares = %v, want %v", got, c.want)
			}
		})
	}
}

// TestWinSharesOrderFree guards the rule that a tie is never broken by list
// order: permuting the candidates permutes the shares.
func TestWinSharesOrderFree(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 11))
	values := []float64{5, 2, 2 + 5e-7, 9, 2 + 1e-7, math.NaN()}
	base, _ := WinShares(values, TieTolerance)
	for rep := 0; rep < 20; rep++ {
		perm := rng.Perm(len(values))
		pv := make([]float64, len(values))
		for i, p := range perm {
			pv[i] = values[p]
		}
		got, _ := WinShares(pv, TieTolerance)
		for i, p := range perm {
			if got[i] != base[p] {
				t.Fatalf("permutation %v: shares %v, want %v permuted", perm, got, base)
			}
		}
	}
}

func TestWinSharesPanics(t *testing.T) {
	statsMustPanic(t, func() { WinShares(nil, TieTolerance) })
	statsMustPanic(t, func() { WinShares([]float64{1}, -1) })
	statsMustPanic(t, func() { WinShares([]float64{1}, math.NaN()) })
}

// oneHot returns the share vector of a dataset won outright by j of k.
func oneHot(k, j int) []float64 {
	v := make([]float64, k)
	v[j] = 1
	return v
}

func repeatShares(v []float64, n int) [][]float64 {
	out := make([][]float64, n)
	for i := range out {
		out[i] = v
	}
	return out
}

// TestConfusionLimits: the mutual information of an identity K×K confusion
// (each generator recovered perfectly) is log2 K bits, of a uniform one 0
// (Cover & Thomas, Elements of Information Theory, 2nd ed., §2.4:
// I(X;Y) = H(X) − H(X|Y), with H(X) = log2 K under a uniform prior).
func TestConfusionLimits(t *testing.T) {
	for _, k := range []int{2, 3, 5, 12} {
		id := make([][][]float64, k)
		uni := make([][][]float64, k)
		flat := make([]float64, k)
		for j := range flat {
			flat[j] = 1 / float64(k)
		}
		for i := range id {
			id[i] = repeatShares(oneHot(k, i), 4)
			uni[i] = repeatShares(flat, 6)
		}
		c := NewConfusion(id)
		if !scalar.EqualWithinAbsOrRel(c.MIBits, math.Log2(float64(k)), 1e-12, 1e-12) ||
			!scalar.EqualWithinAbsOrRel(c.NormalizedMI, 1, 1e-12, 1e-12) ||
			!scalar.EqualWithinAbsOrRel(c.RecoveryRate, 1, 1e-12, 1e-12) {
			t.Errorf("identity K=%d: MI %v bits (want %v), normalized %v, recovery %v", k, c.MIBits, math.Log2(float64(k)), c.NormalizedMI, c.RecoveryRate)
		}
		for i := range c.Inversion {
			if !floats.EqualApprox(c.Inversion[i], oneHot(k, i), 1e-12) {
				t.Errorf("identity K=%d: inversion row %d = %v", k, i, c.Inversion[i])
			}
		}
		u := NewConfusion(uni)
		if !scalar.EqualWithinAbs(u.MIBits, 0, 1e-12) || !scalar.EqualWithinAbs(u.NormalizedMI, 0, 1e-12) ||
			!scalar.EqualWithinAbsOrRel(u.RecoveryRate, 1/float64(k), 1e-12, 1e-12) {
			t.Errorf("uniform K=%d: MI %v, normalized %v, recovery %v", k, u.MIBits, u.NormalizedMI, u.RecoveryRate)
		}
		for i := range u.Inversion {
			if !floats.EqualApprox(u.Inversion[i], flat, 1e-12) {
				t.Errorf("uniform K=%d: inversion row %d = %v, want all 1/K", k, i, u.Inversion[i])
			}
		}
	}
}

// TestConfusionHand2x2 checks a 2×2 case computed by hand. Generator A: 10
// datasets, 8 won by A and 2 by B. Generator B: 10 usable datasets, 2 won by
// A, 6 by B, 2 tied (half each), plus one where every fit failed. So
//
//	P = [[0.8, 0.2], [0.3, 0.7]], q(j) = ½ column sums = [0.55, 0.45]
//	MI = ½ [0.8 log2(0.8/0.55) + 0.2 log2(0.2/0.45) + 0.3 log2(0.3/0.55) + 0.7 log2(0.7/0.45)]
//	   = ½ [0.432455 − 0.233985 − 0.262341 + 0.446201] = 0.191165 bits
//	normalized by log2 2 = 1: 0.191165
//	Inversion = [[0.8/1.1, 0.2/0.9], [0.3/1.1, 0.7/0.9]]
//	RecoveryRate = (0.8 + 0.7)/2 = 0.75
func TestConfusionHand2x2(t *testing.T) {
	a := append(repeatShares(oneHot(2, 0), 8), repeatShares(oneHot(2, 1), 2)...)
	b := append(repeatShares(oneHot(2, 0), 2), repeatShares(oneHot(2, 1), 6)...)
	b = append(b, []float64{0.5, 0.5}, []float64{0, 0}, []float64{0.5, 0.5})
	c := NewConfusion([][][]float64{a, b})

	if c.N[0] != 10 || c.N[1] != 10 || c.Failures[0] != 0 || c.Failures[1] != 1 {
		t.Errorf("N = %v, Failures = %v; want [10 10] and [0 1]", c.N, c.Failures)
	}
	check := func(name string, got, want [][]float64) {
		t.Helper()
		for i := range want {
			if !floats.EqualApprox(got[i], want[i], 1e-12) {
				t.Errorf("%s = %v, want %v", name, got, want)
				return
			}
		}
	}
	check("Counts", c.Counts, [][]float64{{8, 2}, {3, 7}})
	check("P", c.P, [][]float64{{0.8, 0.2}, {0.3, 0.7}})
	check("Inversion", c.Inversion, [][]float64{{0.8 / 1.1, 0.2 / 0.9}, {0.3 / 1.1, 0.7 / 0.9}})
	for _, v := range []struct {
		name      string
		got, want float64
	}{
		{"MIBits", c.MIBits, 0.191165},
		{"NormalizedMI", c.NormalizedMI, 0.191165},
		{"RecoveryRate", c.RecoveryRate, 0.75},
	} {
		if !scalar.EqualWithinAbs(v.got, v.want, 1e-6) {
			t.Errorf("%s = %.7f, want %.6f", v.name, v.got, v.want)
		}
	}
	// Cell (0,0) is 8 of 10: the Wilson interval of TestWilsonInterval.
	if !scalar.EqualWithinAbs(c.CILow[0][0], 0.490162, 2e-6) || !scalar.EqualWithinAbs(c.CIHigh[0][0], 0.943318, 2e-6) {
		t.Errorf("CI(0,0) = [%v, %v], want [0.490162, 0.943318]", c.CILow[0][0], c.CIHigh[0][0])
	}
}

func TestConfusionEmptyColumnAndRow(t *testing.T) {
	// Nobody ever picks candidate 2: its inversion column is 0, not NaN.
	c := NewConfusion([][][]float64{
		repeatShares(oneHot(3, 0), 3),
		repeatShares(oneHot(3, 1), 3),
		repeatShares(oneHot(3, 0), 3),
	})
	for i := 0; i < 3; i++ {
		if c.Inversion[i][2] != 0 {
			t.Errorf("Inversion[%d][2] = %v, want 0 for a column nobody wins", i, c.Inversion[i][2])
		}
	}
	// A generator without a usable dataset leaves the matrix undefined.
	d := NewConfusion([][][]float64{
		repeatShares(oneHot(2, 0), 3),
		{{0, 0}},
	})
	if !math.IsNaN(d.P[1][0]) || !math.IsNaN(d.RecoveryRate) || !math.IsNaN(d.MIBits) || d.Failures[1] != 1 || d.N[1] != 0 {
		t.Errorf("P = %v, recovery %v, MI %v, failures %v; want a NaN row, NaN summaries, 1 failure", d.P, d.RecoveryRate, d.MIBits, d.Failures)
	}
}

func TestConfusionPanics(t *testing.T) {
	for _, c := range []struct {
		name    string
		winners [][][]float64
	}{
		{"one generator", [][][]float64{{{1}}}},
		{"wrong length", [][][]float64{{{1, 0}}, {{0, 1, 0}}}},
		{"does not sum to 1", [][][]float64{{{0.5, 0.4}}, {{0, 1}}}},
		{"negative share", [][][]float64{{{1.5, -0.5}}, {{0, 1}}}},
		{"NaN share", [][][]float64{{{math.NaN(), 1}}, {{0, 1}}}},
	} {
		t.Run(c.name, func(t *testing.T) { statsMustPanic(t, func() { NewConfusion(c.winners) }) })
	}
}

// TestWilsonInterval checks the Wilson score interval (Wilson 1927, JASA
// 22:209) against values computed by hand from its formula with
// z = 1.959964, z² = 3.841459:
//
//	8 of 10: p̂ = 0.8, 1 + z²/n = 1.3841459,
//	  centre = (0.8 + 0.1920729)/1.3841459 = 0.716740,
//	  half = 1.959964/1.3841459 · √(0.016 + 0.0096036) = 1.416010 · 0.1600114 = 0.226578,
//	  so [0.490162, 0.943318] (the [0.490, 0.943] usually quoted).
//	0 of 10: the lower end is exactly 0, the upper z²/n/(1+z²/n) = 0.3841459/1.3841459 = 0.277533.
//	7.5 of 10 (a shared win): centre (0.75 + 0.1920729)/1.3841459 = 0.680617,
//	  half 1.416010 · √(0.01875 + 0.0096036) = 1.416010 · 0.1683854 = 0.238435, so [0.442182, 0.919052].
func TestWilsonInterval(t *testing.T) {
	for _, c := range []struct {
		name         string
		x, n         float64
		wantLo, want float64
	}{
		{"8 of 10", 8, 10, 0.490162, 0.943318},
		{"0 of 10", 0, 10, 0, 0.277533},
		{"10 of 10 mirrors 0 of 10", 10, 10, 1 - 0.277533, 1},
		{"fractional 7.5 of 10", 7.5, 10, 0.442182, 0.919052},
	} {
		t.Run(c.name, func(t *testing.T) {
			lo, hi := WilsonInterval(c.x, c.n)
			if !scalar.EqualWithinAbs(lo, c.wantLo, 2e-6) || !scalar.EqualWithinAbs(hi, c.want, 2e-6) {
				t.Errorf("WilsonInterval(%v, %v) = [%.6f, %.6f], want [%.6f, %.6f]", c.x, c.n, lo, hi, c.wantLo, c.want)
			}
		})
	}
	statsMustPanic(t, func() { WilsonInterval(11, 10) })
	statsMustPanic(t, func() { WilsonInterval(1, 0) })
}

func TestRecoverParam(t *testing.T) {
	nan := math.NaN()
	truth := []float64{1, 2, 3, 4, 5, 6}
	t.Run("affine estimates", func(t *testing.T) {
		// est = 1 + 2·truth exactly: r = 1, slope 2, est − truth = 1 + truth,
		// bias = 1 + 3.5 = 4.5, RMSE = √(mean of 4,9,16,25,36,49) = √(139/6).
		est := make([]float64, len(truth))
		for i, v := range truth {
			est[i] = 1 + 2*v
		}
		r := RecoverParam(truth, est, make([]float64, 6), make([]bool, 6))
		if r.N != 6 || !scalar.EqualWithinAbsOrRel(r.R, 1, 1e-12, 1e-12) || !scalar.EqualWithinAbsOrRel(r.Slope, 2, 1e-12, 1e-12) ||
			!scalar.EqualWithinAbsOrRel(r.Bias, 4.5, 1e-12, 1e-12) || !scalar.EqualWithinAbsOrRel(r.RMSE, math.Sqrt(139.0/6), 1e-12, 1e-12) {
			t.Errorf("got %+v", r)
		}
		if !math.IsNaN(r.Coverage) {
			t.Errorf("coverage with no reliable fit = %v, want NaN", r.Coverage)
		}
	})
	t.Run("reversed, NaN skipped", func(t *testing.T) {
		est := []float64{10, nan, 8, 7, 6, 5} // 11 − truth where present
		r := RecoverParam(truth, est, make([]float64, 6), make([]bool, 6))
		if r.N != 5 || !scalar.EqualWithinAbsOrRel(r.R, -1, 1e-12, 1e-12) || !scalar.EqualWithinAbsOrRel(r.Slope, -1, 1e-12, 1e-12) {
			t.Errorf("got %+v, want N 5, r −1, slope −1", r)
		}
	})
	t.Run("coverage", func(t *testing.T) {
		// Errors ±0.5. With SE 0.3 the half-width is 0.588 (covers), with
		// SE 0.25 it is 0.49 (misses). Reliable: participants 0,1,2,4 —
		// covered 0,1 (SE 0.3) and missed 2,4 (SE 0.25) → 2/4; participant
		// 3 is unreliable, 5 has an infinite SE.
		est := []float64{1.5, 1.5, 3.5, 3.5, 5.5, 5.5}
		se := []float64{0.3, 0.3, 0.25, 0.3, 0.25, math.Inf(1)}
		rel := []bool{true, true, true, false, true, true}
		r := RecoverParam(truth, est, se, rel)
		if !scalar.EqualWithinAbsOrRel(r.Coverage, 0.5, 1e-12, 1e-12) {
			t.Errorf("coverage = %v, want 0.5", r.Coverage)
		}
	})
	t.Run("constant truth", func(t *testing.T) {
		r := RecoverParam([]float64{2, 2, 2}, []float64{1, 2, 3}, make([]float64, 3), make([]bool, 3))
		if !math.IsNaN(r.R) || !math.IsNaN(r.Slope) || r.Bias != 0 {
			t.Errorf("got %+v, want NaN r and slope, bias 0", r)
		}
	})
	t.Run("all NaN", func(t *testing.T) {
		r := RecoverParam([]float64{1, 2}, []float64{nan, nan}, make([]float64, 2), []bool{true, true})
		if r.N != 0 || !math.IsNaN(r.Bias) || !math.IsNaN(r.RMSE) || !math.IsNaN(r.Coverage) {
			t.Errorf("got %+v", r)
		}
	})
	statsMustPanic(t, func() { RecoverParam(truth, truth[:5], make([]float64, 6), make([]bool, 6)) })
}

func TestFlatProfile(t *testing.T) {
	for _, c := range []struct {
		name   string
		se     float64
		lo, hi float64
		want   bool
	}{
		{"tight", 0.1, 0, 4, false},
		{"exactly a quarter", 1, 0, 4, false},
		{"over a quarter", 1.0001, 0, 4, true},
		{"NaN", math.NaN(), 0, 4, true},
		{"Inf", math.Inf(1), 0, 4, true},
	} {
		t.Run(c.name, func(t *testing.T) {
			if got := FlatProfile(c.se, c.lo, c.hi); got != c.want {
				t.Errorf("FlatProfile(%v, %v, %v) = %v, want %v", c.se, c.lo, c.hi, got, c.want)
			}
		})
	}
	statsMustPanic(t, func() { FlatProfile(1, 2, 2) })
}

func TestTradeoffs(t *testing.T) {
	// b = 2a + 1 (r = 1), c = −a (r = −1); participant 3 lacks c.
	est := [][]float64{
		{1, 3, -1},
		{2, 5, -2},
		{3, 7, -3},
		{4, 9, math.NaN()},
		{5, 11, -5},
	}
	got := Tradeoffs("saturating", []string{"a", "b", "c"}, est)
	want := []Tradeoff{
		{"saturating", "a", "b", 1, 5},
		{"saturating", "a", "c", -1, 4},
		{"saturating", "b", "c", -1, 4},
	}
	if len(got) != len(want) {
		t.Fatalf("got %d pairs, want %d", len(got), len(want))
	}
	for i := range want {
		g, w := got[i], want[i]
		if g.Hypothesis != w.Hypothesis || g.A != w.A || g.B != w.B || g.N != w.N || !scalar.EqualWithinAbsOrRel(g.R, w.R, 1e-12, 1e-12) {
			t.Errorf("pair %d = %+v, want %+v", i, g, w)
		}
	}
	statsMustPanic(t, func() { Tradeoffs("x", []string{"a"}, [][]float64{{1, 2}}) })
}

func TestQuantilesAndMimicry(t *testing.T) {
	// 1..20 shuffled plus a NaN: the empirical quantile (inverse ECDF) at p
	// is the ⌈20p⌉-th smallest value: 1, 5, 10, 15, 19; mean 10.5.
	rng := rand.New(rand.NewPCG(3, 5))
	x := make([]float64, 20)
	for i, p := range rng.Perm(20) {
		x[i] = float64(p + 1)
	}
	x = append(x, math.NaN())
	orig := append([]float64(nil), x...)
	q := NewQuantiles(x)
	want := Quantiles{N: 20, Mean: 10.5, Q05: 1, Q25: 5, Q50: 10, Q75: 15, Q95: 19}
	if q.N != want.N || !floats.EqualApprox(
		[]float64{q.Mean, q.Q05, q.Q25, q.Q50, q.Q75, q.Q95},
		[]float64{want.Mean, want.Q05, want.Q25, want.Q50, want.Q75, want.Q95}, 1e-12) {
		t.Errorf("NewQuantiles = %+v, want %+v", q, want)
	}
	for i := range x { // the input is not sorted in place
		if x[i] != orig[i] && !(math.IsNaN(x[i]) && math.IsNaN(orig[i])) {
			t.Fatal("NewQuantiles modified its input")
		}
	}
	if e := NewQuantiles([]float64{math.NaN()}); e.N != 0 || !math.IsNaN(e.Mean) || !math.IsNaN(e.Q50) {
		t.Errorf("empty: %+v, want N 0 and NaN", e)
	}
	m := MimicryPair("linear", "logistic", []float64{-3, -1, -2}, []float64{4})
	if m.A != "linear" || m.B != "logistic" || m.WhenA.N != 3 || m.WhenA.Q50 != -2 || m.WhenB.N != 1 || m.WhenB.Q05 != 4 {
		t.Errorf("MimicryPair = %+v", m)
	}
}

func BenchmarkNewConfusion(b *testing.B) {
	// 12 hypotheses × 200 datasets, each won by one or two candidates.
	const k, n = 12, 200
	rng := rand.New(rand.NewPCG(1, 2))
	winners := make([][][]float64, k)
	for i := range winners {
		for d := 0; d < n; d++ {
			v := make([]float64, k)
			for j := range v {
				v[j] = rng.NormFloat64()
			}
			v[i] -= 1
			s, _ := WinShares(v, TieTolerance)
			winners[i] = append(winners[i], s)
		}
	}
	b.ResetTimer()
	for b.Loop() {
		NewConfusion(winners)
	}
}
