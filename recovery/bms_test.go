package recovery

import (
	"math"
	"math/rand/v2"
	"reflect"
	"testing"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/integrate/quad"
	"gonum.org/v1/gonum/stat/distuv"
)

// strongEvidence returns n participants whose log evidence favours model 0
// over each of the other k−1 by 50 nats.
func strongEvidence(n, k int) [][]float64 {
	lme := make([][]float64, n)
	for i := range lme {
		lme[i] = make([]float64, k)
		for j := 1; j < k; j++ {
			lme[i][j] = -50
		}
	}
	return lme
}

// randomEvidence returns seeded log evidences with model j shifted by
// shift[j] (in nats) and participant-level noise of sd nats.
func randomEvidence(seed uint64, n int, shift []float64, sd float64) [][]float64 {
	rng := rand.New(rand.NewPCG(seed, 99))
	lme := make([][]float64, n)
	for i := range lme {
		lme[i] = make([]float64, len(shift))
		for j, s := range shift {
			lme[i][j] = s + sd*rng.NormFloat64()
		}
	}
	return lme
}

// TestBMSStrongFavour: when every participant's evidence leaves no doubt
// (g_n0 = 1 to within e^−50), the Dirichlet update of Stephan et al. 2009
// gives α = (1 + N, 1, …, 1), so E[r_0] = (N+1)/(N+K); the null of equal
// frequencies is then implausible (small BOR) and PXP_0 ≈ 1.
func TestBMSStrongFavour(t *testing.T) {
	for _, c := range []struct{ n, k int }{{20, 2}, {20, 3}, {10, 6}, {40, 6}} {
		res := BMS(strongEvidence(c.n, c.k), rand.New(rand.NewPCG(1, 2)), 10000)
		want := float64(c.n+1) / float64(c.n+c.k)
		if !scalar.EqualWithinAbs(res.Expected[0], want, 1e-6) {
			t.Errorf("N=%d K=%d: Expected[0] = %v, want (N+1)/(N+K) = %v", c.n, c.k, res.Expected[0], want)
		}
		if !res.Converged || res.Iterations > 10 {
			t.Errorf("N=%d K=%d: converged %v after %d iterations", c.n, c.k, res.Converged, res.Iterations)
		}
		if res.BOR > 1e-3 {
			t.Errorf("N=%d K=%d: BOR = %v, want < 1e-3", c.n, c.k, res.BOR)
		}
		if res.PXP[0] <= 0.99 {
			t.Errorf("N=%d K=%d: PXP[0] = %v, want > 0.99", c.n, c.k, res.PXP[0])
		}
		if s := floats.Sum(res.PXP); !scalar.EqualWithinAbs(s, 1, 1e-12) {
			t.Errorf("N=%d K=%d: PXP sums to %v", c.n, c.k, s)
		}
	}
}

