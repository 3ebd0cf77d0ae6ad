package recovery

import (
	"context"
	"encoding/json"
	"math"
	"math/rand/v2"
	"os"
	"reflect"
	"runtime"
	"strings"
	"sync"
	"testing"
	"time"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/mathext"
	"gonum.org/v1/gonum/stat/distuv"

	"discrimen/models"
)

// bmsVariant runs one of the two implementations of random-effects BMS, so
// every property below is checked through both.
type bmsVariant struct {
	name string
	run  func(lme [][]float64) BMSResult
}

var bmsVariants = []bmsVariant{
	{"BMS", func(lme [][]float64) BMSResult { return BMS(lme, rand.New(rand.NewPCG(3, 4)), 20000) }},
	{"BMSQuadrature", BMSQuadrature},
}

// TestGroupBMSStrongFavour: when every participant's evidence favours model
// 0 by 50 nats, g_n0 = 1 and the Dirichlet update of Stephan et al. 2009
// (NeuroImage 46:1004) gives α = (1 + N, 1, …, 1): E[r_0] → (N+1)/(N+K).
func TestGroupBMSStrongFavour(t *testing.T) {
	for _, v := range bmsVariants {
		for _, c := range []struct{ n, k int }{{5, 2}, {20, 3}, {10, 6}, {40, 6}} {
			res := v.run(strongEvidence(c.n, c.k))
			want := float64(c.n+1) / float64(c.n+c.k)
			if !scalar.EqualWithinAbs(res.Expected[0], want, 1e-6) {
				t.Errorf("%s N=%d K=%d: Expected[0] = %v, want (N+1)/(N+K) = %v", v.name, c.n, c.k, res.Expected[0], want)
			}
			if c.n >= 20 && (res.PXP[0] <= 0.99 || res.BOR > 1e-3) {
				t.Errorf("%s N=%d K=%d: PXP[0] = %v, BOR = %v; want PXP > 0.99 and BOR < 1e-3", v.name, c.n, c.k, res.PXP[0], res.BOR)
			}
		}
	}
}

// TestGroupBMSTwoModelExact: for K = 2, r_1 ~ Beta(α_1, α_2), so
// XP_1 = 1 − I_{1/2}(α_1, α_2) (Stephan et al. 2009). Reference:
// gonum distuv.Beta{α_1, α_2}.CDF(0.5) = I_{1/2}(α_1, α_2).
func TestGroupBMSTwoModelExact(t *testing.T) {
	for _, v := range bmsVariants {
		for seed, shift := range [][]float64{{0, 0}, {0, 1.5}, {4, 0}, {0.3, 0}} {
			lme := randomEvidence(uint64(20+seed), 15+5*seed, shift, 2.5)
			res := v.run(lme)
			want := 1 - distuv.Beta{Alpha: res.Alpha[0], Beta: res.Alpha[1]}.CDF(0.5)
			if !scalar.EqualWithinAbsOrRel(res.XP[0], want, 1e-12, 1e-10) {
				t.Errorf("%s shift %v: XP[0] = %v, 1 − Beta(α1, α2).CDF(½) = %v", v.name, shift, res.XP[0], want)
			}
			if q := ExceedanceQuadrature(res.Alpha, 0); !scalar.EqualWithinAbsOrRel(q, want, 1e-12, 1e-10) {
				t.Errorf("ExceedanceQuadrature(%v, 0) = %v, want %v", res.Alpha, q, want)
			}
		}
	}
}

// TestGroupBMSIdenticalEvidence: evidences equal across models give
// g_nk = 1/K, α_k = 1 + N/K; the null of equal frequencies is then the
// better account, so the Bayesian omnibus risk is near 1 and every
// protected exceedance probability near 1/K (Rigoux et al. 2014,
// NeuroImage 84:971: PXP = XP(1 − BOR) + BOR/K). BOR approaches 1
// slowly in N, slowest for K = 2 (0.84 at N = 40), hence N = 200 there.
func TestGroupBMSIdenticalEvidence(t *testing.T) {
	for _, v := range bmsVariants {
		for _, k := range []int{2, 3, 6} {
			n := 40
			if k == 2 {
				n = 200
			}
			lme := make([][]float64, n)
			for i := range lme {
				lme[i] = make([]float64, k)
				for j := range lme[i] {
					lme[i][j] = -80 - 3*float64(i)
				}
			}
			res := v.run(lme)
			if res.BOR <= 0.85 {
				t.Errorf("%s K=%d: BOR = %v, want near 1 (> 0.85)", v.name, k, res.BOR)
			}
			for j, p := range res.PXP {
				if math.Abs(p-1/float64(k)) > 0.05 {
					t.Errorf("%s K=%d: PXP[%d] = %v, want 1/K ± 0.05", v.name, k, j, p)
				}
			}
		}
	}
}

// TestBMSQuadratureMatchesBMS: the reorganised updates reach the same α,
// free energies and omnibus risk as BMS, in the same number of iterations.
func TestBMSQuadratureMatchesBMS(t *testing.T) {
	for i, c := range []struct {
		n     int
		shift []float64
		sd    float64
	}{
		{12, []float64{0.8, 0.4, 0}, 2},
		{40, []float64{1, 0.5, 0, 0, -0.5, 0.2}, 3},
		{7, []float64{0, 0, 0, 0}, 1},
		{25, []float64{30, 0, -20, 5, 1}, 10},
	} {
		lme := randomEvidence(uint64(40+i), c.n, c.shift, c.sd)
		a, b := BMS(lme, rand.New(rand.NewPCG(1, 1)), 10), BMSQuadrature(lme)
		if !floats.EqualApprox(a.Alpha, b.Alpha, 1e-9) || !floats.EqualApprox(a.Expected, b.Expected, 1e-9) {
			t.Errorf("case %d: α %v vs %v", i, a.Alpha, b.Alpha)
		}
		for _, p := range [][2]float64{{a.FreeEnergy, b.FreeEnergy}, {a.NullEvidence, b.NullEvidence}, {a.BOR, b.BOR}} {
			if !scalar.EqualWithinAbsOrRel(p[0], p[1], 1e-9, 1e-9) {
				t.Errorf("case %d: F1, F0 or BOR: BMS %v, BMSQuadrature %v", i, p[0], p[1])
			}
		}
		if a.Iterations != b.Iterations || a.Converged != b.Converged || b.XPMCError != 0 {
			t.Errorf("case %d: iterations %d/%v vs %d/%v, MC error %v", i, a.Iterations, a.Converged, b.Iterations, b.Converged, b.XPMCError)
		}
	}
}

