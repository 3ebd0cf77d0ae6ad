package recovery

import (
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"

	"gonum.org/v1/gonum/stat"

	"discrimen/models"
)

// DesignRank is one row of the design ranking (model.md §8). Every figure
// comes with its 95% bootstrap interval over synthetic participants
// (bootstrapRounds rounds; NaN bounds when the report was ranked without
// its participants).
type DesignRank struct {
	Design string `json:"design"`
	Rank   int    `json:"rank"`
	// Figure is the objective's figure (RankingMethod.Figure), one of the
	// figures below, repeated here with its interval.
	Figure         NullFloat `json:"figure"`
	FigureInterval Bounds    `json:"figure_interval"`
	// DifferenceToFirst is figure(rank 1) − figure(this design), with the
	// interval of the paired bootstrap (the same participants resampled
	// for both designs); 0 for rank 1.
	DifferenceToFirst  NullFloat `json:"difference_to_first"`
	DifferenceInterval Bounds    `json:"difference_interval"`
	// ReachesTarget is set under cheapest_reaching: the BIC recovery rate
	// reaches the study's target.
	ReachesTarget *bool `json:"reaches_target,omitempty"`

	NormalizedMI                  NullFloat `json:"normalized_mi"`
	NormalizedMIInterval          Bounds    `json:"normalized_mi_interval"`
	WorstDiagonal                 NullFloat `json:"worst_diagonal"`
	WorstDiagonalInterval         Bounds    `json:"worst_diagonal_interval"`
	RecoveryRate                  NullFloat `json:"recovery_rate"`
	RecoveryRateInterval          Bounds    `json:"recovery_rate_interval"`
	ParameterR                    NullFloat `json:"parameter_r"`
	ParameterRInterval            Bounds    `json:"parameter_r_interval"`
	NormalizedMIPerMinute         NullFloat `json:"normalized_mi_per_minute"`
	NormalizedMIPerMinuteInterval Bounds    `json:"normalized_mi_per_minute_interval"`
	TrialsPerParticipant          int       `json:"trials_per_participant"`
	MinutesPerParticipant         float64   `json:"minutes_per_participant"`
}

// Bounds is a two-sided Monte Carlo interval; both ends NaN (null) when unknown.
type Bounds struct {
	Low  NullFloat `json:"low"`
	High NullFloat `json:"high"`
}

// RankingMethod records how the designs were ranked (report.json's
// "ranking" block).
type RankingMethod struct {
	// Objective and Target are the study's ranking block, defaults filled.
	Objective string  `json:"objective"`
	Target    float64 `json:"target"`
	// Figure names the DesignRank field the objective ranks by.
	Figure string `json:"figure"`
	// BootstrapRounds resamples of the synthetic participants give each
	// figure's percentile interval at level Level; 0 when the report was
	// ranked without its participants. Paired is true when every design
	// has the same participants per generator, so that each round
	// resamples the same participants for every design.
	BootstrapRounds int     `json:"bootstrap_rounds"`
	Level           float64 `json:"interval_level"`
	Paired          bool    `json:"paired"`
}

// bootstrapRounds is the number of bootstrap resamples of the synthetic
// participants behind every ranking interval: enough for 2.5% and 97.5%
// percentiles of the recovery rate and normalised MI that move by under
// 0.01 between bootstrap seeds on a design of the demo's shape (our
// measurement, TestBootstrapRoundsEnough), at about 0.1 s per design of
// 600 participants on one core (BenchmarkRankingBootstrap).
const bootstrapRounds = 1000

// bootstrapLevel is the level of the percentile intervals.
const bootstrapLevel = 0.95

// rankTolerance is the difference in normalised MI, worst-case diagonal or
// mean parameter r within which two designs tie on that measure and the
// next rule decides (model.md §8). NMI per minute ties within
// rankRelTolerance of the larger value, since its scale depends on the
// minutes.
const (
	rankTolerance    = 0.01
	rankRelTolerance = 0.01
)

// reachSlack absorbs rounding when a recovery rate equals the target (a
// mean of shares such as 0.8 can come out as 0.7999999999999999).
const reachSlack = 1e-9

// The figures a design is ranked by, as indices of a figureSet.
const (
	figNMI = iota
	figWorst
	figRate
	figParamR
	figPerMinute
	nFigures
)

type figureSet [nFigures]float64

// figureNames are the DesignRank JSON names of the figures.
var figureNames = [nFigures]string{"normalized_mi", "worst_diagonal", "recovery_rate", "parameter_r", "normalized_mi_per_minute"}