// TestBMSTwoModelExceedance: for K = 2, r_1 ~ Beta(α_1, α_2) and
// XP_1 = P(r_1 > ½) = 1 − I_½(α_1, α_2) (model.md §9). The reference is
// gonum's distuv.Beta the other way round: r_2 = 1 − r_1 ~ Beta(α_2, α_1),
// so XP_1 = P(r_2 < ½) = Beta{Alpha: α_2, Beta: α_1}.CDF(0.5).
func TestBMSTwoModelExceedance(t *testing.T) {
	for _, c := range []struct {
		name  string
		lme   [][]float64
		check func(xp0 float64) bool
	}{
		{"balanced noisy", randomEvidence(1, 15, []float64{0, 0}, 3), func(float64) bool { return true }},
		{"model 2 ahead", randomEvidence(2, 15, []float64{0, 1.5}, 3), func(xp float64) bool { return xp < 0.5 }},
		{"model 1 far ahead", randomEvidence(3, 30, []float64{4, 0}, 2), func(xp float64) bool { return xp > 0.99 }},
	} {
		t.Run(c.name, func(t *testing.T) {
			res := BMS(c.lme, nil, 0) // K = 2 needs no randomness
			ref := distuv.Beta{Alpha: res.Alpha[1], Beta: res.Alpha[0]}.CDF(0.5)
			if !scalar.EqualWithinAbsOrRel(res.XP[0], ref, 1e-12, 1e-10) {
				t.Errorf("XP[0] = %v, distuv.Beta{α2, α1}.CDF(0.5) = %v (α = %v)", res.XP[0], ref, res.Alpha)
			}
			if alt := 1 - (distuv.Beta{Alpha: res.Alpha[0], Beta: res.Alpha[1]}).CDF(0.5); !scalar.EqualWithinAbsOrRel(res.XP[0], alt, 1e-12, 1e-10) {
				t.Errorf("XP[0] = %v, 1 − Beta{α1, α2}.CDF(0.5) = %v", res.XP[0], alt)
			}
			if !scalar.EqualWithinAbs(res.XP[0]+res.XP[1], 1, 1e-12) || res.XPMCError != 0 {
				t.Errorf("XP = %v, MC error %v; want a sum of 1 and no MC error", res.XP, res.XPMCError)
			}
			if !c.check(res.XP[0]) {
				t.Errorf("XP[0] = %v is on the wrong side for %s", res.XP[0], c.name)
			}
		})
	}
}

// dirichletXPQuad is P(r_k is the largest) for r ~ Dir(α) by quadrature:
// with independent G_j ~ Gamma(α_j, 1) and r = G/ΣG,
//
//	P(r_k largest) = ∫_0^∞ f_k(x) Π_{j≠k} F_j(x) dx
//
// (f, F the gamma density and CDF; the normalisation does not change the
// argmax). Legendre rule on [0, U] with U far in every upper tail.
func dirichletXPQuad(alpha []float64, k int) float64 {
	var upper float64
	for _, a := range alpha {
		upper = math.Max(upper, a+40*math.Sqrt(a)+40)
	}
	f := func(x float64) float64 {
		v := distuv.Gamma{Alpha: alpha[k], Beta: 1}.Prob(x)
		for j, a := range alpha {
			if j != k {
				v *= distuv.Gamma{Alpha: a, Beta: 1}.CDF(x)
			}
		}
		return v
	}
	return quad.Fixed(f, 0, upper, 2000, nil, 0)
}

// TestBMSMonteCarloExceedance: for K = 3 the Monte Carlo XP with 10000
// draws is within 4 of its MC standard errors of a 10⁶-draw estimate with
// another seed, and of the quadrature value.
func TestBMSMonteCarloExceedance(t *testing.T) {
	if testing.Short() {
		t.Skip("10⁶ Dirichlet draws")
	}
	lme := randomEvidence(4, 12, []float64{0.8, 0.4, 0}, 2)
	small := BMS(lme, rand.New(rand.NewPCG(10, 20)), 10000)
	big := BMS(lme, rand.New(rand.NewPCG(30, 40)), 1000000)
	if !floats.Equal(small.Alpha, big.Alpha) {
		t.Fatalf("α depends on the sample count: %v vs %v", small.Alpha, big.Alpha)
	}
	tol := 4 * math.Hypot(small.XPMCError, big.XPMCError)
	for k := range small.XP {
		if d := math.Abs(small.XP[k] - big.XP[k]); d > tol {
			t.Errorf("XP[%d]: 10⁴ draws %v, 10⁶ draws %v, |Δ| = %v > %v", k, small.XP[k], big.XP[k], d, tol)
		}
		q := dirichletXPQuad(small.Alpha, k)
		if d := math.Abs(small.XP[k] - q); d > 4*small.XPMCError {
			t.Errorf("XP[%d]: 10⁴ draws %v, quadrature %v, |Δ| = %v > 4 MC errors %v", k, small.XP[k], q, d, 4*small.XPMCError)
		}
		if d := math.Abs(big.XP[k] - q); d > 4*big.XPMCError {
			t.Errorf("XP[%d]: 10⁶ draws %v, quadrature %v, |Δ| = %v > 4 MC errors %v", k, big.XP[k], q, d, 4*big.XPMCError)
		}
	}
	if s := floats.Sum(small.XP); !scalar.EqualWithinAbs(s, 1, 1e-12) {
		t.Errorf("XP sums to %v", s)
	}
	if small.XPMCError <= 0 || small.XPMCError > 0.005 {
		t.Errorf("XPMCError = %v, want in (0, 0.005] for 10⁴ draws", small.XPMCError)
	}
}

