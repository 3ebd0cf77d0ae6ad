package recovery

import (
	"fmt"
	"math"
	"runtime"
	"slices"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"

	"gonum.org/v1/gonum/integrate/quad"
	"gonum.org/v1/gonum/mathext"

	"discrimen/models"
)

// GroupReport is the group-level analysis of one design (model.md §7):
// replicate studies of N participants drawn without replacement from each
// generator's synthetic pool, each analysed by random-effects BMS.
type GroupReport struct {
	// Generators names the rows of Recovery, CILow, CIHigh, Successes and
	// Dropped, in hypothesis order.
	Generators []string `json:"generators"`
	// GroupSizes are the sizes N swept (ascending, without repeats); the
	// columns of the matrices below. A size larger than the pool is kept
	// with null rates and explained in Notes.
	GroupSizes   []int   `json:"group_sizes"`
	Replicates   int     `json:"replicates"`
	PXPThreshold float64 `json:"pxp_threshold"`
	TargetRate   float64 `json:"target_rate"`
	// Recovery[g][n] is the share of replicate studies of GroupSizes[n]
	// participants of generator g whose largest protected exceedance
	// probability belongs to g and exceeds PXPThreshold; CILow and CIHigh
	// are its Wilson 95% interval.
	Recovery [][]Num `json:"recovery"`
	CILow    [][]Num `json:"ci_low"`
	CIHigh   [][]Num `json:"ci_high"`
	// Successes counts the recovered replicates behind Recovery.
	Successes [][]int `json:"successes"`
	// Confusion[n][g][k] is the share of replicate studies of
	// GroupSizes[n] participants of generator g in which candidate k has
	// the largest protected exceedance probability and it exceeds
	// PXPThreshold; a row's remainder had no such winner. Its diagonal is
	// Recovery; a skipped size has null rows.
	Confusion [][][]Num `json:"confusion"`
	// Dropped counts the participant draws left out because at least one
	// candidate's fit failed or has a non-finite BIC, summed over the
	// replicates.
	Dropped [][]int `json:"dropped_participants"`
	// SampleSize is, per generator, the smallest N whose rate reaches
	// TargetRate, or null when none of the sizes tried does.
	SampleSize map[string]*int `json:"sample_size"`
	// Summary says in plain words what SampleSize means, one sentence per
	// generator.
	Summary []string `json:"summary"`
	// Notes explain the method, its cost and anything skipped.
	Notes []string `json:"notes"`
	// BMSRuns is the number of replicate group analyses; Quadratures the
	// number of them whose exceedance probability needed 1-D quadrature
	// because the exact pairwise bounds did not decide; NotConverged the
	// number whose variational updates hit the iteration limit.
	BMSRuns      int `json:"bms_runs"`
	Quadratures  int `json:"exceedance_quadratures"`
	NotConverged int `json:"bms_not_converged"`
}

// groupLevel fills each design's group report (model.md §7) from the stored
// fits: no participant is refitted. Replicates of every design, generator
// and size run in parallel; each draws from its own seeded stream and
// writes to its own slot, so the reports do not depend on the workers.
func (c *Compiled) groupLevel(rep *Report, byDesign [][][]ParticipantResult) error {
	r := c.Study.Replication
	if err := checkReplication(r, c.Designs); err != nil {
		return err
	}
	var names []string
	for _, h := range c.Study.Hypotheses {
		names = append(names, h.Name)
	}
	K := len(names)
	designs := make([]designPools, len(c.Designs))
	for di := range c.Designs {
		pools := make([]*evidencePool, K)
		for g := 0; g < K; g++ {
			lme := make([][]float64, len(byDesign[di][g]))
			for p, part := range byDesign[di][g] {
				row := make([]float64, K)
				for j := range row {
					row[j] = math.NaN()
					if j < len(part.Fits) && !part.Fits[j].Failed {
						row[j] = -part.Fits[j].BIC / 2
					}
				}
				lme[p] = row
			}
			pools[g] = newEvidencePool(lme, K)
		}
		designs[di] = designPools{Name: c.Designs[di].Name, Pools: pools}
	}
	out := sweepGroups(c.Study.Seed, names, designs, r, runtime.GOMAXPROCS(0))
	for di := range out {
		rep.Designs[di].Group = out[di]
	}
	return nil
}

// checkReplication returns an error naming the first replication setting
// out of range for the designs, by the validator's own rule.
func checkReplication(r models.Replication, designs []models.Design) error {
	if ps := r.Problems(designs); len(ps) > 0 {
		return fmt.Errorf("recovery: %s: %s", ps[0].Path, ps[0].Problem)
	}
	return nil
}

// designPools holds one design's evidence pools, one per generator.
type designPools struct {
	Name  string
	Pools []*evidencePool
}

