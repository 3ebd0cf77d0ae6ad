package recovery

import (
	"context"
	"discrimen/internal/parallel"
	"fmt"
	"math"
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
	Recovery [][]NullFloat `json:"recovery"`
	CILow    [][]NullFloat `json:"ci_low"`
	CIHigh   [][]NullFloat `json:"ci_high"`
	// Successes counts the recovered replicates behind Recovery.
	Successes [][]int `json:"successes"`
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
	scr := make([]*vbScratch, max(workers, 1))
	// The cells cannot fail and the sweep has no context to stop it.
	_ = parallel.For(context.Background(), len(tasks), workers, func(w, i int) error {
		if scr[w] == nil {
			scr[w] = newVBScratch(K)
		}
		t := tasks[i]
		cells[t.d][t.g][t.n] = runCell(seed, designs[t.d].Name, generators[t.g], designs[t.d].Pools[t.g], t.g, sizes[t.n], r, scr[w])
		return nil
	})
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
	gr.Confusion = make([][][]NullFloat, len(sizes))
	for n := range sizes {
		gr.Confusion[n] = make([][]NullFloat, K)
	}
	var participants, draws, dropped int
	for g := 0; g < K; g++ {
		participants += dp.Pools[g].size()
		rate, lo, hi := make([]NullFloat, len(sizes)), make([]NullFloat, len(sizes)), make([]NullFloat, len(sizes))
		succ, drop := make([]int, len(sizes)), make([]int, len(sizes))
		for n, size := range sizes {
			gr.Confusion[n][g] = make([]NullFloat, K)
			if size > dp.Pools[g].size() {
				rate[n], lo[n], hi[n] = NullFloat(math.NaN()), NullFloat(math.NaN()), NullFloat(math.NaN())
				for k := range gr.Confusion[n][g] {
					gr.Confusion[n][g][k] = NullFloat(math.NaN())
				}
				continue
			}
			c := cells[g][n]
			for k, w := range c.winners {
				gr.Confusion[n][g][k] = NullFloat(float64(w) / reps)
			}
			succ[n], drop[n] = c.successes, c.dropped
			rate[n] = NullFloat(float64(c.successes) / reps)
			l, h := WilsonInterval(float64(c.successes), reps)
			lo[n], hi[n] = NullFloat(l), NullFloat(h)
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
func sampleSizeSentence(gens []string, g int, sizes []int, conf [][][]NullFloat, ss *int, tried []int, r models.Replication) string {
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