// figureLabels are the figures in the verdict's words.
var figureLabels = [nFigures]string{"normalised MI", "worst-case recovery", "BIC recovery rate", "mean parameter r", "normalised MI per minute"}

// objectiveFigure is the figure an objective ranks by (for
// cheapest_reaching, the recovery rate compared with the target).
func objectiveFigure(objective string) int {
	switch objective {
	case models.ObjectiveInformation:
		return figNMI
	case models.ObjectiveInformationPerMinute:
		return figPerMinute
	case models.ObjectiveWorstRecovery:
		return figWorst
	}
	return figRate
}

// rankSample is what the ranking bootstrap resamples for one design: per
// generator and synthetic participant (in participant order), the BIC win
// shares of the candidates, and the generator's self-fit: true values and
// estimates (NaN for a failed fit) of its free parameters.
type rankSample struct {
	Minutes  float64
	Shares   [][][]float64 // [generator][participant][candidate]
	Truth    [][][]float64 // [generator][participant][parameter]
	Estimate [][][]float64 // [generator][participant][parameter]
}

// newRankSample collects a design's participants for the bootstrap;
// parts[g] lists generator g's participants in order.
func newRankSample(minutes float64, parts [][]ParticipantResult) rankSample {
	H := len(parts)
	s := rankSample{Minutes: minutes, Shares: make([][][]float64, H), Truth: make([][][]float64, H), Estimate: make([][][]float64, H)}
	for g, ps := range parts {
		for _, p := range ps {
			vals := make([]float64, len(p.Fits))
			for j := range p.Fits {
				vals[j] = BICCriterion.Of(&p.Fits[j])
			}
			sh, _ := WinShares(vals, TieTolerance)
			s.Shares[g] = append(s.Shares[g], sh)
			k := len(p.Truth.Free)
			est := make([]float64, k)
			f := p.Fits[g]
			for i := range est {
				if f.Failed || i >= len(f.Params) {
					est[i] = math.NaN()
				} else {
					est[i] = f.Params[i]
				}
			}
			s.Truth[g] = append(s.Truth[g], p.Truth.Free)
			s.Estimate[g] = append(s.Estimate[g], est)
		}
	}
	return s
}

// figuresOf computes the ranking figures of the participants idx[g] of
// each generator g (indices into s, repeats allowed):
//
//	NMI, recovery rate, worst diagonal   from NewConfusion of their BIC win shares
//	parameter r = mean over (generator, parameter) of Pearson r(truth, estimate), NaN r skipped
//	NMI per minute = NMI / s.Minutes
//
// the same formulas as the report's own (designReport, designRank), so
// that idx = every participant gives the report's figures.
func figuresOf(s *rankSample, idx [][]int) figureSet {
	H := len(s.Shares)
	winners := make([][][]float64, H)
	for g := range H {
		for _, i := range idx[g] {
			winners[g] = append(winners[g], s.Shares[g][i])
		}
	}
	cf := NewConfusion(winners)
	var f figureSet
	f[figNMI], f[figRate] = cf.NormalizedMI, cf.RecoveryRate
	f[figWorst] = worstDiagonal(cf.P)
	var sum float64
	var n int
	var t, e []float64
	for g := range H {
		if len(s.Truth[g]) == 0 {
			continue
		}
		for k := range s.Truth[g][0] {
			t, e = t[:0], e[:0]
			for _, i := range idx[g] {
				if v := s.Estimate[g][i][k]; !math.IsNaN(v) {
					t = append(t, s.Truth[g][i][k])
					e = append(e, v)
				}
			}
			if len(t) >= 2 && stat.Variance(t, nil) > 0 {
				if r := stat.Correlation(t, e, nil); !math.IsNaN(r) {
					sum += r
					n++
				}
			}
		}
	}
	f[figParamR] = math.NaN()
	if n > 0 {
		f[figParamR] = sum / float64(n)
	}
	f[figPerMinute] = perMinute(f[figNMI], s.Minutes)
	return f
}

func perMinute(nmi, minutes float64) float64 {
	if minutes > 0 {
		return nmi / minutes
	}
	return math.NaN()
}

// worstDiagonal is the smallest non-NaN diagonal entry, NaN when none.
func worstDiagonal[T ~float64](p [][]T) float64 {
	worst := math.NaN()
	for i := range p {
		if i < len(p[i]) {
			v := float64(p[i][i])
			if !math.IsNaN(v) && (math.IsNaN(worst) || v < worst) {
				worst = v
			}
		}
	}
	return worst
}