// evidencePool is the log evidence of one generator's synthetic
// participants, prepared once for many BMS runs. Row n is stored as
// w_nk = exp(lme_nk − max_k lme_nk), so the variational update needs no
// exponential per participant (u_nk ∝ w_nk·e^{ψ(α_k)−ψ(Σα)}), and
// lnSumW_n = ln Σ_k w_nk, which gives the null evidence.
type evidencePool struct {
	k        int
	complete []bool    // every candidate's evidence finite
	maxLME   []float64 // max_k lme_nk
	w        []float64 // row-major, len = participants·k
	lnSumW   []float64
}

// newEvidencePool prepares lme[n][j] (k columns); a row with any
// non-finite value (a failed fit) is kept but marked incomplete.
func newEvidencePool(lme [][]float64, k int) *evidencePool {
	p := &evidencePool{k: k, complete: make([]bool, len(lme)), maxLME: make([]float64, len(lme)),
		w: make([]float64, len(lme)*k), lnSumW: make([]float64, len(lme))}
	for n, row := range lme {
		if len(row) != k {
			panic(fmt.Sprintf("recovery: evidence row %d has %d models, want %d", n, len(row), k))
		}
		ok := true
		m := math.Inf(-1)
		for _, v := range row {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				ok = false
			}
			m = math.Max(m, v)
		}
		p.complete[n] = ok
		if !ok {
			continue
		}
		p.maxLME[n] = m
		var s float64
		for j, v := range row {
			w := math.Exp(v - m)
			p.w[n*k+j] = w
			s += w
		}
		p.lnSumW[n] = math.Log(s)
	}
	return p
}

// size is the number of participants in the pool, complete or not.
func (p *evidencePool) size() int { return len(p.complete) }

// vbScratch is one goroutine's working memory for vb.
type vbScratch struct {
	alpha, next, e, elnr []float64
}

func newVBScratch(k int) *vbScratch {
	return &vbScratch{alpha: make([]float64, k), next: make([]float64, k), e: make([]float64, k), elnr: make([]float64, k)}
}

// vbOutcome is what a group analysis needs from the variational updates.
type vbOutcome struct {
	iterations int
	converged  bool
	// logOdds is F1 − F0, the log Bayes factor of the RFX model against
	// the null of equal frequencies (BOR = 1/(1 + e^logOdds)).
	logOdds float64
	// sumLnU is Σ_n ln Σ_k exp(lme_nk + ψ(α_k) − ψ(Σα)) at the final α.
	sumLnU float64
}

// vb runs the variational updates of BMS (same scheme, prior, tolerance and
// iteration limit) over the given rows of the pool, leaving α and
// E[ln r] = ψ(α) − ψ(Σα) in s. With e_k = exp(E[ln r_k]):
//
//	S_n = Σ_k w_nk e_k,   g_nk = w_nk e_k / S_n,   α_k = 1 + Σ_n g_nk
//
// and at the final α, since Σ_k g_nk (lme_nk + E[ln r_k] − ln g_nk) = ln U_n
// with U_n = e^{max_k lme_nk}·S_n, the free energy of BMS reduces to
//
//	F1 = Σ_n ln U_n + ln Γ(K) − [ln Γ(Σα) − Σ_k ln Γ(α_k) + Σ_k (α_k − 1) E[ln r_k]]
//	F0 = Σ_n (max_k lme_nk + ln Σ_k w_nk) − N ln K
//
// (Stephan et al. 2009, NeuroImage 46:1004, appendix; Rigoux et al. 2014,
// NeuroImage 84:971), in which max_k lme_nk cancels from F1 − F0.
func (p *evidencePool) vb(rows []int, s *vbScratch) vbOutcome {
	k := p.k
	for j := range s.alpha {
		s.alpha[j] = bmsAlpha0
	}
	// Within the loop e_k needs to be known only up to a common factor,
	// which cancels from g_nk: e^{ψ(α_k)} stands for e^{ψ(α_k)−ψ(Σα)}.
	var out vbOutcome
	for out.iterations < bmsMaxIter {
		for j, a := range s.alpha {
			s.e[j] = math.Exp(mathext.Digamma(a))
		}
		for j := range s.next {
			s.next[j] = bmsAlpha0
		}
		for _, n := range rows {
			w := p.w[n*k : n*k+k]
			var sum float64
			for j, x := range w {
				sum += x * s.e[j]
			}
			inv := 1 / sum
			for j, x := range w {
				s.next[j] += x * s.e[j] * inv
			}
		}
		var delta float64
		for j := range s.next {
			delta = math.Max(delta, math.Abs(s.next[j]-s.alpha[j]))
		}
		copy(s.alpha, s.next)
		out.iterations++
		if delta < bmsTol {
			out.converged = true
			break
		}
	}
	var sa float64
	for _, a := range s.alpha {
		sa += a
	}
	ds := mathext.Digamma(sa)
	for j, a := range s.alpha {
		s.elnr[j] = mathext.Digamma(a) - ds
		s.e[j] = math.Exp(s.elnr[j])
	}
	var lnS, lnW, maxSum float64
	for _, n := range rows {
		w := p.w[n*k : n*k+k]
		var sum float64
		for j, x := range w {
			sum += x * s.e[j]
		}
		lnS += math.Log(sum)
		lnW += p.lnSumW[n]
		maxSum += p.maxLME[n]
	}
	kf := float64(k)
	eLogQr := lgamma(sa)
	for j, a := range s.alpha {
		eLogQr += -lgamma(a) + (a-1)*s.elnr[j]
	}
	out.logOdds = lnS + lgamma(kf) - eLogQr - (lnW - float64(len(rows))*math.Log(kf))
	out.sumLnU = maxSum + lnS
	return out
}

