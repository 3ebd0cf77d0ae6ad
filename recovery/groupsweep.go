package recovery

import (
	"context"
	"discrimen/internal/parallel"
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"slices"
	"strconv"
	"strings"

	"discrimen/models"
)

// GroupReport is the group-level analysis of one design (model.md §7):
// replicate studies of N participants drawn without replacement from each
// generator's synthetic pool, each analysed by random-effects BMS.
type GroupReport struct {
	// Generators names the rows of Recovery, CILow, CIHigh, Successes,
	// EffectiveReplicates, BootstrapGroups and Dropped, and the entries of
	// Pool, in hypothesis order.
	Generators []string `json:"generators"`
	// Pool is the number of synthetic participants in each generator's
	// pool, complete or not: the P that replicate groups are drawn from.
	Pool []int `json:"pool"`
	// GroupSizes are the sizes N swept (ascending, without repeats); the
	// columns of the matrices below. A size larger than the pool is kept
	// with null rates and explained in Notes.
	GroupSizes   []int   `json:"group_sizes"`
	Replicates   int     `json:"replicates"`
	PXPThreshold float64 `json:"pxp_threshold"`
	TargetRate   float64 `json:"target_rate"`
	// Recovery[g][n] is the share of replicate studies of GroupSizes[n]
	// participants of generator g whose largest protected exceedance
	// probability belongs to g and exceeds PXPThreshold. CILow and CIHigh
	// are its 95% interval, which carries the pool's own sampling error as
	// well as that of the replicate draws: a Wilson interval at
	// EffectiveReplicates trials (groupInterval).
	Recovery [][]NullFloat `json:"recovery"`
	CILow    [][]NullFloat `json:"ci_low"`
	CIHigh   [][]NullFloat `json:"ci_high"`
	// Successes counts the recovered replicates behind Recovery.
	Successes [][]int `json:"successes"`
	// EffectiveReplicates[g][n] is the number of independent replicate
	// studies the Replicates drawn from one pool are worth: Replicates
	// divided by the design effect that the bootstrap over the pool
	// measured, at most BootstrapRounds, 1 at N = P (null for a skipped
	// size).
	EffectiveReplicates [][]NullFloat `json:"effective_replicates"`
	// BootstrapRounds is the number of times each pool was resampled with
	// replacement; BootstrapGroups[g][n] the replicate groups drawn from
	// each resampled pool (0 for a skipped size and at N = P, where the
	// interval needs no bootstrap).
	BootstrapRounds int     `json:"bootstrap_rounds"`
	BootstrapGroups [][]int `json:"bootstrap_groups"`
	// Flags name every group size above half of some generator's pool,
	// where replicate groups overlap so much that they are not independent
	// studies; empty when there is none.
	Flags []GroupFlag `json:"flags"`
	// Confusion[n][g][k] is the share of replicate studies of
	// GroupSizes[n] participants of generator g in which candidate k has
	// the largest protected exceedance probability and it exceeds
	// PXPThreshold; a row's remainder had no such winner. Its diagonal is
	// Recovery; a skipped size has null rows.
	Confusion [][][]NullFloat `json:"confusion"`
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
	// BootstrapRuns is the number of group analyses of the bootstrap
	// rounds, over and above BMSRuns.
	BootstrapRuns int `json:"bootstrap_bms_runs"`
}

// GroupFlag marks a group size N above half of the pool of P synthetic
// participants of the generators it names (those of one pool size, when
// pools differ). Any two groups of N drawn from P share at least 2N − P
// participants (N²/P on average), so replicate groups are largely the
// same participants, and at N = P every group is the whole pool.
type GroupFlag struct {
	GroupSize  int      `json:"group_size"`
	Pool       int      `json:"pool"`
	Generators []string `json:"generators"`
	Reason     string   `json:"reason"`
}

// Outer bootstrap of the group recovery intervals (groupInterval): each
// pool is resampled groupBootstrapRounds times, and bootstrapGroups(P, N,
// replicates) groups are drawn from every resampled pool. The rounds
// estimate a variance, for which Efron & Tibshirani (1993, An Introduction
// to the Bootstrap, ch. 6; from memory) find 200 replications ample. Groups
// per round scale as P/N, the inverse of the replicates' intraclass
// correlation, which is of order N/P (groupInterval), so that a round's own
// binomial spread stays of the order of the pool's; the factor 0.5 keeps
// the sweep within a tenth of the demo run (BenchmarkGroupSweep).
const (
	groupBootstrapRounds = 200
	groupBootstrapSpread = 0.5
)