// bootstrapFigures resamples the synthetic participants rounds times and
// returns every design's figures per round, out[design][round]. In round
// b, generator g draws u_s ~ U[0, 1) for s < the largest participant count
// of g over the designs, from the stream (seed, "ranking-bootstrap", g's
// name, b); design d takes participants ⌊u_s·n_d⌋ for s < n_d. Designs
// with the same participant count therefore resample the same
// participants (a paired bootstrap: the truths of participant p are the
// same in every design, truthRand), and every design's resample is a
// plain bootstrap of its own participants (Efron & Tibshirani 1993, An
// Introduction to the Bootstrap, ch. 6, from memory). The streams depend
// only on the seed, so the result does not depend on the workers. The
// plug-in mutual information is biased upwards in small samples, and its
// resamples more so, so with few participants the interval of normalised
// MI leans high; the recovery rate, a mean of shares, has no such bias.
func bootstrapFigures(seed uint64, gens []string, samples []rankSample, rounds int) [][]figureSet {
	out := make([][]figureSet, len(samples))
	for d := range out {
		out[d] = make([]figureSet, rounds)
	}
	H := len(gens)
	nMax := make([]int, H)
	for _, s := range samples {
		for g := range H {
			nMax[g] = max(nMax[g], len(s.Shares[g]))
		}
	}
	u := make([][]float64, H)
	idx := make([][]int, H)
	for b := range rounds {
		for g := range H {
			r := streamRand(seed, "ranking-bootstrap", gens[g], strconv.Itoa(b))
			u[g] = u[g][:0]
			for range nMax[g] {
				u[g] = append(u[g], r.Float64())
			}
		}
		for d := range samples {
			s := &samples[d]
			for g := range H {
				n := len(s.Shares[g])
				idx[g] = idx[g][:0]
				for i := range n {
					idx[g] = append(idx[g], int(u[g][i]*float64(n)))
				}
			}
			out[d][b] = figuresOf(s, idx)
		}
	}
	return out
}

// percentileInterval is the (1 ± level)/2 empirical quantiles of the
// finite values of x (the percentile bootstrap interval; quantiles as
// NewQuantiles). Both ends are NaN when no value is finite.
func percentileInterval(x []float64, level float64) Bounds {
	s := make([]float64, 0, len(x))
	for _, v := range x {
		if !math.IsNaN(v) && !math.IsInf(v, 0) {
			s = append(s, v)
		}
	}
	if len(s) == 0 {
		return Bounds{NullFloat(math.NaN()), NullFloat(math.NaN())}
	}
	sort.Float64s(s)
	a := (1 - level) / 2
	return Bounds{NullFloat(stat.Quantile(a, stat.Empirical, s, nil)), NullFloat(stat.Quantile(1-a, stat.Empirical, s, nil))}
}

// bootstrap holds the rounds of bootstrapFigures, nil when there are none.
type bootstrap [][]figureSet

// interval of figure f of design d.
func (bs bootstrap) interval(d, f int) Bounds {
	if bs == nil {
		return Bounds{NullFloat(math.NaN()), NullFloat(math.NaN())}
	}
	x := make([]float64, len(bs[d]))
	for b, fs := range bs[d] {
		x[b] = fs[f]
	}
	return percentileInterval(x, bootstrapLevel)
}

// difference is the paired interval of figure f of design a minus that of
// design b, round by round.
func (bs bootstrap) difference(a, b, f int) Bounds {
	if bs == nil {
		return Bounds{NullFloat(math.NaN()), NullFloat(math.NaN())}
	}
	x := make([]float64, len(bs[a]))
	for r := range x {
		x[r] = bs[a][r][f] - bs[b][r][f]
	}
	return percentileInterval(x, bootstrapLevel)
}