// randomAlpha draws Dirichlet parameters ≥ 1 (as BMS produces) on mixed
// scales, the larger ones as in groups of up to a few thousand.
func randomAlpha(rng *rand.Rand) []float64 {
	alpha := make([]float64, 3+rng.IntN(5))
	scale := []float64{0.5, 3, 20, 60, 400, 3000}[rng.IntN(6)]
	for j := range alpha {
		alpha[j] = 1 + scale*rng.Float64()
	}
	return alpha
}

// TestExceedanceQuadratureVsMonteCarlo: the quadrature XP lies within 4
// Monte Carlo standard errors of BMS's 10⁴-draw estimate on the same α (the
// MC error is the one BMS states, XPMCError, per model √(p(1−p)/samples)).
func TestExceedanceQuadratureVsMonteCarlo(t *testing.T) {
	for i, c := range []struct {
		n     int
		shift []float64
	}{
		{12, []float64{0.8, 0.4, 0}},
		{20, []float64{0.5, 0, 0.2, 0.1}},
		{40, []float64{1, 0.5, 0, 0, -0.5, 0.2}},
		{9, []float64{0, 0, 0, 0, 0}},
	} {
		lme := randomEvidence(uint64(60+i), c.n, c.shift, 2)
		const samples = 10000
		mc := BMS(lme, rand.New(rand.NewPCG(uint64(i), 77)), samples)
		for k := range mc.XP {
			q := ExceedanceQuadrature(mc.Alpha, k)
			se := math.Sqrt(math.Max(q*(1-q), 1e-4) / samples)
			if d := math.Abs(q - mc.XP[k]); d > 4*se {
				t.Errorf("case %d k=%d: quadrature %v, Monte Carlo %v ± %v: |Δ| = %v > 4 SE", i, k, q, mc.XP[k], se, d)
			}
		}
	}
}

// TestExceedanceQuadratureAccuracy: on random α (K = 3…7, α up to 3001)
// the rule agrees with one of four times as many panels to 1e-12, the XP of
// all models sum to 1 within 1e-10 (an identity of the integrand that the
// rule does not use), XP is ordered as α (the monotonicity groupRecovered
// relies on, proved in its comment), and the pairwise beta bounds hold.
func TestExceedanceQuadratureAccuracy(t *testing.T) {
	rng := rand.New(rand.NewPCG(8, 9))
	for trial := 0; trial < 150; trial++ {
		alpha := randomAlpha(rng)
		xp := make([]float64, len(alpha))
		for k := range alpha {
			xp[k] = ExceedanceQuadrature(alpha, k)
			if fine := exceedanceQuad(alpha, k, xpPanelScale/4); !scalar.EqualWithinAbs(xp[k], fine, 1e-12) {
				t.Errorf("α = %v, k = %d: %v, with 4× panels %v", alpha, k, xp[k], fine)
			}
		}
		if s := floats.Sum(xp); !scalar.EqualWithinAbs(s, 1, 1e-10) {
			t.Errorf("α = %v: XP sums to %v", alpha, s)
		}
		for i := range alpha {
			for j := range alpha {
				if alpha[i] > alpha[j] && xp[i] < xp[j] {
					t.Errorf("α = %v: α[%d] > α[%d] but XP %v < %v", alpha, i, j, xp[i], xp[j])
				}
			}
			lower, upper := 1.0, 1.0
			for j := range alpha {
				if j != i {
					b := mathext.RegIncBeta(alpha[i], alpha[j], 0.5)
					lower -= b
					upper = math.Min(upper, 1-b)
				}
			}
			if xp[i] < lower-1e-10 || xp[i] > upper+1e-10 {
				t.Errorf("α = %v: XP[%d] = %v outside the bounds [%v, %v]", alpha, i, xp[i], lower, upper)
			}
		}
	}
}

// TestGroupWinnerMatchesFullPXP: the bounded decision agrees with
// computing every PXP by quadrature and applying the rule directly (the
// largest PXP, if it exceeds the threshold), on groups near and far from
// the threshold.
func TestGroupWinnerMatchesFullPXP(t *testing.T) {
	rng := rand.New(rand.NewPCG(10, 11))
	quads, winners := 0, 0
	for trial := 0; trial < 300; trial++ {
		k := 2 + rng.IntN(5)
		shift := make([]float64, k)
		for j := range shift {
			shift[j] = 2 * rng.Float64()
		}
		lme := randomEvidence(uint64(100+trial), 3+rng.IntN(38), shift, 1+3*rng.Float64())
		res := BMSQuadrature(lme)
		p := newEvidencePool(lme, k)
		rows := make([]int, len(lme))
		for i := range rows {
			rows[i] = i
		}
		s := newVBScratch(k)
		o := p.vb(rows, s)
		top := floats.MaxIdx(res.PXP)
		for _, thr := range []float64{0.3, 0.5, 0.9, 0.95, 0.99} {
			want := -1
			if res.PXP[top] > thr {
				want = top
			}
			got, q := groupWinner(s.alpha, o.logOdds, thr)
			if q {
				quads++
			}
			if got >= 0 {
				winners++
			}
			if got != want && math.Abs(res.PXP[top]-thr) > 1e-9 {
				t.Errorf("trial %d thr=%v: winner %d, full PXP %v says %d", trial, thr, got, res.PXP, want)
			}
		}
	}
	if winners < 300 || winners > 1200 {
		t.Errorf("%d of 1500 decisions found a winner; the cases should mix both outcomes", winners)
	}
	t.Logf("%d winners, %d decisions needed quadrature", winners, quads)
}