func lgamma(x float64) float64 { v, _ := math.Lgamma(x); return v }

// BMSQuadrature is BMS (Stephan et al. 2009, NeuroImage 46:1004; Rigoux et
// al. 2014, NeuroImage 84:971) with the same variational scheme, prior,
// tolerance and free energy, but deterministic exceedance probabilities:
// for K = 2 exactly by the regularised incomplete beta as in BMS, for K > 2
// by ExceedanceQuadrature instead of Monte Carlo, so XPMCError is 0. The
// updates are organised as in vb (one exponential per model and iteration
// instead of one per participant and model), which agrees with BMS to
// rounding. It panics on the same caller bugs as BMS (no participant, fewer
// than 2 models, a ragged row, a non-finite log evidence).
func BMSQuadrature(logEvidence [][]float64) BMSResult {
	nPart, k := checkEvidence("BMSQuadrature", logEvidence)
	p := newEvidencePool(logEvidence, k)
	rows := make([]int, nPart)
	for i := range rows {
		rows[i] = i
	}
	s := newVBScratch(k)
	o := p.vb(rows, s)
	res := BMSResult{Alpha: slices.Clone(s.alpha), Iterations: o.iterations, Converged: o.converged}
	sa := 0.0
	for _, a := range res.Alpha {
		sa += a
	}
	res.Expected = make([]float64, k)
	for j, a := range res.Alpha {
		res.Expected[j] = a / sa
	}
	kf := float64(k)
	res.FreeEnergy = o.sumLnU + lgamma(kf)
	eLogQr := lgamma(sa)
	for j, a := range res.Alpha {
		eLogQr += -lgamma(a) + (a-1)*s.elnr[j]
	}
	res.FreeEnergy -= eLogQr
	for n := range logEvidence {
		res.NullEvidence += p.maxLME[n] + p.lnSumW[n] - math.Log(kf)
	}
	res.BOR = 1 / (1 + math.Exp(o.logOdds))
	res.XP = make([]float64, k)
	res.PXP = make([]float64, k)
	for j := range res.XP {
		res.XP[j] = ExceedanceQuadrature(res.Alpha, j)
		res.PXP[j] = res.XP[j]*(1-res.BOR) + res.BOR/kf
	}
	return res
}

// Quadrature settings of ExceedanceQuadrature: the tails cut off on each
// side of the integrand carry at most xpTail of probability, and the
// Gauss–Legendre panels are xpPanelScale/√α wide in ln x (the width of a
// Gamma(α) density there) with xpNodes nodes each.
const (
	xpTail       = 1e-15
	xpNodes      = 12
	xpPanelScale = 1.5
	xpMaxPanels  = 4000
)

// legendre12 holds the Gauss–Legendre nodes and weights on [−1, 1].
var legendre12X, legendre12W = func() ([]float64, []float64) {
	x, w := make([]float64, xpNodes), make([]float64, xpNodes)
	quad.Legendre{}.FixedLocations(x, w, -1, 1)
	return x, w
}()