// rankDesigns orders the designs by the study's ranking objective and
// fills Ranking, RankedBy, Preferred (rank 1) and Verdict. samples holds
// each design's participants for the bootstrap intervals (nil: no
// intervals). The order, each rule deciding only when the ones before tie
// (rankRules):
//
//	information:            normalised MI, worst diagonal, parameter r, fewer minutes, name
//	worst_recovery:         worst diagonal, normalised MI, parameter r, fewer minutes, name
//	information_per_minute: NMI per minute, normalised MI, worst diagonal, parameter r, fewer minutes, name
//	cheapest_reaching:      designs whose BIC recovery rate reaches the target first; among them
//	                        fewer minutes, then normalised MI, worst diagonal, parameter r, name;
//	                        the others as under information
//
// This keeps model.md §8's chain (MI, worst diagonal, parameter r,
// minutes, name) behind each objective's own figure. Normalised MI, worst
// diagonal and parameter r tie within 0.01, NMI per minute within 1%;
// a NaN figure ranks below every number.
func rankDesigns(rep *Report, obj models.Ranking, samples []rankSample) {
	if obj.Objective == "" {
		obj.Objective = models.ObjectiveCheapestReaching
	}
	if obj.Target == 0 {
		obj.Target = 0.8
	}
	fig := objectiveFigure(obj.Objective)
	method := &RankingMethod{Objective: obj.Objective, Target: obj.Target, Figure: figureNames[fig], Level: bootstrapLevel}
	var bs bootstrap
	if len(samples) == len(rep.Designs) && len(samples) > 0 && len(rep.Hypotheses) >= 2 {
		bs = bootstrapFigures(rep.Seed, rep.Hypotheses, samples, bootstrapRounds)
		method.BootstrapRounds = bootstrapRounds
		method.Paired = true
		for _, s := range samples[1:] {
			for g := range s.Shares {
				method.Paired = method.Paired && len(s.Shares[g]) == len(samples[0].Shares[g])
			}
		}
	}
	rows := make([]DesignRank, len(rep.Designs))
	order := make([]int, len(rows)) // order[rank-1] = design index
	for i, d := range rep.Designs {
		rows[i] = designRank(d)
		for f := range nFigures {
			*rowInterval(&rows[i], f) = bs.interval(i, f)
		}
		rows[i].Figure, rows[i].FigureInterval = rowFigure(&rows[i], fig), *rowInterval(&rows[i], fig)
		if obj.Objective == models.ObjectiveCheapestReaching {
			r := reaches(rows[i], obj.Target)
			rows[i].ReachesTarget = &r
		}
		order[i] = i
	}
	// Insertion sort: stable and, with a tolerance that need not be
	// transitive, still fully determined by the input order.
	for i := 1; i < len(rows); i++ {
		for j := i; j > 0 && rankBefore(obj, rows[j], rows[j-1]); j-- {
			rows[j], rows[j-1] = rows[j-1], rows[j]
			order[j], order[j-1] = order[j-1], order[j]
		}
	}
	for i := range rows {
		rows[i].Rank = i + 1
		rows[i].DifferenceToFirst = rows[0].Figure - rows[i].Figure
		rows[i].DifferenceInterval = bs.difference(order[0], order[i], fig)
		if i == 0 {
			rows[i].DifferenceInterval = Bounds{0, 0}
			if bs == nil {
				rows[i].DifferenceInterval = Bounds{NullFloat(math.NaN()), NullFloat(math.NaN())}
			}
		}
	}
	rep.Ranking, rep.RankedBy = rows, method
	rep.Preferred, rep.Verdict = "", ""
	if len(rows) == 0 {
		return
	}
	rep.Preferred = rows[0].Design
	var groups []*GroupReport
	for _, di := range order[:min(2, len(order))] {
		groups = append(groups, rep.Designs[di].Group)
	}
	rep.Verdict = rankingVerdict(method, rows, ranked{bs: bs, order: order}, groups)
}

// ranked gives the verdict the bootstrap rounds in rank order.
type ranked struct {
	bs    bootstrap
	order []int // order[i] is the design index of rows[i]
}

// difference is the paired interval of figure f of rows[i] − rows[j].
func (r ranked) difference(i, j, f int) Bounds { return r.bs.difference(r.order[i], r.order[j], f) }

func designRank(d DesignReport) DesignRank {
	cr := d.Criteria[BICCriterion]
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
	return DesignRank{
		Design: d.Name, NormalizedMI: cr.NormalizedMI, WorstDiagonal: NullFloat(worstDiagonal(cr.Confusion)), RecoveryRate: cr.RecoveryRate,
		ParameterR: NullFloat(r), TrialsPerParticipant: d.TrialsPerParticipant, MinutesPerParticipant: d.MinutesPerParticipant,
		NormalizedMIPerMinute: NullFloat(perMinute(float64(cr.NormalizedMI), d.MinutesPerParticipant)),
	}
}