// controlledPool returns n participants of generator g whose log evidence
// favours model g by margin nats over k−1 others, with N(0, sd²) noise.
func controlledPool(seed uint64, n, k, g int, margin, sd float64) [][]float64 {
	shift := make([]float64, k)
	shift[g] = margin
	return randomEvidence(seed, n, shift, sd)
}

func numsF(x []NullFloat) []float64 {
	out := make([]float64, len(x))
	for i, v := range x {
		out[i] = float64(v)
	}
	return out
}

func sweepOne(seed uint64, gens []string, pools [][][]float64, r models.Replication, workers int) *GroupReport {
	dp := designPools{Name: "d"}
	for _, p := range pools {
		dp.Pools = append(dp.Pools, newEvidencePool(p, len(gens)))
	}
	return sweepGroups(seed, gens, []designPools{dp}, r, workers)[0]
}

// TestGroupCurvesMonotone: with each participant's evidence favouring its
// generator by a fixed margin, group recovery can only grow with N; the
// estimated curves may fall by at most 2 binomial SEs of the difference.
func TestGroupCurvesMonotone(t *testing.T) {
	gens := []string{"a", "b", "c", "d"}
	margins := []float64{3, 2, 1.5, 0.3}
	var pools [][][]float64
	for g := range gens {
		pools = append(pools, controlledPool(uint64(200+g), 150, len(gens), g, margins[g], 2))
	}
	r := models.Replication{GroupSizes: []int{5, 10, 20, 40, 80}, Replicates: 400, PXPThreshold: 0.95, TargetRate: 0.8}
	gr := sweepOne(1, gens, pools, r, 2)
	reps := float64(r.Replicates)
	for g, row := range gr.Recovery {
		for n := 1; n < len(row); n++ {
			p0, p1 := float64(row[n-1]), float64(row[n])
			se := math.Sqrt((p0*(1-p0) + p1*(1-p1)) / reps)
			if p1 < p0-2*se {
				t.Errorf("%s: rate falls from %v at N=%d to %v at N=%d (2 SE = %v)", gens[g], p0, r.GroupSizes[n-1], p1, r.GroupSizes[n], 2*se)
			}
		}
		for n := range row {
			c := gr.Confusion[n][g]
			if c[g] != row[n] || floats.Sum(numsF(c)) > 1+1e-12 {
				t.Errorf("%s at N=%d: confusion row %v, recovery %v; want the diagonal to be the recovery and a sum ≤ 1", gens[g], r.GroupSizes[n], c, row[n])
			}
		}
		if rise := float64(row[len(row)-1]) - float64(row[0]); g < 3 && rise < 0.3 {
			t.Errorf("%s: rate rises only %v from N=5 to N=80 (%v)", gens[g], rise, row)
		}
	}
	t.Logf("recovery %v, sample sizes %v, %d quadratures", gr.Recovery, gr.Summary, gr.Quadratures)
}

// TestSampleSizeNullWhenUnreachable: a generator whose own model is always
// worse, and one indistinguishable from every candidate, never reach the
// target rate; their sample size is null and the sentence says so. A
// generator favoured by 50 nats reaches it at the smallest size.
func TestSampleSizeNullWhenUnreachable(t *testing.T) {
	gens := []string{"clear", "worse", "same"}
	same := make([][]float64, 60)
	for i := range same {
		same[i] = []float64{-10 - float64(i), -10 - float64(i), -10 - float64(i)}
	}
	pools := [][][]float64{
		controlledPool(1, 60, 3, 0, 50, 1),
		controlledPool(2, 60, 3, 1, -3, 1),
		same,
	}
	r := models.Replication{GroupSizes: []int{20, 10, 40}, Replicates: 50, PXPThreshold: 0.95, TargetRate: 0.8}
	gr := sweepOne(5, gens, pools, r, 2)
	if !reflect.DeepEqual(gr.GroupSizes, []int{10, 20, 40}) {
		t.Errorf("group sizes %v, want sorted [10 20 40]", gr.GroupSizes)
	}
	if p := gr.SampleSize["clear"]; p == nil || *p != 10 {
		t.Errorf("sample size of clear = %v, want 10", p)
	}
	for g, name := range gens[1:] {
		if p := gr.SampleSize[name]; p != nil {
			t.Errorf("sample size of %s = %d, want null", name, *p)
		}
		if want := "no group size tried (10, 20, 40) reaches 80% for " + name; !strings.HasPrefix(gr.Summary[g+1], want) {
			t.Errorf("summary %q, want it to start with %q", gr.Summary[g+1], want)
		}
		for n, v := range gr.Recovery[g+1] {
			if v != 0 {
				t.Errorf("%s at N=%d: rate %v, want 0", name, gr.GroupSizes[n], v)
			}
		}
	}
	if !strings.Contains(gr.Summary[1], "; at N = 40 the group analysis names ") || !strings.HasSuffix(gr.Summary[2], "(0% at every size)") {
		t.Errorf("summaries %q and %q: want a rival named for worse and none for same (tied α has no winner)", gr.Summary[1], gr.Summary[2])
	}
	// Every bootstrap round recovers clear, so ρ is the floor (10/60)²:
	// n_eff = 50/(1 + 49/36) = 21.2, and Wilson's lower end for 21.2 of
	// 21.2 is 21.2/(21.2 + 1.96²) = 0.85.
	if want := "clear is identified by the group analysis in 100% (95% interval 85–100%) of replicate studies from N = 10"; gr.Summary[0] != want {
		t.Errorf("summary %q, want %q", gr.Summary[0], want)
	}
	b, err := json.Marshal(gr)
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(string(b), `"sample_size":{"clear":10,"same":null,"worse":null}`) {
		t.Errorf("JSON sample_size block missing or wrong: %s", b)
	}
}