// ExceedanceQuadrature returns the exceedance probability of model k under
// a Dirichlet posterior r ~ Dir(α), XP_k = P(r_k > r_j for all j ≠ k). With
// r = G/ΣG for independent G_j ~ Gamma(α_j, 1) (the argmax does not change
// under normalisation) and x = e^s,
//
//	XP_k = ∫_0^∞ f_k(x) Π_{j≠k} F_j(x) dx = ∫ exp(α_k s − e^s − ln Γ(α_k)) Π_{j≠k} P(α_j, e^s) ds
//
// (f, F the Gamma(α, 1) density and CDF, P the regularised lower incomplete
// gamma, gonum mathext.GammaIncReg). The integrand is smooth in s, so a
// composite Gauss–Legendre rule converges fast: 12 nodes per panel of width
// 1.5/√α_max, over the range outside which the integrand carries at most
// 1e-15 (the lower end from P(G < x) ≤ x^α/Γ(α+1), the upper from
// α_k + 12√α_k + 35, beyond the Chernoff bound's 1e-15). Against a rule
// with four times as many panels the value agrees to 1e-12 (tested). For
// K = 2 the value is exact: XP_k = I_{1/2}(α_other, α_k) (gonum
// mathext.RegIncBeta), as in BMS. ExceedanceQuadrature panics when α has
// fewer than 2 entries, any α_j is not finite and positive, or k is out of
// range.
func ExceedanceQuadrature(alpha []float64, k int) float64 {
	K := len(alpha)
	if K < 2 {
		panic(fmt.Sprintf("recovery: ExceedanceQuadrature: %d models, want at least 2", K))
	}
	if k < 0 || k >= K {
		panic(fmt.Sprintf("recovery: ExceedanceQuadrature: k = %d, want 0 ≤ k < %d", k, K))
	}
	for j, a := range alpha {
		if !(a > 0) || math.IsInf(a, 0) {
			panic(fmt.Sprintf("recovery: ExceedanceQuadrature: alpha[%d] = %v, want a finite positive value", j, a))
		}
	}
	if K == 2 {
		return mathext.RegIncBeta(alpha[1-k], alpha[k], 0.5)
	}
	return exceedanceQuad(alpha, k, xpPanelScale)
}

// exceedanceQuad is ExceedanceQuadrature for K > 2 with a given panel
// width scale (tests refine it).
func exceedanceQuad(alpha []float64, k int, scale float64) float64 {
	ak := alpha[k]
	lga := lgamma(ak)
	// Below e^lo every factor's CDF bound x^α/Γ(α+1) or the density's mass
	// is under xpTail; the integrand is at most min(f_k mass, F_j).
	lo := math.Inf(-1)
	amax := 0.0
	for _, a := range alpha {
		lo = math.Max(lo, (math.Log(xpTail)+lgamma(a+1))/a)
		amax = math.Max(amax, a)
	}
	xHi := ak + 12*math.Sqrt(ak) + 35
	hi := math.Log(xHi)
	if lo >= hi {
		return 0
	}
	// A CDF whose transition lies beyond xHi never shapes the integrand,
	// so the panel width follows the largest α that matters.
	width := scale / math.Sqrt(math.Min(amax, xHi))
	panels := min(xpMaxPanels, int(math.Ceil((hi-lo)/width)))
	h := (hi - lo) / float64(panels)
	var total float64
	for p := 0; p < panels; p++ {
		mid := lo + (float64(p)+0.5)*h
		for i, t := range legendre12X {
			s := mid + 0.5*h*t
			x := math.Exp(s)
			v := math.Exp(ak*s - x - lga)
			for j, a := range alpha {
				if j == k || v == 0 {
					continue
				}
				v *= mathext.GammaIncReg(a, x)
			}
			total += legendre12W[i] * 0.5 * h * v
		}
	}
	return math.Min(1, total)
}

// groupWinner returns the model k whose protected exceedance probability
// PXP_k = XP_k(1 − BOR) + BOR/K is the largest and exceeds thr, or −1 when
// there is none; a group analysis recovers generator g when the winner is
// g. quadrature is true when the exact bounds below did not decide and
// XP_k was integrated.
//
// XP is strictly increasing in α: for independent gammas with α_i > α_j,
// Gamma(α_i) dominates Gamma(α_j) in likelihood ratio (f_i/f_j ∝ x^{α_i−α_j}
// increases), so f_i(x)f_j(y) > f_i(y)f_j(x) whenever x > y, and the swap
// (x, y) → (y, x) maps {G_i > G_j, G_i > m} onto {G_j > G_i, G_j > m} with
// no more probability; given the others' maximum m, XP_i > XP_j (the
// likelihood ratio order: Shaked & Shanthikumar 2007, Stochastic Orders,
// ch. 1.C, from memory; the swap argument is ours, and the test checks the
// ordering numerically). So the leader of PXP is the model g of strictly largest α; a tie
// at the top has no winner. Then, with B_j = I_{1/2}(α_g, α_j) = P(G_j > G_g),
//
//	1 − Σ_{j≠g} B_j ≤ XP_g ≤ min_{j≠g} (1 − B_j)
//
// (Bonferroni below, one pair above), which decides all but borderline
// cases without integration.
func groupWinner(alpha []float64, logOdds float64, thr float64) (winner int, quadrature bool) {
	g := 0
	for j, a := range alpha {
		if a > alpha[g] {
			g = j
		}
	}
	for j, a := range alpha {
		if j != g && a == alpha[g] {
			return -1, false
		}
	}
	ok, q := pxpExceeds(alpha, logOdds, g, thr)
	if !ok {
		return -1, q
	}
	return g, q
}