func rowFigure(r *DesignRank, f int) NullFloat {
	return [nFigures]NullFloat{r.NormalizedMI, r.WorstDiagonal, r.RecoveryRate, r.ParameterR, r.NormalizedMIPerMinute}[f]
}

func rowInterval(r *DesignRank, f int) *Bounds {
	return [nFigures]*Bounds{&r.NormalizedMIInterval, &r.WorstDiagonalInterval, &r.RecoveryRateInterval, &r.ParameterRInterval, &r.NormalizedMIPerMinuteInterval}[f]
}

func reaches(r DesignRank, target float64) bool { return float64(r.RecoveryRate) >= target-reachSlack }

// better compares one measure, larger first: +1 when a is ahead by more
// than tol (or, when rel, by more than tol times the larger magnitude), −1
// when behind, 0 on a tie. NaN is behind a number.
func better(a, b NullFloat, tol float64, rel bool) int {
	x, y := float64(a), float64(b)
	switch {
	case math.IsNaN(x) && math.IsNaN(y):
		return 0
	case math.IsNaN(y):
		return 1
	case math.IsNaN(x):
		return -1
	}
	if rel {
		tol *= math.Max(math.Abs(x), math.Abs(y))
	}
	switch {
	case x > y+tol:
		return 1
	case y > x+tol:
		return -1
	}
	return 0
}

// A rankRule compares two rows on one measure: +1 when a comes first.
// tie names the measure in the verdict when it ties; why says why a comes
// first when this rule decides.
type rankRule struct {
	tie, why string
	cmp      func(a, b DesignRank) int
}

func sign(b bool) int {
	if b {
		return 1
	}
	return -1
}

var (
	ruleNMI = rankRule{"normalised MI ties within 0.01", "it carries more information about which hypothesis generated the data",
		func(a, b DesignRank) int { return better(a.NormalizedMI, b.NormalizedMI, rankTolerance, false) }}
	ruleWorst = rankRule{"worst-case recovery ties within 0.01", "its worst-recovered hypothesis is recovered more often",
		func(a, b DesignRank) int { return better(a.WorstDiagonal, b.WorstDiagonal, rankTolerance, false) }}
	ruleR = rankRule{"mean parameter r ties within 0.01", "its parameters are recovered better",
		func(a, b DesignRank) int { return better(a.ParameterR, b.ParameterR, rankTolerance, false) }}
	rulePerMinute = rankRule{"normalised MI per minute ties within 1%", "it carries more information per minute of testing",
		func(a, b DesignRank) int {
			return better(a.NormalizedMIPerMinute, b.NormalizedMIPerMinute, rankRelTolerance, true)
		}}
	ruleMinutes = rankRule{"testing time is the same", "it takes less testing time",
		func(a, b DesignRank) int {
			if a.MinutesPerParticipant == b.MinutesPerParticipant {
				return 0
			}
			return sign(a.MinutesPerParticipant < b.MinutesPerParticipant)
		}}
	ruleName = rankRule{"", "it comes first by name",
		func(a, b DesignRank) int {
			if a.Design == b.Design {
				return 0
			}
			return sign(a.Design < b.Design)
		}}
)

// rankRules lists the rules that order a and b under obj (rankDesigns
// documents the order).
func rankRules(obj models.Ranking, a, b DesignRank) []rankRule {
	switch obj.Objective {
	case models.ObjectiveWorstRecovery:
		return []rankRule{ruleWorst, ruleNMI, ruleR, ruleMinutes, ruleName}
	case models.ObjectiveInformationPerMinute:
		return []rankRule{rulePerMinute, ruleNMI, ruleWorst, ruleR, ruleMinutes, ruleName}
	case models.ObjectiveCheapestReaching:
		ra, rb := reaches(a, obj.Target), reaches(b, obj.Target)
		reach := rankRule{"", "its BIC recovery rate reaches the target of " + f2(NullFloat(obj.Target)) + " and the other's does not",
			func(a, b DesignRank) int {
				if ra == rb {
					return 0
				}
				return sign(ra)
			}}
		if ra && rb {
			cheaper := ruleMinutes
			cheaper.why = "both reach the target BIC recovery rate of " + f2(NullFloat(obj.Target)) + ", and it takes less testing time"
			cheaper.tie = "both reach the target at the same testing time"
			return []rankRule{reach, cheaper, ruleNMI, ruleWorst, ruleR, ruleName}
		}
		return []rankRule{reach, ruleNMI, ruleWorst, ruleR, ruleMinutes, ruleName}
	}
	return []rankRule{ruleNMI, ruleWorst, ruleR, ruleMinutes, ruleName}
}