// TestGroupSkipsAndDrops: sizes above the pool are skipped with a note and
// null rates; participants with a failed fit are left out of their group
// and counted, at about the pool's share of them (hypergeometric mean).
func TestGroupSkipsAndDrops(t *testing.T) {
	gens := []string{"a", "b"}
	pa := controlledPool(3, 30, 2, 0, 50, 1)
	for i := 0; i < 30; i += 3 {
		pa[i][1] = math.NaN() // a third of the pool failed under candidate b
	}
	pb := controlledPool(4, 30, 2, 1, 50, 1)
	r := models.Replication{GroupSizes: []int{20, 40}, Replicates: 200, PXPThreshold: 0.95, TargetRate: 0.8}
	gr := sweepOne(6, gens, [][][]float64{pa, pb}, r, 1)
	for g := range gens {
		if v := float64(gr.Recovery[g][1]); !math.IsNaN(v) {
			t.Errorf("%s at N=40 from a pool of 30: rate %v, want NaN (skipped)", gens[g], v)
		}
		if v := float64(gr.Recovery[g][0]); v != 1 {
			t.Errorf("%s at N=20: rate %v, want 1 (50 nats per participant)", gens[g], v)
		}
	}
	share := float64(gr.Dropped[0][0]) / float64(20*r.Replicates)
	if math.Abs(share-1.0/3) > 0.02 || gr.Dropped[1][0] != 0 {
		t.Errorf("dropped %v, want about a third of a's 4000 draws and none of b's", gr.Dropped)
	}
	notes := strings.Join(gr.Notes, "\n")
	for _, want := range []string{"Group size 40 skipped for a: larger than its pool of 30", "participant draws had a failed or non-finite fit", "no refitting"} {
		if !strings.Contains(notes, want) {
			t.Errorf("notes lack %q:\n%s", want, notes)
		}
	}
	b, _ := json.Marshal(gr)
	if !strings.Contains(string(b), `"recovery":[[1,null],[1,null]]`) {
		t.Errorf("skipped sizes not null in JSON: %s", b)
	}
	if gr.BMSRuns != 2*r.Replicates {
		t.Errorf("BMS runs %d, want %d", gr.BMSRuns, 2*r.Replicates)
	}
}

// TestGroupDeterministic: the same seed gives the same report, bootstrap
// rounds included, with 1 and 4 workers and on a second run; another seed
// draws other groups.
func TestGroupDeterministic(t *testing.T) {
	gens := []string{"a", "b", "c"}
	var pools [][][]float64
	for g := range gens {
		pools = append(pools, controlledPool(uint64(300+g), 50, 3, g, 0.8, 2))
	}
	r := models.Replication{GroupSizes: []int{5, 15, 30, 50}, Replicates: 100, PXPThreshold: 0.9, TargetRate: 0.8}
	a := sweepOne(7, gens, pools, r, 1)
	b := sweepOne(7, gens, pools, r, 4)
	c := sweepOne(7, gens, pools, r, 4)
	if !reflect.DeepEqual(a, b) || !reflect.DeepEqual(b, c) {
		t.Errorf("same seed, different group reports:\n%+v\n%+v", a, b)
	}
	// 3 generators × 3 sizes below the pool × 200 rounds of ⌈25/N⌉ ≥ 2 groups.
	if want := 3 * 200 * (5 + 2 + 2); a.BootstrapRuns != want {
		t.Errorf("%d bootstrap analyses, want %d", a.BootstrapRuns, want)
	}
	d := sweepOne(8, gens, pools, r, 4)
	if reflect.DeepEqual(a.Successes, d.Successes) || reflect.DeepEqual(a.CILow, d.CILow) {
		t.Errorf("seeds 7 and 8 give identical successes %v and intervals %v", a.Successes, a.CILow)
	}
}

// TestGroupInterval checks groupInterval against the formulas in its
// comment, worked by hand here: ρ̂ from the rounds' spread net of their
// binomial spread, clamped to [(N/P)², N/P], n_eff = min(B, R/(1+(R−1)ρ)),
// and Wilson's interval at n_eff trials.
func TestGroupInterval(t *testing.T) {
	wilson := func(p, n float64) [2]float64 { lo, hi := WilsonInterval(p*n, n); return [2]float64{lo, hi} }
	// Four rounds of m = 4 groups: p_b = 1, 0.5, 0.5, 0; p̄ = 0.5,
	// S² = (0.25 + 0 + 0 + 0.25)/3 = 1/6, within = (0 + 0.25 + 0.25 + 0)/4/3 = 1/24,
	// σ̂² = 1/6 − 1/24 = 1/8, ρ̂ = (1/8)/(1/4) = 0.5.
	rounds := []int{4, 2, 2, 0}
	for _, c := range []struct {
		name      string
		overlap   float64
		succ, R   int
		rounds    []int
		perRound  int
		wantNEff  float64
		wantLoHis [2]float64
	}{
		// ρ = 0.5 is inside [0.36, 0.6]: n_eff = 100/(1 + 99·0.5) = 1.980…, under B = 4.
		{"estimate", 0.6, 70, 100, rounds, 4, 100 / (1 + 99*0.5), wilson(0.7, 100/(1+99*0.5))},
		// N/P = 0.3 caps ρ̂ at 0.3 (Hoeffding): n_eff = 100/30.7.
		{"Hoeffding cap", 0.3, 70, 100, rounds, 4, 100 / (1 + 99*0.3), wilson(0.7, 100/(1+99*0.3))},
		// No round varies: ρ = (N/P)² = 0.01, n_eff = min(B = 4, 100/1.99) = 4.
		{"floor, then the rounds", 0.1, 100, 100, []int{4, 4, 4, 4}, 4, 4, wilson(1, 4)},
		// 1000 rounds at the floor 0.0001: n_eff = 500/1.0499 = 476.2…
		{"floor", 0.01, 0, 500, make([]int, 1000), 3, 500 / (1 + 499*1e-4), wilson(0, 500/(1+499*1e-4))},
		// A whole pool is one study: n_eff = 1, no rounds.
		{"whole pool", 1, 500, 500, nil, 0, 1, wilson(1, 1)},
	} {
		t.Run(c.name, func(t *testing.T) {
			lo, hi, n := groupInterval(c.succ, c.R, c.overlap, c.rounds, c.perRound)
			if !scalar.EqualWithinAbsOrRel(n, c.wantNEff, 1e-12, 1e-12) || !scalar.EqualWithinAbs(lo, c.wantLoHis[0], 1e-12) || !scalar.EqualWithinAbs(hi, c.wantLoHis[1], 1e-12) {
				t.Errorf("groupInterval = [%v, %v] at n_eff %v, want [%v, %v] at %v", lo, hi, n, c.wantLoHis[0], c.wantLoHis[1], c.wantNEff)
			}
		})
	}
	// One success of one study: Wilson's lower end z²/(1+z²)·… = 1/(1 + z²).
	lo, _, _ := groupInterval(3, 3, 1, nil, 0)
	if want := 1 / (1 + normal975*normal975); !scalar.EqualWithinAbs(lo, want, 1e-12) {
		t.Errorf("whole pool, all recovered: lower end %v, want 1/(1 + z²) = %v", lo, want)
	}
	for _, f := range []func(){
		func() { groupInterval(5, 4, 0.5, rounds, 4) },
		func() { groupInterval(1, 4, 0, rounds, 4) },
		func() { groupInterval(1, 4, 0.5, rounds, 1) },
		func() { groupInterval(1, 4, 0.5, []int{1}, 4) },
	} {
		statsMustPanic(t, f)
	}
}