// pxpExceeds reports whether PXP_g > thr for the model g of strictly
// largest α (see groupWinner).
func pxpExceeds(alpha []float64, logOdds float64, g int, thr float64) (ok, quadrature bool) {
	kf := float64(len(alpha))
	bor := 1 / (1 + math.Exp(logOdds))
	notBOR := 1 / (1 + math.Exp(-logOdds)) // 1 − BOR without cancellation
	if notBOR == 0 {
		return false, false // every PXP is 1/K: no unique leader
	}
	t := (thr - bor/kf) / notBOR // need XP_g > t
	if t >= 1 {
		return false, false
	}
	if t < 0 {
		return true, false
	}
	lower, upper := 1.0, 1.0
	for j, a := range alpha {
		if j == g {
			continue
		}
		b := mathext.RegIncBeta(alpha[g], a, 0.5)
		lower -= b
		upper = math.Min(upper, 1-b)
	}
	const margin = 1e-9 // far above the bounds' rounding error
	switch {
	case lower > t+margin:
		return true, false
	case upper < t-margin:
		return false, false
	}
	return ExceedanceQuadrature(alpha, g) > t, true
}

// groupCell is the outcome of one (design, generator, size) cell.
type groupCell struct {
	successes, dropped, quadratures, notConverged, runs int
	winners                                             []int // per candidate
}

// sweepGroups runs every replicate study of every design, generator and
// group size with the given number of goroutines.
func sweepGroups(seed uint64, generators []string, designs []designPools, r models.Replication, workers int) []*GroupReport {
	sizes := slices.Clone(r.GroupSizes)
	slices.Sort(sizes)
	sizes = slices.Compact(sizes)
	K := len(generators)
	type task struct{ d, g, n int }
	var tasks []task
	for d := range designs {
		if len(designs[d].Pools) != K {
			panic(fmt.Sprintf("recovery: sweepGroups: design %q has %d pools, want one per generator (%d)", designs[d].Name, len(designs[d].Pools), K))
		}
		for g := 0; g < K; g++ {
			for n, size := range sizes {
				if size <= designs[d].Pools[g].size() {
					tasks = append(tasks, task{d, g, n})
				}
			}
		}
	}
	// Largest groups first, so the slowest cells do not start last.
	slices.SortStableFunc(tasks, func(a, b task) int { return sizes[b.n] - sizes[a.n] })
	cells := make([][][]groupCell, len(designs))
	for d := range cells {
		cells[d] = make([][]groupCell, K)
		for g := range cells[d] {
			cells[d][g] = make([]groupCell, len(sizes))
		}
	}
	if workers < 1 {
		workers = 1
	}
	var next atomic.Int64
	var wg sync.WaitGroup
	for w := 0; w < min(workers, len(tasks)); w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			s := newVBScratch(K)
			for {
				i := int(next.Add(1) - 1)
				if i >= len(tasks) {
					return
				}
				t := tasks[i]
				cells[t.d][t.g][t.n] = runCell(seed, designs[t.d].Name, generators[t.g], designs[t.d].Pools[t.g], t.g, sizes[t.n], r, s)
			}
		}()
	}
	wg.Wait()
	out := make([]*GroupReport, len(designs))
	for d := range designs {
		out[d] = groupReport(generators, designs[d], sizes, cells[d], r)
	}
	return out
}

// runCell draws r.Replicates groups of size participants without
// replacement from the pool (partial Fisher–Yates shuffles of one
// permutation, each a uniform draw whatever the permutation's state) from
// the cell's own stream, and analyses each.
func runCell(seed uint64, design, generator string, pool *evidencePool, g, size int, r models.Replication, s *vbScratch) groupCell {
	rng := streamRand(seed, "group", design, generator, strconv.Itoa(size))
	P := pool.size()
	perm := make([]int, P)
	for i := range perm {
		perm[i] = i
	}
	rows := make([]int, 0, size)
	c := groupCell{winners: make([]int, pool.k)}
	for rep := 0; rep < r.Replicates; rep++ {
		rows = rows[:0]
		for i := 0; i < size; i++ {
			j := i + rng.IntN(P-i)
			perm[i], perm[j] = perm[j], perm[i]
			if pool.complete[perm[i]] {
				rows = append(rows, perm[i])
			} else {
				c.dropped++
			}
		}
		if len(rows) == 0 {
			continue // nobody left to analyse: not recovered
		}
		o := pool.vb(rows, s)
		c.runs++
		if !o.converged {
			c.notConverged++
		}
		w, q := groupWinner(s.alpha, o.logOdds, r.PXPThreshold)
		if w >= 0 {
			c.winners[w]++
		}
		if w == g {
			c.successes++
		}
		if q {
			c.quadratures++
		}
	}
	return c
}