// bootstrapGroups is the number of replicate groups drawn from each
// resampled pool of P for groups of N: ⌈groupBootstrapSpread·P/N⌉, at
// least 2 (two are needed to separate a round's own binomial spread) and at
// most max(2, replicates); 0 when N ≥ P, where no bootstrap is needed (see
// groupInterval).
func bootstrapGroups(P, N, replicates int) int {
	if N >= P {
		return 0
	}
	m := int(math.Ceil(groupBootstrapSpread * float64(P) / float64(N)))
	return max(2, min(m, replicates))
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

// groupCell is the outcome of one (design, generator, size) cell.
type groupCell struct {
	successes, dropped, quadratures, notConverged, runs int
	winners                                             []int // per candidate
}

// bootCell is the outcome of one cell's bootstrap rounds: the successes
// of each round, out of perRound groups, and the group analyses run.
type bootCell struct {
	rounds         []int
	perRound, runs int
}

// sweepGroups runs every replicate study of every design, generator and
// group size, and the bootstrap rounds over each pool, with the given
// number of goroutines. The replicates of a cell and its bootstrap rounds
// are separate tasks on separate streams, each writing its own slot, so
// the reports do not depend on the workers or the order of the tasks.
func sweepGroups(seed uint64, generators []string, designs []designPools, r models.Replication, workers int) []*GroupReport {
	sizes := slices.Clone(r.GroupSizes)
	slices.Sort(sizes)
	sizes = slices.Compact(sizes)
	K := len(generators)
	type task struct {
		d, g, n int
		boot    bool
		cost    int // participant rows analysed, for the order
	}
	var tasks []task
	for d := range designs {
		if len(designs[d].Pools) != K {
			panic(fmt.Sprintf("recovery: sweepGroups: design %q has %d pools, want one per generator (%d)", designs[d].Name, len(designs[d].Pools), K))
		}
		for g := 0; g < K; g++ {
			P := designs[d].Pools[g].size()
			for n, size := range sizes {
				if size > P {
					continue
				}
				tasks = append(tasks, task{d, g, n, false, r.Replicates * size})
				if m := bootstrapGroups(P, size, r.Replicates); m > 0 {
					tasks = append(tasks, task{d, g, n, true, groupBootstrapRounds * m * size})
				}
			}
		}
	}
	// Costliest first, so the slowest tasks do not start last.
	slices.SortStableFunc(tasks, func(a, b task) int { return b.cost - a.cost })
	cells := make([][][]groupCell, len(designs))
	boots := make([][][]bootCell, len(designs))
	for d := range cells {
		cells[d] = make([][]groupCell, K)
		boots[d] = make([][]bootCell, K)
		for g := range cells[d] {
			cells[d][g] = make([]groupCell, len(sizes))
			boots[d][g] = make([]bootCell, len(sizes))
		}
	}
	scr := make([]*vbScratch, max(workers, 1))
	// The cells cannot fail and the sweep has no context to stop it.
	_ = parallel.For(context.Background(), len(tasks), workers, func(w, i int) error {
		if scr[w] == nil {
			scr[w] = newVBScratch(K)
		}
		t := tasks[i]
		dp := designs[t.d]
		if t.boot {
			boots[t.d][t.g][t.n] = bootstrapCell(seed, dp.Name, generators[t.g], dp.Pools[t.g], t.g, sizes[t.n], r, scr[w])
		} else {
			cells[t.d][t.g][t.n] = runCell(seed, dp.Name, generators[t.g], dp.Pools[t.g], t.g, sizes[t.n], r, scr[w])
		}
		return nil
	})
	out := make([]*GroupReport, len(designs))
	for d := range designs {
		out[d] = groupReport(generators, designs[d], sizes, cells[d], boots[d], r)
	}
	return out
}

// groupDraw draws groups of size participants without replacement from a
// pool of positions 0..P−1 (partial Fisher–Yates shuffles of one
// permutation, each a uniform draw whatever the permutation's state).
type groupDraw struct {
	perm []int
}

func newGroupDraw(P int) *groupDraw {
	perm := make([]int, P)
	for i := range perm {
		perm[i] = i
	}
	return &groupDraw{perm: perm}
}

// next returns the positions of a new group of size, in the first size
// entries of the permutation.
func (d *groupDraw) next(rng *rand.Rand, size int) []int {
	P := len(d.perm)
	for i := 0; i < size; i++ {
		j := i + rng.IntN(P-i)
		d.perm[i], d.perm[j] = d.perm[j], d.perm[i]
	}
	return d.perm[:size]
}

// analyseGroup runs the group analysis of the given pool rows (repeats
// allowed) and returns the winning candidate (−1 for none), whether the
// exceedance needed quadrature and whether the updates converged.
func analyseGroup(pool *evidencePool, rows []int, thr float64, s *vbScratch) (winner int, quadrature, converged bool) {
	o := pool.vb(rows, s)
	w, q := groupWinner(s.alpha, o.logOdds, thr)
	return w, q, o.converged
}

// runCell draws r.Replicates groups of size participants without
// replacement from the pool, from the cell's own stream, and analyses each.
func runCell(seed uint64, design, generator string, pool *evidencePool, g, size int, r models.Replication, s *vbScratch) groupCell {
	rng := streamRand(seed, "group", design, generator, strconv.Itoa(size))
	draw := newGroupDraw(pool.size())
	rows := make([]int, 0, size)
	c := groupCell{winners: make([]int, pool.k)}
	for rep := 0; rep < r.Replicates; rep++ {
		rows = rows[:0]
		for _, p := range draw.next(rng, size) {
			if pool.complete[p] {
				rows = append(rows, p)
			} else {
				c.dropped++
			}
		}
		if len(rows) == 0 {
			continue // nobody left to analyse: not recovered
		}
		w, q, conv := analyseGroup(pool, rows, r.PXPThreshold, s)
		c.runs++
		if !conv {
			c.notConverged++
		}
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

// bootstrapCell runs the cell's groupBootstrapRounds rounds (see
// groupInterval) from its own stream, apart from the replicates' stream so
// that the point estimates do not depend on the bootstrap: each round
// resamples the pool's P participants with replacement and draws
// bootstrapGroups(P, size, r.Replicates) groups of size without
// replacement from the resample (a participant drawn twice into the
// resample can be in a group twice), analysed as the replicates are. At
// size = P there is nothing to estimate and no round runs.
func bootstrapCell(seed uint64, design, generator string, pool *evidencePool, g, size int, r models.Replication, s *vbScratch) bootCell {
	rng := streamRand(seed, "group-bootstrap", design, generator, strconv.Itoa(size))
	P := pool.size()
	c := bootCell{perRound: bootstrapGroups(P, size, r.Replicates)}
	if c.perRound == 0 {
		return c
	}
	c.rounds = make([]int, groupBootstrapRounds)
	resample := make([]int, P)
	draw := newGroupDraw(P)
	rows := make([]int, 0, size)
	for b := range c.rounds {
		for i := range resample {
			resample[i] = rng.IntN(P)
		}
		for rep := 0; rep < c.perRound; rep++ {
			rows = rows[:0]
			for _, p := range draw.next(rng, size) {
				if q := resample[p]; pool.complete[q] {
					rows = append(rows, q)
				}
			}
			if len(rows) == 0 {
				continue
			}
			w, _, _ := analyseGroup(pool, rows, r.PXPThreshold, s)
			c.runs++
			if w == g {
				c.rounds[b]++
			}
		}
	}
	return c
}

// groupReport turns one design's cells into its report.
func groupReport(generators []string, dp designPools, sizes []int, cells [][]groupCell, boots [][]bootCell, r models.Replication) *GroupReport {
	K := len(generators)
	gr := &GroupReport{
		Generators: slices.Clone(generators), GroupSizes: slices.Clone(sizes), Replicates: r.Replicates,
		PXPThreshold: r.PXPThreshold, TargetRate: r.TargetRate, BootstrapRounds: groupBootstrapRounds,
		SampleSize: map[string]*int{}, Summary: []string{}, Notes: []string{}, Flags: groupFlags(generators, dp, sizes),
	}
	reps := float64(r.Replicates)
	gr.Confusion = make([][][]NullFloat, len(sizes))
	for n := range sizes {
		gr.Confusion[n] = make([][]NullFloat, K)
	}
	nan := NullFloat(math.NaN())
	var participants, draws, dropped int
	minEff, maxEff := math.Inf(1), 0.0
	whole := false // some size is a whole pool
	for g := 0; g < K; g++ {
		P := dp.Pools[g].size()
		participants += P
		gr.Pool = append(gr.Pool, P)
		rate, lo, hi, eff := make([]NullFloat, len(sizes)), make([]NullFloat, len(sizes)), make([]NullFloat, len(sizes)), make([]NullFloat, len(sizes))
		succ, drop, per := make([]int, len(sizes)), make([]int, len(sizes)), make([]int, len(sizes))
		for n, size := range sizes {
			gr.Confusion[n][g] = make([]NullFloat, K)
			if size > P {
				rate[n], lo[n], hi[n], eff[n] = nan, nan, nan, nan
				for k := range gr.Confusion[n][g] {
					gr.Confusion[n][g][k] = nan
				}
				continue
			}
			c, b := cells[g][n], boots[g][n]
			for k, w := range c.winners {
				gr.Confusion[n][g][k] = NullFloat(float64(w) / reps)
			}
			succ[n], drop[n], per[n] = c.successes, c.dropped, b.perRound
			rate[n] = NullFloat(float64(c.successes) / reps)
			l, h, e := groupInterval(c.successes, r.Replicates, float64(size)/float64(P), b.rounds, b.perRound)
			lo[n], hi[n], eff[n] = NullFloat(l), NullFloat(h), NullFloat(e)
			minEff, maxEff = math.Min(minEff, e), math.Max(maxEff, e)
			whole = whole || size == P
			gr.BMSRuns += c.runs
			gr.BootstrapRuns += b.runs
			gr.Quadratures += c.quadratures
			gr.NotConverged += c.notConverged
			draws += size * r.Replicates
			dropped += c.dropped
		}
		gr.Recovery = append(gr.Recovery, rate)
		gr.CILow = append(gr.CILow, lo)
		gr.CIHigh = append(gr.CIHigh, hi)
		gr.EffectiveReplicates = append(gr.EffectiveReplicates, eff)
		gr.Successes = append(gr.Successes, succ)
		gr.Dropped = append(gr.Dropped, drop)
		gr.BootstrapGroups = append(gr.BootstrapGroups, per)
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
		ci := func(n int) string {
			return fmt.Sprintf(" (95%% interval %.0f–%.0f%%)", 100*float64(lo[n]), 100*float64(hi[n]))
		}
		sentence := sampleSizeSentence(generators, g, sizes, gr.Confusion, gr.SampleSize[generators[g]], tried, r, ci)
		if ss := gr.SampleSize[generators[g]]; ss != nil && 2**ss > P {
			sentence += fmt.Sprintf("; N = %d is above half its pool of %d, so that rate rests on heavily overlapping replicate groups", *ss, P)
		}
		gr.Summary = append(gr.Summary, sentence)
	}
	gr.Notes = append(gr.Notes, fmt.Sprintf(
		"A replicate study draws N of a generator's synthetic participants without replacement and runs random-effects Bayesian model selection on ln evidence ≈ −BIC/2 (Stephan et al. 2009); it recovers the generator when the generator has the largest protected exceedance probability (Rigoux et al. 2014) and it exceeds %s. Rates are over %d replicates per size.",
		strconv.FormatFloat(r.PXPThreshold, 'g', -1, 64), r.Replicates))
	if !math.IsInf(minEff, 1) {
		note := fmt.Sprintf(
			"Replicates drawn from one pool share its participants, so they are not independent studies. The 95%% intervals carry the pool's own sampling error: an outer bootstrap resamples each pool with replacement %d times and draws about P/2N groups of N from every resample; the spread of the rounds' rates, net of their own binomial spread, estimates the replicates' intraclass correlation ρ (kept between (N/P)² and N/P), and the interval is Wilson's at the effective number of replicates min(%d, R/(1 + (R − 1)ρ)). Here that number ranges from %s to %s of the %d replicates.",
			groupBootstrapRounds, groupBootstrapRounds, fmtEff(minEff), fmtEff(maxEff), r.Replicates)
		if whole {
			note += " A group of the whole pool is one study, whatever the number of replicates: its effective number is 1."
		}
		gr.Notes = append(gr.Notes, note)
	}
	gr.Notes = append(gr.Notes, fmt.Sprintf(
		"Cost: the sweep reuses the stored fits of the design's %d synthetic participants (no refitting); %d group analyses of replicates and %d of bootstrap rounds, each one variational BMS over N rows of %d evidences; exceedance decided by exact pairwise beta bounds, with 1-D quadrature (deterministic, no Monte Carlo error) in %d borderline replicate analyses.",
		participants, gr.BMSRuns, gr.BootstrapRuns, K, gr.Quadratures))
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

// fmtEff writes an effective number of replicates: whole numbers from 10
// up, one decimal below.
func fmtEff(x float64) string {
	if x >= 10 {
		return strconv.FormatFloat(math.Round(x), 'f', 0, 64)
	}
	return strconv.FormatFloat(x, 'f', 1, 64)
}

// groupFlags returns a flag for every group size N that is above half,
// but not above the whole, of some generator's pool (larger sizes are
// skipped and noted instead), one per distinct pool size, in order of N
// and then pool.
func groupFlags(generators []string, dp designPools, sizes []int) []GroupFlag {
	flags := []GroupFlag{}
	for _, N := range sizes {
		byPool := map[int][]string{}
		var pools []int
		for g, name := range generators {
			P := dp.Pools[g].size()
			if 2*N <= P || N > P {
				continue
			}
			if byPool[P] == nil {
				pools = append(pools, P)
			}
			byPool[P] = append(byPool[P], name)
		}
		slices.Sort(pools)
		for _, P := range pools {
			why := fmt.Sprintf("any two share at least %d participants, %s on average", 2*N-P, strconv.FormatFloat(math.Round(10*float64(N*N)/float64(P))/10, 'f', -1, 64))
			if N == P {
				why = "every replicate group is the whole pool"
			}
			flags = append(flags, GroupFlag{GroupSize: N, Pool: P, Generators: byPool[P],
				Reason: fmt.Sprintf("N = %d is above half the pool of %d: replicate groups overlap heavily (%s)", N, P, why)})
		}
	}
	return flags
}

// sampleSizeSentence says in plain words where generator g reaches the
// target rate, with ci(n) the interval of the rate at sizes[n]; when it
// never does, it names the candidate that the group analysis picks most
// often instead at the largest size tried.
func sampleSizeSentence(gens []string, g int, sizes []int, conf [][][]NullFloat, ss *int, tried []int, r models.Replication, ci func(n int) string) string {
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
	var atCI string
	var below []string
	for n, size := range sizes {
		v := rate(n)
		if math.IsNaN(v) {
			continue
		}
		if size == *ss {
			at, atCI = v, ci(n)
		}
		if size > *ss && v < r.TargetRate {
			below = append(below, fmt.Sprintf("%s at N = %d", pct(v), size))
		}
	}
	if len(below) > 0 {
		return fmt.Sprintf("%s is identified by the group analysis in %s%s of replicate studies at N = %d, but not at every larger size tried (%s)", gen, pct(at), atCI, *ss, strings.Join(below, ", "))
	}
	return fmt.Sprintf("%s is identified by the group analysis in %s%s of replicate studies from N = %d", gen, pct(at), atCI, *ss)
}

// groupInterval returns the 95% interval of a group recovery rate with
// successes of replicates groups of N drawn from the real pool of P, widened
// for the pool's own sampling error as measured by the bootstrap rounds (the
// successes of each round, out of perRound groups; none when N = P), and
// the effective number of replicates it is worth. overlap is N/P.
//
// Given the pool, the replicates are independent uniform draws of N of its
// P participants, so successes ~ Binomial(R, T), with T the share of all
// N-subsets of the pool that recover the generator. Over pools,
// E[T(1−T)] = θ(1−θ) − Var T with θ = E[T], so the rate p̂ = successes/R
// has
//
//	Var p̂ = Var T + E[T(1−T)]/R = θ(1−θ)·[1 + (R−1)ρ]/R,   ρ = Var T / (θ(1−θ)):
//
// the replicates are a cluster of R sharing one pool, ρ is their
// intraclass correlation and 1 + (R−1)ρ the design effect of cluster
// sampling (Kish 1965, Survey Sampling; from memory). T averages a 0/1
// outcome over all N-subsets of P independent participants, a U-statistic
// of degree N, so Var T ≤ (N/P)·θ(1−θ) (Hoeffding 1948, Ann. Math. Stat.
// 19:293; from memory), that is ρ ≤ N/P; at N = P, T is the outcome of the
// one possible group, 0 or 1, and ρ = 1 exactly.
//
// For N < P, Var T is estimated by an outer bootstrap over the pool (Efron
// & Tibshirani 1993, An Introduction to the Bootstrap, ch. 6; from memory):
// round b resamples the P participants with replacement and draws
// m = perRound groups of N from the resample, p_b = s_b/m. Since
// s_b ~ Binomial(m, T*_b) given the resample, E[p_b(1−p_b)] =
// T*_b(1−T*_b)(1 − 1/m), and the between-round variance net of the rounds'
// own binomial spread is
//
//	σ̂² = S² − (1/B) Σ_b p_b(1−p_b)/(m−1),   S² = Σ_b (p_b − p̄)²/(B−1),
//
// so ρ̂ = σ̂²/(p̄(1−p̄)) (0 when p̄ is 0 or 1). It is clamped to
//
//	(N/P)² ≤ ρ ≤ N/P,
//
// the upper end Hoeffding's bound, the lower a floor of our own: a
// bootstrap that happens to see no variation (a rate near 0 or 1, from a
// pool that may be luckier than most) must not claim independent
// replicates. The floor is exact at N = P, and below or near the ρ measured
// over fresh pools (TestGroupIntervalCoverage). Then
//
//	n_eff = min(B, R/(1 + (R−1)ρ)),
//
// at most the B independent rounds that measured ρ, and the interval is
// Wilson's (Wilson 1927, JASA 22:209) for p̂ at n_eff trials. At N = P,
// n_eff = 1: a pool of P is one study of P, however many replicates are
// drawn from it.
//
// groupInterval panics unless 0 ≤ successes ≤ replicates, replicates ≥ 1,
// 0 < overlap ≤ 1, and, for overlap < 1, perRound ≥ 2 and at least 2
// rounds.
func groupInterval(successes, replicates int, overlap float64, rounds []int, perRound int) (lo, hi, nEff float64) {
	if replicates < 1 || successes < 0 || successes > replicates || !(overlap > 0 && overlap <= 1) ||
		(overlap < 1 && (perRound < 2 || len(rounds) < 2)) {
		panic(fmt.Sprintf("recovery: groupInterval: %d successes of %d replicates, overlap %v, %d rounds of %d groups",
			successes, replicates, overlap, len(rounds), perRound))
	}
	R := float64(replicates)
	rho := 1.0
	nEff = 1
	if overlap < 1 {
		m, B := float64(perRound), float64(len(rounds))
		var mean, within float64
		for _, s := range rounds {
			p := float64(s) / m
			mean += p
			within += p * (1 - p) / (m - 1)
		}
		mean /= B
		within /= B
		var ss float64
		for _, s := range rounds {
			d := float64(s)/m - mean
			ss += d * d
		}
		rho = 0
		if v := mean * (1 - mean); v > 0 {
			rho = (ss/(B-1) - within) / v
		}
		rho = math.Min(overlap, math.Max(overlap*overlap, rho))
		nEff = math.Min(B, R/(1+(R-1)*rho))
	}
	lo, hi = WilsonInterval(float64(successes)/R*nEff, nEff)
	// Wilson's ends at p̂ = 0 and 1 are exactly 0 and 1; at a fractional
	// n_eff the formula leaves rounding there.
	if successes == 0 {
		lo = 0
	}
	if successes == replicates {
		hi = 1
	}
	return lo, hi, nEff
}