// rankKey is the index in rules of the first rule on which a and b
// differ, with the sign of a's advantage (the last index and 0 when they
// tie on every rule).
func rankKey(rules []rankRule, a, b DesignRank) (key, sign int) {
	for k, r := range rules {
		if c := r.cmp(a, b); c != 0 {
			return k, c
		}
	}
	return len(rules) - 1, 0
}

func rankBefore(obj models.Ranking, a, b DesignRank) bool {
	_, s := rankKey(rankRules(obj, a, b), a, b)
	return s > 0
}

// f2 formats a measure with two decimals, or "n/a" when it is missing.
func f2(x NullFloat) string {
	if v := float64(x); !math.IsNaN(v) && !math.IsInf(v, 0) {
		return strconv.FormatFloat(v, 'f', 2, 64)
	}
	return "n/a"
}

// figure formats figure f: NMI per minute with three significant digits,
// the others with two decimals.
func figure(x NullFloat, f int) string {
	if f == figPerMinute {
		if v := float64(x); !math.IsNaN(v) && !math.IsInf(v, 0) {
			return strconv.FormatFloat(v, 'g', 3, 64)
		}
		return "n/a"
	}
	return f2(x)
}

// signed formats a difference with its sign ("+0.05", "−0.02").
func signed(x NullFloat, f int) string {
	v := float64(x)
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return "n/a"
	}
	switch {
	case v == 0:
		return "0"
	case v < 0:
		return "−" + figure(NullFloat(-v), f)
	}
	return "+" + figure(x, f)
}

// known reports whether an interval has both ends.
func (iv Bounds) known() bool { return !math.IsNaN(float64(iv.Low)) && !math.IsNaN(float64(iv.High)) }

// withInterval writes "0.62 (95% interval 0.55–0.69)", or the figure alone
// without an interval.
func withInterval(x NullFloat, iv Bounds, f int) string {
	if v := float64(x); !iv.known() || math.IsNaN(v) || math.IsInf(v, 0) {
		return figure(x, f)
	}
	return fmt.Sprintf("%s (95%% interval %s–%s)", figure(x, f), figure(iv.Low, f), figure(iv.High, f))
}

// objectivePhrase names an objective in the verdict.
func objectivePhrase(m *RankingMethod) string {
	switch m.Objective {
	case models.ObjectiveInformation:
		return "normalised mutual information under BIC"
	case models.ObjectiveInformationPerMinute:
		return "normalised mutual information under BIC per minute of testing"
	case models.ObjectiveWorstRecovery:
		return "the worst diagonal of the BIC confusion matrix (the hypothesis recovered least often)"
	}
	return fmt.Sprintf("the fewest minutes of testing per participant among the designs whose BIC recovery rate reaches %s (the most informative design when none does)", f2(NullFloat(m.Target)))
}

// minutes formats minutes per participant.
func minutes(x float64) string { return strconv.FormatFloat(x, 'f', 1, 64) }