// groupReport turns one design's cells into its report.
func groupReport(generators []string, dp designPools, sizes []int, cells [][]groupCell, r models.Replication) *GroupReport {
	K := len(generators)
	gr := &GroupReport{
		Generators: slices.Clone(generators), GroupSizes: slices.Clone(sizes), Replicates: r.Replicates,
		PXPThreshold: r.PXPThreshold, TargetRate: r.TargetRate,
		SampleSize: map[string]*int{}, Summary: []string{}, Notes: []string{},
	}
	reps := float64(r.Replicates)
	gr.Confusion = make([][][]Num, len(sizes))
	for n := range sizes {
		gr.Confusion[n] = make([][]Num, K)
	}
	var participants, draws, dropped int
	for g := 0; g < K; g++ {
		participants += dp.Pools[g].size()
		rate, lo, hi := make([]Num, len(sizes)), make([]Num, len(sizes)), make([]Num, len(sizes))
		succ, drop := make([]int, len(sizes)), make([]int, len(sizes))
		for n, size := range sizes {
			gr.Confusion[n][g] = make([]Num, K)
			if size > dp.Pools[g].size() {
				rate[n], lo[n], hi[n] = Num(math.NaN()), Num(math.NaN()), Num(math.NaN())
				for k := range gr.Confusion[n][g] {
					gr.Confusion[n][g][k] = Num(math.NaN())
				}
				continue
			}
			c := cells[g][n]
			for k, w := range c.winners {
				gr.Confusion[n][g][k] = Num(float64(w) / reps)
			}
			succ[n], drop[n] = c.successes, c.dropped
			rate[n] = Num(float64(c.successes) / reps)
			l, h := WilsonInterval(float64(c.successes), reps)
			lo[n], hi[n] = Num(l), Num(h)
			gr.BMSRuns += c.runs
			gr.Quadratures += c.quadratures
			gr.NotConverged += c.notConverged
			draws += size * r.Replicates
			dropped += c.dropped
		}
		gr.Recovery = append(gr.Recovery, rate)
		gr.CILow = append(gr.CILow, lo)
		gr.CIHigh = append(gr.CIHigh, hi)
		gr.Successes = append(gr.Successes, succ)
		gr.Dropped = append(gr.Dropped, drop)
		gr.SampleSize[generators[g]] = nil
		var tried []int
		for n, size := range sizes {
			if math.IsNaN(float64(rate[n])) {
				continue
			}
			tried = append(tried, size)
			if gr.SampleSize[generators[g]] == nil && float64(rate[n]) >= r.TargetRate {
				v := size
				gr.SampleSize[generators[g]] = &v
			}
		}
		gr.Summary = append(gr.Summary, sampleSizeSentence(generators, g, sizes, gr.Confusion, gr.SampleSize[generators[g]], tried, r))
	}
	gr.Notes = append(gr.Notes, fmt.Sprintf(
		"A replicate study draws N of a generator's synthetic participants without replacement and runs random-effects Bayesian model selection on ln evidence ≈ −BIC/2 (Stephan et al. 2009); it recovers the generator when the generator has the largest protected exceedance probability (Rigoux et al. 2014) and it exceeds %s. Rates are over %d replicates per size, with Wilson 95%% intervals.",
		strconv.FormatFloat(r.PXPThreshold, 'g', -1, 64), r.Replicates))
	gr.Notes = append(gr.Notes, fmt.Sprintf(
		"Cost: the sweep reuses the stored fits of the design's %d synthetic participants (no refitting); %d group analyses, each one variational BMS over N rows of %d evidences; exceedance decided by exact pairwise beta bounds, with 1-D quadrature (deterministic, no Monte Carlo error) in %d borderline analyses.",
		participants, gr.BMSRuns, K, gr.Quadratures))
	for g := 0; g < K; g++ {
		var skipped []string
		for _, size := range sizes {
			if size > dp.Pools[g].size() {
				skipped = append(skipped, strconv.Itoa(size))
			}
		}
		if len(skipped) > 0 {
			gr.Notes = append(gr.Notes, fmt.Sprintf("Group size %s skipped for %s: larger than its pool of %d synthetic participants.",
				strings.Join(skipped, ", "), generators[g], dp.Pools[g].size()))
		}
	}
	if dropped > 0 {
		gr.Notes = append(gr.Notes, fmt.Sprintf(
			"%d of %d participant draws had a failed or non-finite fit under some candidate and were left out of their group, which was then analysed with fewer than N participants.", dropped, draws))
	}
	if gr.NotConverged > 0 {
		gr.Notes = append(gr.Notes, fmt.Sprintf("%d group analyses stopped at the limit of %d variational updates before converging.", gr.NotConverged, bmsMaxIter))
	}
	return gr
}