// ninetyPercentPool returns n participants of which the first 9 in every 10
// favour candidate 0 by 2 nats over the other k−1 and the tenth favours
// candidate 1 by 2 nats, with N(0, 0.5²) noise: candidate 0 wins 90% of the
// participants.
func ninetyPercentPool(seed uint64, n, k int) [][]float64 {
	lme := randomEvidence(seed, n, make([]float64, k), 0.5)
	for i := range lme {
		if i%10 == 9 {
			lme[i][1] += 2
		} else {
			lme[i][0] += 2
		}
	}
	return lme
}

// TestGroupIntervalCarriesPoolError guards the issue "Verdicts no more
// certain than the simulation": groups as large as a pool of 30 are 500
// copies of one group, all recovered, and the plain Wilson interval of
// 500/500 is 0.99–1.00. The reported interval must instead be that of one
// study, the size must be flagged, and a pool four times larger (the same
// first 30 participants and more, the same seed) must give a narrower
// interval at the same size, without a flag.
func TestGroupIntervalCarriesPoolError(t *testing.T) {
	gens := []string{"a", "b", "c"}
	r := models.Replication{GroupSizes: []int{30}, Replicates: 500, PXPThreshold: 0.95, TargetRate: 0.8}
	run := func(P int) *GroupReport {
		pools := [][][]float64{ninetyPercentPool(11, P, 3), controlledPool(12, P, 3, 1, 3, 1), controlledPool(13, P, 3, 2, 3, 1)}
		wins := 0
		for _, row := range pools[0] {
			if floats.MaxIdx(row) == 0 {
				wins++
			}
		}
		if wins != P*9/10 {
			t.Fatalf("pool of %d: candidate 0 wins %d participants, want 90%%", P, wins)
		}
		return sweepOne(21, gens, pools, r, 2)
	}
	small, large := run(30), run(120)
	if small.Successes[0][0] != 500 {
		t.Fatalf("pool of 30: %d of 500 copies of the whole pool recovered, want all (the case of the issue)", small.Successes[0][0])
	}
	if lo, _ := WilsonInterval(500, 500); lo < 0.99 {
		t.Fatalf("plain Wilson lower end of 500/500 is %v, want the degenerate ≥ 0.99", lo)
	}
	width := func(g *GroupReport) float64 { return float64(g.CIHigh[0][0] - g.CILow[0][0]) }
	if n := float64(small.EffectiveReplicates[0][0]); n != 1 {
		t.Errorf("N = P: effective replicates %v, want 1", n)
	}
	if lo := float64(small.CILow[0][0]); lo > 0.25 || float64(small.CIHigh[0][0]) != 1 {
		t.Errorf("N = P = 30: interval [%v, %v], want Wilson's for 1 of 1, [0.21, 1]", lo, float64(small.CIHigh[0][0]))
	}
	if ws, wl := width(small), width(large); !(ws > 1.5*wl) || wl < 0.02 {
		t.Errorf("interval width %v from a pool of 30, %v from a pool of 120: want the first over 1.5 times the second, and the second beyond plain Wilson", ws, wl)
	}
	want := []GroupFlag{{GroupSize: 30, Pool: 30, Generators: gens, Reason: "N = 30 is above half the pool of 30: replicate groups overlap heavily (every replicate group is the whole pool)"}}
	if !reflect.DeepEqual(small.Flags, want) || !reflect.DeepEqual(small.Pool, []int{30, 30, 30}) {
		t.Errorf("pool of 30: flags %+v, pool %v; want %+v and [30 30 30]", small.Flags, small.Pool, want)
	}
	if len(large.Flags) != 0 || !reflect.DeepEqual(large.Pool, []int{120, 120, 120}) {
		t.Errorf("pool of 120, N = 30: flags %+v, pool %v; want none and [120 120 120]", large.Flags, large.Pool)
	}
	b, _ := json.Marshal(small)
	for _, key := range []string{`"pool":[30,30,30]`, `"flags":[{"group_size":30,"pool":30,"generators":["a","b","c"],"reason":"N = 30 is above half`, `"effective_replicates":[[1],`, `"bootstrap_rounds":200`} {
		if !strings.Contains(string(b), key) {
			t.Errorf("JSON lacks %s: %s", key, b)
		}
	}
	t.Logf("N = 30: pool of 30 [%.3f, %.3f] (n_eff %.2f); pool of 120 rate %.3f [%.3f, %.3f] (n_eff %.1f)",
		small.CILow[0][0], small.CIHigh[0][0], small.EffectiveReplicates[0][0], large.Recovery[0][0], large.CILow[0][0], large.CIHigh[0][0], large.EffectiveReplicates[0][0])

	// Flagged but below the pool (25 of 30): the bootstrap runs, and the
	// interval is still far from 500 independent replicates.
	r.GroupSizes = []int{25}
	mid := run(30)
	if lo := float64(mid.CILow[0][0]); float64(mid.Recovery[0][0]) < 0.9 || lo > 0.6 || mid.BootstrapRuns != 3*200*2 {
		t.Errorf("N = 25 of 30: rate %v, interval [%v, %v], %d bootstrap analyses; want a rate ≥ 0.9, a lower end ≤ 0.6 and 1200 analyses",
			mid.Recovery[0][0], lo, mid.CIHigh[0][0], mid.BootstrapRuns)
	}
	t.Logf("N = 25 of 30: rate %.3f [%.3f, %.3f] (n_eff %.2f)", mid.Recovery[0][0], mid.CILow[0][0], mid.CIHigh[0][0], mid.EffectiveReplicates[0][0])
	if len(mid.Flags) != 1 || mid.Flags[0].Reason != "N = 25 is above half the pool of 30: replicate groups overlap heavily (any two share at least 20 participants, 20.8 on average)" {
		t.Errorf("N = 25 of 30: flags %+v", mid.Flags)
	}
}