// rankingVerdict says which design to prefer and why, with the numbers of
// the preferred design and the runner-up, and how far the bootstrap over
// synthetic participants lets the simulation tell the top designs apart.
// groups holds the group reports of the first two rows (entries may be
// nil).
func rankingVerdict(m *RankingMethod, rows []DesignRank, rk ranked, groups []*GroupReport) string {
	a := rows[0]
	fig := objectiveFigure(m.Objective)
	obj := models.Ranking{Objective: m.Objective, Target: m.Target}
	cheapest := m.Objective == models.ObjectiveCheapestReaching
	if len(rows) == 1 {
		out := fmt.Sprintf("Only one design, %s: normalised MI %s, worst-case recovery %s, BIC recovery rate %s, mean parameter r %s, at %s minutes (%d trials) per participant.",
			a.Design, withInterval(a.NormalizedMI, a.NormalizedMIInterval, figNMI), withInterval(a.WorstDiagonal, a.WorstDiagonalInterval, figWorst),
			withInterval(a.RecoveryRate, a.RecoveryRateInterval, figRate), withInterval(a.ParameterR, a.ParameterRInterval, figParamR),
			minutes(a.MinutesPerParticipant), a.TrialsPerParticipant)
		if cheapest {
			out += " " + reachSentence(a, m.Target)
		}
		return out
	}
	b := rows[1]
	var sb strings.Builder
	fmt.Fprintf(&sb, "Designs are ranked by %s.", objectivePhrase(m))
	noneReaches := cheapest && !*a.ReachesTarget
	if noneReaches {
		best := a
		for _, r := range rows {
			if better(r.RecoveryRate, best.RecoveryRate, 0, false) > 0 {
				best = r
			}
		}
		highest := withInterval(best.RecoveryRate, best.RecoveryRateInterval, figRate)
		if f2(best.RecoveryRate) == f2(NullFloat(m.Target)) {
			// Rounded to two decimals it would read as the target itself.
			highest = strconv.FormatFloat(float64(best.RecoveryRate), 'f', 3, 64) + strings.TrimPrefix(highest, f2(best.RecoveryRate))
		}
		fmt.Fprintf(&sb, " No design reaches the target BIC recovery rate of %s (the highest is %s's %s), so they are ranked by normalised MI.",
			f2(NullFloat(m.Target)), best.Design, highest)
	}
	rules := rankRules(obj, a, b)
	key, _ := rankKey(rules, a, b)
	var ties []string
	for _, r := range rules[:key] {
		if r.tie != "" {
			ties = append(ties, r.tie)
		}
	}
	why := rules[key].why
	if len(ties) > 0 {
		why = strings.Join(ties, ", ") + ", and " + why
	}
	over := b.Design
	if len(rows) > 2 {
		over = fmt.Sprintf("%s, the runner-up of %d designs", b.Design, len(rows))
	}
	fmt.Fprintf(&sb, " Prefer %s over %s: %s.", a.Design, over, why)
	cost := fmt.Sprintf("at the same %s minutes per participant", minutes(a.MinutesPerParticipant))
	if a.MinutesPerParticipant != b.MinutesPerParticipant || a.TrialsPerParticipant != b.TrialsPerParticipant {
		cost = fmt.Sprintf("at %s vs %s minutes (%d vs %d trials) per participant", minutes(a.MinutesPerParticipant), minutes(b.MinutesPerParticipant),
			a.TrialsPerParticipant, b.TrialsPerParticipant)
	}
	// The objective's figure with its intervals, then the others.
	second := figure(rowFigure(&b, fig), fig)
	if iv := *rowInterval(&b, fig); iv.known() && !math.IsNaN(float64(rowFigure(&b, fig))) {
		second += fmt.Sprintf(" (%s–%s)", figure(iv.Low, fig), figure(iv.High, fig))
	}
	parts := []string{fmt.Sprintf("%s %s vs %s", figureLabels[fig], withInterval(rowFigure(&a, fig), *rowInterval(&a, fig), fig), second)}
	for _, f := range []int{figNMI, figWorst, figRate, figParamR} {
		if f != fig {
			parts = append(parts, fmt.Sprintf("%s %s vs %s", figureLabels[f], figure(rowFigure(&a, f), f), figure(rowFigure(&b, f), f)))
		}
	}
	label := strings.ToUpper(parts[0][:1]) + parts[0][1:]
	fmt.Fprintf(&sb, " %s; %s, %s.", label, strings.Join(parts[1:], ", "), cost)
	if rk.bs != nil {
		sb.WriteString(" " + uncertaintySentence(m, rows, rk, noneReaches))
	}
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
		fmt.Fprintf(&sb, " At the group level %s reaches the target rate for %d of %d hypotheses within the sizes tried, %s for %d.",
			a.Design, count(groups[0]), len(groups[0].SampleSize), b.Design, count(groups[1]))
	}
	return sb.String()
}

// reachSentence says whether a design's BIC recovery rate reaches the
// target, and whether its interval lets the simulation be sure of it.
func reachSentence(a DesignRank, target float64) string {
	iv := a.RecoveryRateInterval
	t := f2(NullFloat(target))
	switch {
	case *a.ReachesTarget && iv.known() && float64(iv.Low) < target:
		return fmt.Sprintf("Its BIC recovery rate reaches the target of %s, but its interval reaches below it: with other synthetic participants it might fall short.", t)
	case *a.ReachesTarget:
		return fmt.Sprintf("Its BIC recovery rate reaches the target of %s.", t)
	case iv.known() && float64(iv.High) >= target:
		return fmt.Sprintf("Its BIC recovery rate falls short of the target of %s, but its interval reaches the target: more synthetic participants would settle it.", t)
	}
	return fmt.Sprintf("Its BIC recovery rate falls short of the target of %s.", t)
}