// sampleSizeSentence says in plain words where generator g reaches the
// target rate; when it never does, it names the candidate that the group
// analysis picks most often instead at the largest size tried.
func sampleSizeSentence(gens []string, g int, sizes []int, conf [][][]Num, ss *int, tried []int, r models.Replication) string {
	gen := gens[g]
	pct := func(x float64) string { return strconv.FormatFloat(math.Round(1000*x)/10, 'g', -1, 64) + "%" }
	target := pct(r.TargetRate)
	if len(tried) == 0 {
		return fmt.Sprintf("no group size could be tried for %s: every size is larger than its pool", gen)
	}
	rate := func(n int) float64 { return float64(conf[n][g][g]) }
	if ss == nil {
		best, at := -1.0, 0
		last := 0
		for n, size := range sizes {
			if v := rate(n); !math.IsNaN(v) {
				last = n
				if v > best {
					best, at = v, size
				}
			}
		}
		list := make([]string, len(tried))
		for i, n := range tried {
			list[i] = strconv.Itoa(n)
		}
		out := fmt.Sprintf("no group size tried (%s) reaches %s for %s", strings.Join(list, ", "), target, gen)
		if best > 0 {
			out += fmt.Sprintf(" (best %s at N = %d)", pct(best), at)
		} else {
			out += " (0% at every size)"
		}
		rival, share := -1, 0.0
		for k, v := range conf[last][g] {
			if k != g && float64(v) > share {
				rival, share = k, float64(v)
			}
		}
		if rival >= 0 {
			out += fmt.Sprintf("; at N = %d the group analysis names %s instead in %s of replicate studies", sizes[last], gens[rival], pct(share))
		}
		return out
	}
	var at float64
	var below []string
	for n, size := range sizes {
		v := rate(n)
		if math.IsNaN(v) {
			continue
		}
		if size == *ss {
			at = v
		}
		if size > *ss && v < r.TargetRate {
			below = append(below, fmt.Sprintf("%s at N = %d", pct(v), size))
		}
	}
	if len(below) > 0 {
		return fmt.Sprintf("%s is identified by the group analysis in %s of replicate studies at N = %d, but not at every larger size tried (%s)", gen, pct(at), *ss, strings.Join(below, ", "))
	}
	return fmt.Sprintf("%s is identified by the group analysis in %s of replicate studies from N = %d", gen, pct(at), *ss)
}

// rankTolerance is the difference in normalised MI, worst-case diagonal or
// mean parameter r within which two designs tie on that measure and the
// next one decides (model.md §8).
const rankTolerance = 0.01

// rankDesigns orders the designs (model.md §8): by normalised mutual
// information under BIC; designs within 0.01 of each other by the worst-case
// diagonal of the BIC confusion matrix, then by mean parameter recovery r,
// then by fewer minutes of testing per participant, then by name. A NaN
// measure ranks below every number. It fills Ranking, Preferred (rank 1)
// and Verdict.
func rankDesigns(rep *Report) {
	rows := make([]DesignRank, len(rep.Designs))
	for i, d := range rep.Designs {
		rows[i] = designRank(d)
	}
	// Insertion sort: stable and, with a tolerance that need not be
	// transitive, still fully determined by the input order.
	for i := 1; i < len(rows); i++ {
		for j := i; j > 0 && rankBefore(rows[j], rows[j-1]); j-- {
			rows[j], rows[j-1] = rows[j-1], rows[j]
		}
	}
	for i := range rows {
		rows[i].Rank = i + 1
	}
	rep.Ranking = rows
	rep.Preferred, rep.Verdict = "", ""
	if len(rows) == 0 {
		return
	}
	rep.Preferred = rows[0].Design
	group := map[string]*GroupReport{}
	for _, d := range rep.Designs {
		group[d.Name] = d.Group
	}
	var groups []*GroupReport
	for _, r := range rows[:min(2, len(rows))] {
		groups = append(groups, group[r.Design])
	}
	rep.Verdict = rankingVerdict(rows, groups)
}

func designRank(d DesignReport) DesignRank {
	cr := d.Criteria["bic"]
	worst := math.NaN()
	for i := range cr.Confusion {
		if i < len(cr.Confusion[i]) {
			v := float64(cr.Confusion[i][i])
			if !math.IsNaN(v) && (math.IsNaN(worst) || v < worst) {
				worst = v
			}
		}
	}
	var sum float64
	var n int
	for _, p := range d.ParamRecovery {
		if v := float64(p.R); !math.IsNaN(v) {
			sum += v
			n++
		}
	}
	r := math.NaN()
	if n > 0 {
		r = sum / float64(n)
	}
	perMin := math.NaN()
	if d.MinutesPerSubject > 0 {
		perMin = float64(cr.NormalizedMI) / d.MinutesPerSubject
	}
	return DesignRank{
		Design: d.Name, NormalizedMI: cr.NormalizedMI, WorstDiagonal: Num(worst), ParameterR: Num(r),
		TrialsPerParticipant: d.TrialsPerSubject, MinutesPerParticipant: d.MinutesPerSubject, NormalizedMIPerMinute: Num(perMin),
	}
}