// TestGroupIntervalCoverage draws 60 fresh pools of one generator and
// checks that the intervals cover the mean rate over pools (the rate of a
// fresh group of N, up to the mean's own error) in at least 85% of them at
// every size, where the plain Wilson interval over the replicates covers it
// in well under half at the larger sizes: the pool's sampling error is
// real, and the intervals carry it.
func TestGroupIntervalCoverage(t *testing.T) {
	if testing.Short() {
		t.Skip("60 sweeps")
	}
	gens := []string{"a", "b", "c", "d"}
	r := models.Replication{GroupSizes: []int{6, 15, 30}, Replicates: 300, PXPThreshold: 0.95, TargetRate: 0.8}
	const pools, P = 60, 60
	rates := make([][]float64, len(r.GroupSizes))
	var reports []*GroupReport
	for k := 0; k < pools; k++ {
		ps := [][][]float64{controlledPool(uint64(5000+k), P, 4, 0, 3, 2.5)}
		for g := 1; g < 4; g++ {
			ps = append(ps, controlledPool(uint64(6000+k), 2, 4, g, 1, 1)) // too small for any size
		}
		gr := sweepOne(uint64(k+1), gens, ps, r, runtime.GOMAXPROCS(0))
		reports = append(reports, gr)
		for n := range r.GroupSizes {
			rates[n] = append(rates[n], float64(gr.Recovery[0][n]))
		}
	}
	for n, N := range r.GroupSizes {
		mean := floats.Sum(rates[n]) / pools
		covered, plain := 0, 0
		for _, gr := range reports {
			if float64(gr.CILow[0][n]) <= mean && mean <= float64(gr.CIHigh[0][n]) {
				covered++
			}
			if lo, hi := WilsonInterval(float64(gr.Successes[0][n]), float64(r.Replicates)); lo <= mean && mean <= hi {
				plain++
			}
		}
		t.Logf("N = %d of %d: mean rate %.3f; covered by %d of %d intervals (plain Wilson: %d)", N, P, mean, covered, pools, plain)
		if covered < pools*85/100 {
			t.Errorf("N = %d: %d of %d intervals cover the mean rate %.3f, want at least 85%%", N, covered, pools, mean)
		}
		if N >= 15 && plain > pools/2 {
			t.Errorf("N = %d: the plain Wilson interval covers the mean rate in %d of %d pools; the check has lost its point", N, plain, pools)
		}
	}
}

func TestCheckReplication(t *testing.T) {
	ok := models.Replication{GroupSizes: []int{10}, Replicates: 5, PXPThreshold: 0.95, TargetRate: 0.8}
	if err := checkReplication(ok, nil); err != nil {
		t.Fatal(err)
	}
	// Groups are drawn from a design's participants: 10 of 6 cannot be.
	if err := checkReplication(ok, []models.Design{{Name: "d", Participants: 6}}); err == nil || !strings.Contains(err.Error(), "replication.group_sizes[0]: group_sizes[0] = 10 must be <= participants") {
		t.Errorf("group of 10 from 6 participants: error %v", err)
	}
	for _, c := range []struct {
		name, field string
		edit        func(*models.Replication)
	}{
		{"no sizes", "replication.group_sizes", func(r *models.Replication) { r.GroupSizes = nil }},
		{"zero size", "replication.group_sizes[1]", func(r *models.Replication) { r.GroupSizes = []int{5, 0} }},
		// The validator's rule: a group of one is no group.
		{"size one", "replication.group_sizes[0]", func(r *models.Replication) { r.GroupSizes = []int{1, 5} }},
		{"no replicates", "replication.replicates", func(r *models.Replication) { r.Replicates = 0 }},
		{"threshold 1", "replication.pxp_threshold", func(r *models.Replication) { r.PXPThreshold = 1 }},
		{"target 0", "replication.target_rate", func(r *models.Replication) { r.TargetRate = 0 }},
	} {
		t.Run(c.name, func(t *testing.T) {
			r := ok
			r.GroupSizes = []int{10}
			c.edit(&r)
			if err := checkReplication(r, nil); err == nil || !strings.Contains(err.Error(), c.field) {
				t.Errorf("error %v, want one naming %s", err, c.field)
			}
		})
	}
}

func TestExceedanceQuadraturePanics(t *testing.T) {
	for _, c := range []struct {
		name string
		f    func()
	}{
		{"one model", func() { ExceedanceQuadrature([]float64{1}, 0) }},
		{"k out of range", func() { ExceedanceQuadrature([]float64{1, 2, 3}, 3) }},
		{"zero alpha", func() { ExceedanceQuadrature([]float64{1, 0, 3}, 0) }},
		{"NaN alpha", func() { ExceedanceQuadrature([]float64{1, math.NaN(), 3}, 0) }},
		{"BMSQuadrature NaN evidence", func() { BMSQuadrature([][]float64{{1, math.NaN()}}) }},
		{"BMSQuadrature no participants", func() { BMSQuadrature(nil) }},
	} {
		t.Run(c.name, func(t *testing.T) { statsMustPanic(t, c.f) })
	}
}