// TestBMSIdenticalEvidence: when every model explains every participant
// equally, g_nk = 1/K and α_k = 1 + N/K, and the data favour the null of
// equal frequencies: BOR is large and PXP ≈ 1/K. BOR grows only slowly with
// N (for K = 2 and N = 20 it is about 0.79), so the cases use N = 40.
func TestBMSIdenticalEvidence(t *testing.T) {
	for _, k := range []int{3, 6} {
		const n = 40
		lme := make([][]float64, n)
		for i := range lme {
			lme[i] = make([]float64, k)
			for j := range lme[i] {
				lme[i][j] = -100 - float64(i) // differs between participants, not models
			}
		}
		res := BMS(lme, rand.New(rand.NewPCG(5, 6)), 20000)
		for j, a := range res.Alpha {
			if !scalar.EqualWithinAbsOrRel(a, 1+float64(n)/float64(k), 1e-9, 1e-9) {
				t.Errorf("K=%d: α[%d] = %v, want 1 + N/K", k, j, a)
			}
		}
		if res.BOR <= 0.9 {
			t.Errorf("K=%d: BOR = %v, want > 0.9", k, res.BOR)
		}
		for j, p := range res.PXP {
			if math.Abs(p-1/float64(k)) > 0.05 {
				t.Errorf("K=%d: PXP[%d] = %v, want 1/K ± 0.05", k, j, p)
			}
		}
	}
}

// TestBMSFreeEnergyBounds checks F0 and F1 independently of the code's
// terms. F0 by hand: one participant with evidences (0, ln 3) has
// F0 = ln((1 + 3)/2) = ln 2. F1 is a variational lower bound (Jensen's
// inequality; Bishop 2006, Pattern Recognition and Machine Learning §10.1),
// so for K = 2 it must not exceed the exact log evidence of the RFX model,
//
//	ln p(y | RFX) = ln ∫_0^1 Π_n (r e^{lme_n1} + (1−r) e^{lme_n2}) dr   (flat prior on r)
//
// computed by quadrature, and the mean-field gap should be small.
func TestBMSFreeEnergyBounds(t *testing.T) {
	one := BMS([][]float64{{0, math.Log(3)}}, nil, 0)
	if !scalar.EqualWithinAbsOrRel(one.NullEvidence, math.Ln2, 1e-12, 1e-12) {
		t.Errorf("F0 = %v, want ln 2", one.NullEvidence)
	}
	for _, seed := range []uint64{5, 6, 7} {
		lme := randomEvidence(seed, 15, []float64{0, 1}, 3)
		res := BMS(lme, nil, 0)
		integrand := func(r float64) float64 {
			var s float64
			for _, l := range lme {
				s += math.Log(r*math.Exp(l[0]) + (1-r)*math.Exp(l[1]))
			}
			return math.Exp(s - res.FreeEnergy) // scaled to stay in range
		}
		exact := math.Log(quad.Fixed(integrand, 0, 1, 2000, nil, 0)) + res.FreeEnergy
		if gap := exact - res.FreeEnergy; gap < -1e-9 || gap > 0.5 {
			t.Errorf("seed %d: F1 = %v, exact ln p(y|RFX) = %v: gap %v, want in [0, 0.5]", seed, res.FreeEnergy, exact, gap)
		}
		if want := 1 / (1 + math.Exp(res.FreeEnergy-res.NullEvidence)); !scalar.EqualWithinAbsOrRel(res.BOR, want, 1e-15, 1e-12) {
			t.Errorf("seed %d: BOR = %v, want 1/(1+exp(F1−F0)) = %v", seed, res.BOR, want)
		}
	}
}