// uncertaintySentence reads the paired bootstrap: which designs the
// simulation cannot tell apart from the preferred one on the objective's
// figure, and, under cheapest_reaching, whether the preferred design
// surely reaches the target, whether a cheaper one might, and what the
// extra minutes of the runner-up buy.
func uncertaintySentence(m *RankingMethod, rows []DesignRank, rk ranked, noneReaches bool) string {
	a, b := rows[0], rows[1]
	pairing := "the same participants resampled for every design"
	if !m.Paired {
		pairing = "the designs' participant counts differ, so the resamples are not paired"
	}
	lead := fmt.Sprintf("A bootstrap over the synthetic participants (%d rounds, %s)", m.BootstrapRounds, pairing)
	fig := objectiveFigure(m.Objective)
	if m.Objective == models.ObjectiveCheapestReaching {
		if noneReaches {
			fig = figNMI
		} else {
			return lead + " shows that " + cheapestUncertainty(m, rows, rk)
		}
	}
	d := rk.difference(0, 1, fig)
	diff := rowFigure(&a, fig) - rowFigure(&b, fig)
	out := fmt.Sprintf("%s puts %s's lead over %s in %s at %s, 95%% interval %s to %s", lead, a.Design, b.Design, figureLabels[fig],
		signed(diff, fig), signed(d.Low, fig), signed(d.High, fig))
	var alike []string
	for i := 1; i < len(rows); i++ {
		if iv := rk.difference(0, i, fig); !(float64(iv.Low) > 0) {
			alike = append(alike, rows[i].Design)
		}
	}
	switch {
	case len(alike) == 0:
		return out + ": the lead holds across resamples."
	case len(alike) == 1 && alike[0] == b.Design:
		out += fmt.Sprintf(": the interval includes 0, so the simulation cannot tell %s and %s apart on this objective", a.Design, b.Design)
	default:
		out += fmt.Sprintf(": the simulation cannot tell %s apart on this objective from %s (the paired interval includes 0)", a.Design, strings.Join(alike, ", "))
	}
	if b.MinutesPerParticipant < a.MinutesPerParticipant {
		out += fmt.Sprintf(", and %s takes less testing time (%s vs %s minutes per participant)", b.Design, minutes(b.MinutesPerParticipant), minutes(a.MinutesPerParticipant))
	}
	return out + "."
}

func cheapestUncertainty(m *RankingMethod, rows []DesignRank, rk ranked) string {
	a, b := rows[0], rows[1]
	t := f2(NullFloat(m.Target))
	var parts []string
	iv := a.RecoveryRateInterval
	if float64(iv.Low) < m.Target-reachSlack {
		parts = append(parts, fmt.Sprintf("the 95%% interval of %s's BIC recovery rate (%s–%s) reaches below the target of %s: with other synthetic participants it might fall short",
			a.Design, f2(iv.Low), f2(iv.High), t))
	} else {
		parts = append(parts, fmt.Sprintf("the 95%% interval of %s's BIC recovery rate (%s–%s) lies at or above the target of %s", a.Design, f2(iv.Low), f2(iv.High), t))
	}
	for _, r := range rows[1:] {
		if !*r.ReachesTarget && r.MinutesPerParticipant < a.MinutesPerParticipant && float64(r.RecoveryRateInterval.High) >= m.Target-reachSlack {
			parts = append(parts, fmt.Sprintf("the cheaper %s (%s minutes) falls short at %s, but its interval reaches the target, so it may reach it too",
				r.Design, minutes(r.MinutesPerParticipant), withInterval(r.RecoveryRate, r.RecoveryRateInterval, figRate)))
		}
	}
	if *b.ReachesTarget && b.MinutesPerParticipant > a.MinutesPerParticipant {
		d := rk.difference(1, 0, figRate)
		extra := minutes(b.MinutesPerParticipant - a.MinutesPerParticipant)
		gain := b.RecoveryRate - a.RecoveryRate
		if float64(d.Low) > 0 {
			parts = append(parts, fmt.Sprintf("the %s more minutes of %s buy %s in recovery rate (paired 95%% interval %s to %s)",
				extra, b.Design, signed(gain, figRate), signed(d.Low, figRate), signed(d.High, figRate)))
		} else {
			parts = append(parts, fmt.Sprintf("the %s more minutes of %s change the recovery rate by %s (paired 95%% interval %s to %s), a change the simulation cannot tell from none",
				extra, b.Design, signed(gain, figRate), signed(d.Low, figRate), signed(d.High, figRate)))
		}
	}
	return strings.Join(parts, "; ") + "."
}