// demoRun runs the demo study once per test binary.
var demoRun = sync.OnceValues(func() (*Report, error) {
	data, err := os.ReadFile("../testdata/studies/radio-watch.json")
	if err != nil {
		return nil, err
	}
	s, err := models.LoadStudy(data)
	if err != nil {
		return nil, err
	}
	return Run(context.Background(), s, Options{})
})

// TestDemoGroupAndRanking: the demo study's two designs are ranked with
// numbers, each has a group report for 6 generators × 3 sizes whose curves
// are monotone in N up to 2 binomial SEs, and the sweep (timed again on the
// stored fits) costs under 10% of the run.
func TestDemoGroupAndRanking(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the demo study")
	}
	rep, err := demoRun()
	if err != nil {
		t.Fatal(err)
	}
	if len(rep.Ranking) != 2 || rep.Preferred != rep.Ranking[0].Design {
		t.Fatalf("ranking %+v, preferred %q", rep.Ranking, rep.Preferred)
	}
	for _, r := range rep.Ranking {
		for _, v := range []NullFloat{r.NormalizedMI, r.WorstDiagonal, r.ParameterR} {
			if math.IsNaN(float64(v)) || v < 0 || v > 1 {
				t.Errorf("%s: measure %v not in [0, 1]", r.Design, v)
			}
		}
		if r.TrialsPerParticipant != 160 || r.MinutesPerParticipant <= 0 {
			t.Errorf("%s: %d trials, %v minutes", r.Design, r.TrialsPerParticipant, r.MinutesPerParticipant)
		}
		if !strings.Contains(rep.Verdict, f2(r.NormalizedMI)) {
			t.Errorf("verdict %q lacks normalised MI %s of %s", rep.Verdict, f2(r.NormalizedMI), r.Design)
		}
	}
	t.Logf("ranking: %+v\n%s", rep.Ranking, rep.Verdict)
	for _, d := range rep.Designs {
		g := d.Group
		if g == nil || len(g.Recovery) != 6 || len(g.GroupSizes) != 3 || g.BMSRuns != 6*3*500 {
			t.Fatalf("%s: group report %+v", d.Name, g)
		}
		for gi, row := range g.Recovery {
			for n := 1; n < len(row); n++ {
				p0, p1 := float64(row[n-1]), float64(row[n])
				se := math.Sqrt((p0*(1-p0) + p1*(1-p1)) / float64(g.Replicates))
				if p1 < p0-2*se {
					t.Errorf("%s, %s: rate falls from %v to %v (2 SE = %v)", d.Name, g.Generators[gi], p0, p1, 2*se)
				}
			}
		}
		t.Logf("%s: %v\n%s\n%s", d.Name, g.Recovery, strings.Join(g.Summary, "\n"), strings.Join(g.Notes, "\n"))
	}

	// Rebuild the per-generator pools from the stored fits and time the
	// sweep alone; it must also reproduce the report's group sections.
	s := rep.StudyFile
	designs, err := s.ExpandedDesigns()
	if err != nil {
		t.Fatal(err)
	}
	c := &Compiled{Study: s, Designs: designs}
	byDesign := make([][][]ParticipantResult, len(designs))
	index := map[string]int{}
	for i, h := range s.Hypotheses {
		index[h.Name] = i
	}
	for di, rows := range rep.Fits {
		byDesign[di] = make([][]ParticipantResult, len(s.Hypotheses))
		for _, r := range rows {
			g := index[r.Fits[0].Generator]
			byDesign[di][g] = append(byDesign[di][g], ParticipantResult{Participant: r.Fits[0].Participant, Truth: r.Truth, Fits: r.Fits})
		}
	}
	again := &Report{Designs: make([]DesignReport, len(designs))}
	start := time.Now()
	if err := c.groupLevel(again, byDesign); err != nil {
		t.Fatal(err)
	}
	sweep := time.Since(start).Seconds()
	for di := range designs {
		if !reflect.DeepEqual(again.Designs[di].Group, rep.Designs[di].Group) {
			t.Errorf("%s: the sweep on the stored fits differs from the report's", designs[di].Name)
		}
	}
	total := rep.Timing.TotalSeconds
	t.Logf("group sweep %.3f s of a %.1f s run (%.1f%%)", sweep, total, 100*sweep/total)
	if sweep > 0.1*total {
		t.Errorf("group sweep took %.3f s, over 10%% of the run's %.1f s", sweep, total)
	}
	js, err := rep.JSON()
	if err != nil {
		t.Fatal(err)
	}
	for _, key := range []string{`"design_ranking"`, `"preferred_design"`, `"sample_size"`, `"group_sizes"`, `"ci_low"`} {
		if !strings.Contains(string(js), key) {
			t.Errorf("report.json lacks %s", key)
		}
	}
}

// BenchmarkGroupSweep: one design of the demo's size, 6 generators × 100
// participants × 6 candidates, the default group sizes for that pool
// (models.DefaultGroupSizes(100): 5, 10, 20, 50) × 500 replicates, with
// the bootstrap rounds over each pool, on all cores. The demo study runs
// the sweep once per design, so twice this against BenchmarkDemoStudy is
// the sweep's share of a run.
//
//	go test ./recovery -run XXX -bench GroupSweep -benchtime 5x
func BenchmarkGroupSweep(b *testing.B) {
	gens := []string{"g0", "g1", "g2", "g3", "g4", "g5"}
	dp := designPools{Name: "bench"}
	for g := range gens {
		dp.Pools = append(dp.Pools, newEvidencePool(controlledPool(uint64(400+g), 100, 6, g, 1+0.5*float64(g), 3), 6))
	}
	r := models.Replication{GroupSizes: models.DefaultGroupSizes(100), Replicates: 500, PXPThreshold: 0.95, TargetRate: 0.8}
	var gr *GroupReport
	for b.Loop() {
		gr = sweepGroups(1, gens, []designPools{dp}, r, runtime.GOMAXPROCS(0))[0]
	}
	b.ReportMetric(float64(gr.BMSRuns), "replicate-analyses")
	b.ReportMetric(float64(gr.BootstrapRuns), "bootstrap-analyses")
}