// TestBMSNoOverflowWithHugeEvidence guards the log-sum-exp normalisation:
// evidences of ±1e5 nats would overflow exp directly.
func TestBMSNoOverflowWithHugeEvidence(t *testing.T) {
	lme := [][]float64{{-1e5, -1e5 - 800, -1e5 - 900}, {2e5, 2e5 - 1000, 2e5 - 5}, {-3e5 - 3, -3e5, -3e5 - 700}}
	res := BMS(lme, rand.New(rand.NewPCG(1, 1)), 1000)
	for _, v := range append(append(append([]float64{res.BOR, res.FreeEnergy, res.NullEvidence}, res.Alpha...), res.XP...), res.PXP...) {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			t.Fatalf("non-finite result: %+v", res)
		}
	}
	// Each participant's posterior g_n sums to 1, so Σα = K·α0 + N = 6
	// whatever the split. Participant 0 goes to model 0, participant 1
	// mostly to model 0 (5 nats ahead of model 2), participant 2 mostly to
	// model 1 (3 nats ahead of model 0): α_0 > α_1 > α_2.
	if s := floats.Sum(res.Alpha); !scalar.EqualWithinAbsOrRel(s, 6, 1e-9, 1e-9) {
		t.Errorf("Σα = %v, want K + N = 6", s)
	}
	if !(res.Alpha[0] > res.Alpha[1] && res.Alpha[1] > res.Alpha[2]) {
		t.Errorf("α = %v, want decreasing", res.Alpha)
	}
}

// TestBMSRepeats: the same seed gives the identical result; another seed
// changes only the Monte Carlo part.
func TestBMSRepeats(t *testing.T) {
	lme := randomEvidence(8, 20, []float64{0.5, 0, 0.2, 0.1}, 2)
	a := BMS(lme, rand.New(rand.NewPCG(42, 43)), 5000)
	b := BMS(lme, rand.New(rand.NewPCG(42, 43)), 5000)
	if !reflect.DeepEqual(a, b) {
		t.Errorf("same seed, different results:\n%+v\n%+v", a, b)
	}
	c := BMS(lme, rand.New(rand.NewPCG(44, 45)), 5000)
	if !floats.Equal(a.Alpha, c.Alpha) || a.BOR != c.BOR {
		t.Errorf("α or BOR depends on the seed")
	}
	if floats.Equal(a.XP, c.XP) {
		t.Errorf("XP identical under different seeds: %v", a.XP)
	}
}

func TestBMSPanics(t *testing.T) {
	for _, c := range []struct {
		name string
		f    func()
	}{
		{"no participants", func() { BMS(nil, nil, 0) }},
		{"one model", func() { BMS([][]float64{{1}}, nil, 0) }},
		{"ragged", func() { BMS([][]float64{{1, 2}, {1}}, nil, 0) }},
		{"NaN evidence", func() { BMS([][]float64{{1, math.NaN()}}, nil, 0) }},
		{"infinite evidence", func() { BMS([][]float64{{1, math.Inf(-1)}}, nil, 0) }},
		{"nil rng with K=3", func() { BMS([][]float64{{1, 2, 3}}, nil, 100) }},
		{"no samples with K=3", func() { BMS([][]float64{{1, 2, 3}}, rand.New(rand.NewPCG(1, 1)), 0) }},
	} {
		t.Run(c.name, func(t *testing.T) { statsMustPanic(t, c.f) })
	}
}

func BenchmarkBMS(b *testing.B) {
	lme := randomEvidence(9, 40, []float64{1, 0.5, 0, 0, -0.5, 0.2}, 3)
	for b.Loop() {
		BMS(lme, rand.New(rand.NewPCG(1, 2)), 10000)
	}
}