// better compares one measure, larger first: +1 when a is ahead by more
// than the tolerance, −1 when behind, 0 on a tie. NaN is behind a number.
func better(a, b Num) int {
	x, y := float64(a), float64(b)
	switch {
	case math.IsNaN(x) && math.IsNaN(y):
		return 0
	case math.IsNaN(y):
		return 1
	case math.IsNaN(x):
		return -1
	case x > y+rankTolerance:
		return 1
	case y > x+rankTolerance:
		return -1
	}
	return 0
}

// rankKey is the first measure on which a and b differ: 0 normalised MI,
// 1 worst diagonal, 2 parameter r, 3 minutes, 4 name; with the sign of
// a's advantage.
func rankKey(a, b DesignRank) (key, sign int) {
	for k, c := range []int{better(a.NormalizedMI, b.NormalizedMI), better(a.WorstDiagonal, b.WorstDiagonal), better(a.ParameterR, b.ParameterR)} {
		if c != 0 {
			return k, c
		}
	}
	switch {
	case a.MinutesPerParticipant < b.MinutesPerParticipant:
		return 3, 1
	case a.MinutesPerParticipant > b.MinutesPerParticipant:
		return 3, -1
	case a.Design < b.Design:
		return 4, 1
	case a.Design > b.Design:
		return 4, -1
	}
	return 4, 0
}

func rankBefore(a, b DesignRank) bool { _, s := rankKey(a, b); return s > 0 }

// f2 formats a measure with two decimals, or "n/a" when it is missing.
func f2(x Num) string {
	if v := float64(x); !math.IsNaN(v) && !math.IsInf(v, 0) {
		return strconv.FormatFloat(v, 'f', 2, 64)
	}
	return "n/a"
}

// rankingVerdict says which design to prefer and why, with the numbers of
// the preferred design and the runner-up. groups holds their group reports
// (entries may be nil).
func rankingVerdict(rows []DesignRank, groups []*GroupReport) string {
	a := rows[0]
	minutes := func(x float64) string { return strconv.FormatFloat(x, 'f', 1, 64) }
	if len(rows) == 1 {
		return fmt.Sprintf("Only one design, %s: normalised MI %s, worst-case recovery %s, mean parameter r %s, at %s minutes (%d trials) per participant.",
			a.Design, f2(a.NormalizedMI), f2(a.WorstDiagonal), f2(a.ParameterR), minutes(a.MinutesPerParticipant), a.TrialsPerParticipant)
	}
	b := rows[1]
	key, _ := rankKey(a, b)
	var why string
	switch key {
	case 0:
		why = "it carries more information about which hypothesis generated the data"
	case 1:
		why = "normalised MI ties within 0.01, and its worst-recovered hypothesis is recovered more often"
	case 2:
		why = "normalised MI and worst-case recovery tie within 0.01, and its parameters are recovered better"
	case 3:
		why = "it identifies the hypotheses as well (within 0.01 on every measure) in less testing time"
	default:
		why = "the designs tie on every measure and on testing time; it comes first by name"
	}
	cost := fmt.Sprintf("at the same %s minutes per participant", minutes(a.MinutesPerParticipant))
	if a.MinutesPerParticipant != b.MinutesPerParticipant || a.TrialsPerParticipant != b.TrialsPerParticipant {
		cost = fmt.Sprintf("at %s vs %s minutes (%d vs %d trials) per participant", minutes(a.MinutesPerParticipant), minutes(b.MinutesPerParticipant),
			a.TrialsPerParticipant, b.TrialsPerParticipant)
	}
	over := b.Design
	if len(rows) > 2 {
		over = fmt.Sprintf("%s, the runner-up of %d designs", b.Design, len(rows))
	}
	out := fmt.Sprintf("Prefer %s over %s: %s. Normalised MI %s vs %s, worst-case recovery %s vs %s, mean parameter r %s vs %s, %s.",
		a.Design, over, why, f2(a.NormalizedMI), f2(b.NormalizedMI), f2(a.WorstDiagonal), f2(b.WorstDiagonal),
		f2(a.ParameterR), f2(b.ParameterR), cost)
	if len(groups) == 2 && groups[0] != nil && groups[1] != nil {
		count := func(g *GroupReport) int {
			n := 0
			for _, v := range g.SampleSize {
				if v != nil {
					n++
				}
			}
			return n
		}
		out += fmt.Sprintf(" At the group level it reaches the target rate for %d of %d hypotheses within the sizes tried, vs %d.",
			count(groups[0]), len(groups[0].SampleSize), count(groups[1]))
	}
	return out
}