// TestVaryDesignsRanked: a vary block expands one design into variants
// (models.Study.ExpandedDesigns); each is run, gets a group report and a
// row of the ranking, and the verdict names the preferred variant.
func TestVaryDesignsRanked(t *testing.T) {
	if testing.Short() {
		t.Skip("runs a study")
	}
	s := mustStudy(t, `{
	  "name": "vary trials (invented)", "seed": 13,
	  "designs": [{"name": "watch", "cti_ms": [300, 600, 900, 1200], "participants": 12, "measures": ["rt", "accuracy"],
	               "vary": [{"field": "trials_per_cti", "values": [8, 80], "labels": ["short", "long"]}]}],
	  "hypotheses": [
	    {"name": "flat", "family": "constant", "params": {"level": {"min": 0.3, "max": 1.5}}},
	    {"name": "ramp", "family": "linear", "params": {"slope": {"min": 0.5, "max": 3}}}
	  ],
	  "replication": {"group_sizes": [4, 12], "replicates": 50}
	}`)
	rep, err := Run(context.Background(), s, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if len(rep.Designs) != 2 || len(rep.Ranking) != 2 {
		t.Fatalf("%d designs, %d ranking rows; want 2 variants", len(rep.Designs), len(rep.Ranking))
	}
	names := map[string]int{}
	for _, r := range rep.Ranking {
		names[r.Design] = r.TrialsPerParticipant
	}
	if names["watch/short"] != 32 || names["watch/long"] != 320 {
		t.Errorf("ranking rows %+v, want watch/short (32 trials) and watch/long (320 trials)", rep.Ranking)
	}
	for _, d := range rep.Designs {
		if d.Group == nil || len(d.Group.Recovery) != 2 || !reflect.DeepEqual(d.Group.GroupSizes, []int{4, 12}) {
			t.Errorf("%s: group report %+v", d.Name, d.Group)
		}
	}
	if !strings.Contains(rep.Verdict, "Prefer "+rep.Preferred+" over ") {
		t.Errorf("verdict %q does not name the preferred design %q", rep.Verdict, rep.Preferred)
	}
	t.Logf("%+v\n%s", rep.Ranking, rep.Verdict)
}

// TestSmallStudyWithoutReplication: a study of 20 participants per
// generator with no replication block validates (the default group sizes
// follow the pool: 5 and 10, at most half of it) and runs end to end, with
// a group report whose intervals carry the pool's error and no flag.
func TestSmallStudyWithoutReplication(t *testing.T) {
	s := mustStudy(t, `{
	  "name": "twenty participants (invented)", "seed": 3,
	  "designs": [{"name": "short", "cti_ms": [300, 900], "trials_per_cti": 10, "participants": 20, "measures": ["rt", "accuracy"]}],
	  "hypotheses": [
	    {"name": "flat", "family": "constant", "params": {"level": {"min": 0.3, "max": 1.5}}},
	    {"name": "ramp", "family": "linear", "params": {"slope": {"min": 0.5, "max": 3}}}
	  ]
	}`)
	if !reflect.DeepEqual(s.Replication.GroupSizes, []int{5, 10}) || s.Replication.Replicates != 500 {
		t.Fatalf("default replication %+v, want group sizes [5 10] and 500 replicates", s.Replication)
	}
	rep, err := Run(context.Background(), s, Options{Workers: 2})
	if err != nil {
		t.Fatal(err)
	}
	if len(rep.Designs) != 1 || rep.Designs[0].Group == nil {
		t.Fatalf("designs %d, group report missing", len(rep.Designs))
	}
	g := rep.Designs[0].Group
	if !reflect.DeepEqual(g.GroupSizes, []int{5, 10}) || !reflect.DeepEqual(g.Pool, []int{20, 20}) || len(g.Flags) != 0 {
		t.Errorf("group sizes %v, pool %v, flags %+v; want [5 10], [20 20] and none (10 is half the pool)", g.GroupSizes, g.Pool, g.Flags)
	}
	if g.BMSRuns != 2*2*500 || !reflect.DeepEqual(g.BootstrapGroups, [][]int{{2, 2}, {2, 2}}) || g.BootstrapRuns != 2*2*200*2 {
		t.Errorf("%d replicate analyses, bootstrap groups %v, %d bootstrap analyses; want 2000, [[2 2] [2 2]], 1600", g.BMSRuns, g.BootstrapGroups, g.BootstrapRuns)
	}
	for gi, row := range g.Recovery {
		for n, v := range row {
			lo, hi, ne := float64(g.CILow[gi][n]), float64(g.CIHigh[gi][n]), float64(g.EffectiveReplicates[gi][n])
			// n_eff ≤ 500/(1 + 499·(N/P)²): 500/32.2 at N = 5, 500/125.8 at N = 10.
			limit := 500 / (1 + 499*math.Pow(float64(g.GroupSizes[n])/20, 2))
			if !(lo <= float64(v) && float64(v) <= hi) || !(ne >= 1 && ne <= limit+1e-9) {
				t.Errorf("%s at N = %d: rate %v, interval [%v, %v], n_eff %v (want at most %v)", g.Generators[gi], g.GroupSizes[n], v, lo, hi, ne, limit)
			}
		}
	}
	js, err := rep.JSON()
	if err != nil {
		t.Fatal(err)
	}
	for _, key := range []string{`"pool": [`, `"flags": []`, `"effective_replicates"`, `"group_bootstrap_rounds": 200`} {
		if !strings.Contains(string(js), key) {
			t.Errorf("report.json lacks %s", key)
		}
	}
	t.Logf("recovery %v, intervals %v–%v, n_eff %v\n%s", g.Recovery, g.CILow, g.CIHigh, g.EffectiveReplicates, strings.Join(g.Summary, "\n"))
}
