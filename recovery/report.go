package recovery

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"

	"discrimen/models"
)

// NullFloat is a float that encodes NaN and ±Inf as JSON null.
type NullFloat float64

// MarshalJSON writes the number with the shortest exact representation, or
// null when it is not finite.
func (n NullFloat) MarshalJSON() ([]byte, error) {
	f := float64(n)
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return []byte("null"), nil
	}
	return strconv.AppendFloat(nil, f, 'g', -1, 64), nil
}

// UnmarshalJSON reads a number or null (as NaN).
func (n *NullFloat) UnmarshalJSON(b []byte) error {
	if string(b) == "null" {
		*n = NullFloat(math.NaN())
		return nil
	}
	f, err := strconv.ParseFloat(string(b), 64)
	*n = NullFloat(f)
	return err
}

func nums(x []float64) []NullFloat {
	out := make([]NullFloat, len(x))
	for i, v := range x {
		out[i] = NullFloat(v)
	}
	return out
}

func numMatrix(x [][]float64) [][]NullFloat {
	out := make([][]NullFloat, len(x))
	for i, r := range x {
		out[i] = nums(r)
	}
	return out
}

// Report is the outcome of a study: everything report.json holds.
type Report struct {
	Study   string `json:"study"`
	Seed    uint64 `json:"seed"`
	Version string `json:"version"`
	// StudyHash is StudyHash of the study file: a fit of collected data
	// checks it before it uses the report.
	StudyHash  string         `json:"study_hash"`
	Hypotheses []string       `json:"hypotheses"`
	Families   []string       `json:"families"`
	Designs    []DesignReport `json:"designs"`
	Ranking    []DesignRank   `json:"design_ranking,omitempty"`
	RankedBy   *RankingMethod `json:"ranking,omitempty"`
	Preferred  string         `json:"preferred_design,omitempty"`
	Verdict    string         `json:"ranking_verdict,omitempty"`
	Method     Method         `json:"method"`
	Timing     Timing         `json:"timing"`
	StudyFile  *models.Study  `json:"study_file"`
	// Warnings are the study file's warnings (models.Study.Warnings):
	// values allowed but likely a slip, each with its path.
	Warnings []models.Problem `json:"warnings"`
	Fits     [][]DatasetFits  `json:"-"` // per design: per-dataset fits, for fits.csv
}

// DatasetFits is one dataset's fits (every candidate), kept for fits.csv.
type DatasetFits struct {
	Truth Truth
	Fits  []Fit
}

// Timing records how long the run took; it is the only part of a report
// that changes between runs of the same study and seed.
type Timing struct {
	TotalSeconds    float64 `json:"total_seconds"`
	GridSeconds     float64 `json:"grid_seconds"`
	ShardSeconds    float64 `json:"shard_seconds"`
	AssembleSeconds float64 `json:"assemble_seconds"`
	Fits            int     `json:"fits"`
	FitsPerSecond   float64 `json:"fits_per_second"`
	Workers         int     `json:"workers"`
}

// DesignReport summarises one design.
type DesignReport struct {
	Name                  string                        `json:"name"`
	Measures              []string                      `json:"measures"`
	Participants          int                           `json:"participants"`
	TrialsPerParticipant  int                           `json:"trials_per_participant"`
	MinutesPerParticipant float64                       `json:"minutes_per_participant"`
	ITIms                 int                           `json:"iti_ms"`
	Criteria              map[Criterion]CriterionReport `json:"criteria"`
	ParamRecovery         []ParamRecoveryReport         `json:"parameter_recovery"`
	Tradeoffs             []TradeoffReport              `json:"tradeoffs"`
	Mimicry               []MimicryReport               `json:"mimicry"`
	FitFailures           FitFailures                   `json:"fit_failures"`
	Surrogate             []SurrogateError              `json:"surrogate_error"`
	Predictions           []models.HypothesisPrediction `json:"predictions"`
	Verdict               []string                      `json:"verdict"`
	Group                 *GroupReport                  `json:"group,omitempty"`
	Recovery              []RecoveryPoints              `json:"recovery_points"`
	PrecisionSD           float64                       `json:"precision_sd,omitempty"` // agent.precision_sd (model.md §3b); omitted when 0
}

// CriterionReport is the confusion analysis under one criterion.
type CriterionReport struct {
	Confusion    [][]NullFloat `json:"confusion"`
	Counts       [][]NullFloat `json:"counts"`
	CILow        [][]NullFloat `json:"ci_low"`
	CIHigh       [][]NullFloat `json:"ci_high"`
	Inversion    [][]NullFloat `json:"inversion"`
	RecoveryRate NullFloat     `json:"recovery_rate"`
	MIBits       NullFloat     `json:"mutual_information_bits"`
	NormalizedMI NullFloat     `json:"normalized_mi"`
	Datasets     []int         `json:"datasets"`
	Failures     []int         `json:"failures"`
}

// ParamRecoveryReport is RecoverParam's result for the report.
type ParamRecoveryReport struct {
	Hypothesis string    `json:"hypothesis"`
	Parameter  string    `json:"parameter"`
	N          int       `json:"n"`
	R          NullFloat `json:"r"`
	Bias       NullFloat `json:"bias"`
	RMSE       NullFloat `json:"rmse"`
	Slope      NullFloat `json:"slope"`
	// Coverage is the share of every participant whose 95% profile
	// interval holds the true value.
	Coverage NullFloat `json:"coverage"`
	// AtBound is the share of estimates within 0.1% of the range's ends.
	AtBound     NullFloat `json:"at_bound"`
	Flat        bool      `json:"flat"`
	MedianSE    NullFloat `json:"median_se"`
	ReliableSEs int       `json:"reliable_ses"`
}

// RecoveryPoints holds true and estimated values of one parameter, for the
// scatter plots of report.html.
type RecoveryPoints struct {
	Hypothesis string      `json:"hypothesis"`
	Parameter  string      `json:"parameter"`
	Min        NullFloat   `json:"min"`
	Max        NullFloat   `json:"max"`
	Truth      []NullFloat `json:"truth"`
	Estimate   []NullFloat `json:"estimate"`
	// Intervals are the 95% profile-likelihood intervals of the estimates.
	Intervals []Interval `json:"intervals"`
}

// TradeoffReport is one pair of a hypothesis's parameters.
type TradeoffReport struct {
	Hypothesis string    `json:"hypothesis"`
	A          string    `json:"a"`
	B          string    `json:"b"`
	R          NullFloat `json:"r"`
	N          int       `json:"n"`
}

// QuantilesReport summarises a ΔBIC distribution.
type QuantilesReport struct {
	N    int       `json:"n"`
	Mean NullFloat `json:"mean"`
	Q05  NullFloat `json:"q05"`
	Q25  NullFloat `json:"q25"`
	Q50  NullFloat `json:"q50"`
	Q75  NullFloat `json:"q75"`
	Q95  NullFloat `json:"q95"`
}

// MimicryReport is ΔBIC = BIC_A − BIC_B when A generates and when B does.
type MimicryReport struct {
	A     string          `json:"a"`
	B     string          `json:"b"`
	WhenA QuantilesReport `json:"when_a_generates"`
	WhenB QuantilesReport `json:"when_b_generates"`
}

// FitFailures counts fits that failed or did not converge.
type FitFailures struct {
	Failed       int `json:"failed"`
	NotConverged int `json:"not_converged"`
	Total        int `json:"total"`
	// NoWinner counts datasets where no candidate had a finite criterion.
	NoWinner int `json:"datasets_without_winner"`
	// BelowTruth counts self-fits whose ln L ends more than 1e-6 below the
	// ln L at the generating hypothesis parameters (measurement terms
	// fitted as in any fit, exact predictions): a search that lost to the
	// truth. TruthChecked is the number of self-fits checked.
	BelowTruth   int       `json:"below_truth"`
	TruthChecked int       `json:"truth_checked"`
	MaxTruthGap  NullFloat `json:"max_truth_gap"`
}

func quantilesReport(q Quantiles) QuantilesReport {
	return QuantilesReport{N: q.N, Mean: NullFloat(q.Mean), Q05: NullFloat(q.Q05), Q25: NullFloat(q.Q25), Q50: NullFloat(q.Q50), Q75: NullFloat(q.Q75), Q95: NullFloat(q.Q95)}
}

// minutesPerParticipant estimates testing time (model.md §8): each trial
// lasts its CTI, the response window and the design's inter-trial
// interval,
//
//	minutes = Σ_CTI trials_per_cti · (cti_ms + response_window_ms + iti_ms) / 60000
func minutesPerParticipant(d *models.Design) float64 {
	ms := 0.0
	for _, c := range d.CTIms {
		ms += float64(d.TrialsPerCTI) * float64(c+d.ResponseWindowMs+d.ITIms)
	}
	return ms / 60000
}

// Assemble aggregates every shard's results into the report. The shard
// results may come in any order and may contain duplicates; the report
// depends only on their content.
func (c *Compiled) Assemble(results []*ShardResult) (*Report, error) {
	s := c.Study
	H := len(s.Hypotheses)
	want := 0 // one result per synthetic participant of every generator
	for _, d := range c.Designs {
		want += d.Participants * H
	}
	rs, err := c.sortResults(results, want)
	if err != nil {
		return nil, err
	}
	rep := &Report{Study: s.Name, Seed: s.Seed, Version: Version, Method: CurrentMethod(), StudyFile: s, Warnings: s.Warnings()}
	if rep.StudyHash, err = StudyHash(s); err != nil {
		return nil, err
	}
	if rep.Warnings == nil {
		rep.Warnings = []models.Problem{} // "warnings": [] rather than null
	}
	for _, h := range s.Hypotheses {
		rep.Hypotheses = append(rep.Hypotheses, h.Name)
		rep.Families = append(rep.Families, h.Family)
	}
	// byDesign[d][g] lists the participants of generator g, in order.
	byDesign := make([][][]ParticipantResult, len(c.Designs))
	for d := range byDesign {
		byDesign[d] = make([][]ParticipantResult, H)
	}
	for _, r := range rs {
		byDesign[r.Spec.Design][r.Spec.Generator] = append(byDesign[r.Spec.Design][r.Spec.Generator], r.Participants...)
	}
	rep.Fits = make([][]DatasetFits, len(c.Designs))
	samples := make([]rankSample, len(c.Designs))
	for di := range c.Designs {
		dr := c.designReport(di, byDesign[di])
		rep.Designs = append(rep.Designs, dr)
		for g := 0; g < H; g++ {
			for _, p := range byDesign[di][g] {
				rep.Fits[di] = append(rep.Fits[di], DatasetFits{Truth: p.Truth, Fits: p.Fits})
			}
		}
		samples[di] = newRankSample(dr.MinutesPerParticipant, byDesign[di])
	}
	if err := c.groupLevel(rep, byDesign); err != nil {
		return nil, err
	}
	rankDesigns(rep, s.Ranking, samples)
	return rep, nil
}

func (c *Compiled) designReport(di int, parts [][]ParticipantResult) DesignReport {
	s := c.Study
	d := &c.Designs[di]
	H := len(s.Hypotheses)
	dr := DesignReport{
		Name: d.Name, Measures: d.Measures, Participants: d.Participants,
		TrialsPerParticipant:  d.TrialsPerCTI * len(d.CTIms),
		MinutesPerParticipant: minutesPerParticipant(d),
		ITIms:                 d.ITIms,
		PrecisionSD:           d.Agent.PrecisionSD,
		Criteria:              map[Criterion]CriterionReport{},
		Surrogate:             c.Surrogate[di],
		Predictions:           c.Predictions[di],
		ParamRecovery:         []ParamRecoveryReport{},
		Tradeoffs:             []TradeoffReport{},
		Mimicry:               []MimicryReport{},
		Recovery:              []RecoveryPoints{},
	}
	dr.FitFailures.MaxTruthGap = NullFloat(math.NaN())
	for g := 0; g < H; g++ {
		for _, p := range parts[g] {
			for _, f := range p.Fits {
				dr.FitFailures.Total++
				if f.Failed {
					dr.FitFailures.Failed++
				} else if !f.Converged {
					dr.FitFailures.NotConverged++
				}
			}
			if g < len(p.Fits) && !math.IsNaN(p.Fits[g].TruthLogL) {
				f := p.Fits[g]
				dr.FitFailures.TruthChecked++
				gap := f.TruthLogL - f.LogL
				if f.Failed || gap > truthTolerance {
					dr.FitFailures.BelowTruth++
				}
				if !f.Failed && (math.IsNaN(float64(dr.FitFailures.MaxTruthGap)) || gap > float64(dr.FitFailures.MaxTruthGap)) {
					dr.FitFailures.MaxTruthGap = NullFloat(gap)
				}
			}
		}
	}
	for _, crit := range Criteria {
		winners := make([][][]float64, H)
		for g := 0; g < H; g++ {
			for _, p := range parts[g] {
				vals := make([]float64, H)
				for j := range p.Fits {
					vals[j] = crit.Of(&p.Fits[j])
				}
				sh, failed := WinShares(vals, TieTolerance)
				if failed && crit == BICCriterion {
					dr.FitFailures.NoWinner++
				}
				winners[g] = append(winners[g], sh)
			}
		}
		cf := NewConfusion(winners)
		dr.Criteria[crit] = CriterionReport{
			Confusion: numMatrix(cf.P), Counts: numMatrix(cf.Counts), CILow: numMatrix(cf.CILow), CIHigh: numMatrix(cf.CIHigh),
			Inversion: numMatrix(cf.Inversion), RecoveryRate: NullFloat(cf.RecoveryRate), MIBits: NullFloat(cf.MIBits), NormalizedMI: NullFloat(cf.NormalizedMI),
			Datasets: cf.N, Failures: cf.Failures,
		}
	}
	// Parameter recovery: each generator fitted by itself.
	for g, h := range s.Hypotheses {
		names := h.FreeParams()
		est := make([][]float64, 0, len(parts[g]))
		for pi, name := range names {
			var truth, e, se []float64
			var rel []bool
			for _, p := range parts[g] {
				f := p.Fits[g]
				truth = append(truth, p.Truth.Free[pi])
				if f.Failed {
					e, se, rel = append(e, math.NaN()), append(se, math.NaN()), append(rel, false)
					continue
				}
				e = append(e, f.Params[pi])
				se = append(se, f.SE[pi])
				rel = append(rel, f.SEReliable)
			}
			pr := RecoverParam(truth, e, se, rel)
			// Coverage of the 95% profile intervals over every participant:
			// a failed fit, or one without an interval, does not cover.
			covered := 0
			for _, p := range parts[g] {
				f := p.Fits[g]
				if !f.Failed && pi < len(f.Intervals) && f.Intervals[pi].Contains(p.Truth.Free[pi]) {
					covered++
				}
			}
			pr.Coverage = math.NaN()
			if len(parts[g]) > 0 {
				pr.Coverage = float64(covered) / float64(len(parts[g]))
			}
			var ivs []Interval
			for _, p := range parts[g] {
				if f := p.Fits[g]; !f.Failed && pi < len(f.Intervals) {
					ivs = append(ivs, f.Intervals[pi])
				} else {
					ivs = append(ivs, NoInterval())
				}
			}
			// Flatness is read from the size of every finite SE (reliable
			// or not): a step-sensitive SE still tells the scale of the
			// likelihood's width.
			var finite []float64
			reliable := 0
			for i, v := range se {
				if !math.IsNaN(v) && !math.IsInf(v, 0) {
					finite = append(finite, v)
					if rel[i] {
						reliable++
					}
				}
			}
			p := h.Params[name]
			medSE := median(finite)
			flat := FlatProfile(medSE, *p.Min, *p.Max)
			dr.ParamRecovery = append(dr.ParamRecovery, ParamRecoveryReport{
				Hypothesis: h.Name, Parameter: name, N: pr.N, R: NullFloat(pr.R), Bias: NullFloat(pr.Bias), RMSE: NullFloat(pr.RMSE),
				Slope: NullFloat(pr.Slope), Coverage: NullFloat(pr.Coverage), AtBound: NullFloat(AtBoundShare(e, *p.Min, *p.Max)),
				Flat: flat, MedianSE: NullFloat(medSE), ReliableSEs: reliable,
			})
			dr.Recovery = append(dr.Recovery, RecoveryPoints{Hypothesis: h.Name, Parameter: name, Min: NullFloat(*p.Min), Max: NullFloat(*p.Max), Truth: nums(truth), Estimate: nums(e), Intervals: ivs})
		}
		if len(names) >= 2 {
			for _, p := range parts[g] {
				f := p.Fits[g]
				if f.Failed {
					continue
				}
				est = append(est, f.Params)
			}
			for _, t := range Tradeoffs(h.Name, names, est) {
				dr.Tradeoffs = append(dr.Tradeoffs, TradeoffReport{Hypothesis: t.Hypothesis, A: t.A, B: t.B, R: NullFloat(t.R), N: t.N})
			}
		}
	}
	// Mimicry: ΔBIC = BIC_a − BIC_b on datasets of a and of b.
	for a := 0; a < H; a++ {
		for b := a + 1; b < H; b++ {
			delta := func(g int) []float64 {
				var out []float64
				for _, p := range parts[g] {
					fa, fb := p.Fits[a], p.Fits[b]
					if fa.Failed || fb.Failed {
						continue
					}
					out = append(out, fa.BIC-fb.BIC)
				}
				return out
			}
			m := MimicryPair(s.Hypotheses[a].Name, s.Hypotheses[b].Name, delta(a), delta(b))
			dr.Mimicry = append(dr.Mimicry, MimicryReport{A: m.A, B: m.B, WhenA: quantilesReport(m.WhenA), WhenB: quantilesReport(m.WhenB)})
		}
	}
	names := make([]string, H)
	for i, h := range s.Hypotheses {
		names[i] = h.Name
	}
	dr.Verdict = verdict(names, dr)
	return dr
}

// The verdict's thresholds, our choices, each stated in the prose it
// produces.
const (
	// pairConfusion: one direction of a pair, "A's data won by B" (the
	// share of A's synthetic participants whose lowest BIC is B's), is
	// clean when its 95% Wilson interval lies wholly below this share and
	// confused when it lies wholly at or above it.
	pairConfusion = 0.10
	// weakR, coverageLow/High and atBoundMax mark a parameter as poorly
	// recovered: Pearson r below weakR, coverage of its 95% intervals
	// outside [coverageLow, coverageHigh], or more than atBoundMax of its
	// estimates at an end of the range (AtBoundShare).
	weakR        = 0.8
	coverageLow  = 0.85
	coverageHigh = 0.99
	atBoundMax   = 0.10
)

// direction is the state of one direction of a pair of hypotheses.
type direction int

const (
	clean     direction = iota // 95% interval below pairConfusion
	unsettled                  // interval straddles pairConfusion
	confused                   // interval at or above pairConfusion
)

// pairClass groups the pairs of the verdict.
type pairClass int

const (
	toldApart pairClass = iota
	oneWayOnly
	unsettledPair
	notToldApart
)

// cell is one off-diagonal cell of the BIC confusion matrix: the share of
// the row generator's datasets won by the column candidate, with its 95%
// Wilson interval (the report's own CILow, CIHigh; the point itself when
// the report has no interval).
type cell struct{ p, lo, hi float64 }

func confusionCell(cr CriterionReport, i, j int) cell {
	at := func(m [][]NullFloat) (float64, bool) {
		if i < len(m) && j < len(m[i]) {
			return float64(m[i][j]), true
		}
		return math.NaN(), false
	}
	c := cell{}
	c.p, _ = at(cr.Confusion)
	lo, okLo := at(cr.CILow)
	hi, okHi := at(cr.CIHigh)
	if !okLo || !okHi {
		lo, hi = c.p, c.p
	}
	c.lo, c.hi = lo, hi
	return c
}

func (c cell) state() direction {
	switch {
	case c.hi < pairConfusion:
		return clean
	case c.lo >= pairConfusion:
		return confused
	}
	return unsettled // also when the share is NaN: the simulation does not say
}

// classify applies the pair rule: told apart when both directions are
// clean; not told apart when one is confused and the other is not clean;
// told apart one way only when one is clean and the other confused; and
// otherwise unsettled: an interval straddles the threshold, and more
// synthetic participants would be needed to say.
func classify(ab, ba direction) pairClass {
	switch {
	case ab == clean && ba == clean:
		return toldApart
	case (ab == confused && ba != clean) || (ba == confused && ab != clean):
		return notToldApart
	case ab == confused || ba == confused:
		return oneWayOnly
	}
	return unsettledPair
}

// pct writes a share as a whole percentage, keeping "0%" and "100%" for
// exact values.
func pct(x float64) string {
	switch {
	case math.IsNaN(x) || math.IsInf(x, 0):
		return "n/a"
	case x > 0 && x < 0.005:
		return "under 1%"
	case x < 1 && x > 0.995:
		return "over 99%"
	}
	return strconv.FormatFloat(100*x, 'f', 0, 64) + "%"
}

// pctRange writes a 95% interval of a share, "3–12%".
func pctRange(lo, hi float64) string {
	if math.IsNaN(lo) || math.IsNaN(hi) {
		return "n/a"
	}
	return strconv.FormatFloat(100*lo, 'f', 0, 64) + "–" + strconv.FormatFloat(100*hi, 'f', 0, 64) + "%"
}

// verdict states in plain words, under BIC, what the design tells apart:
// every pair of hypotheses with both directions of its confusion, grouped
// by the pair rule of classify (not told apart, one way only, unsettled,
// told apart, in that order), then every weakness the report records
// (poorly recovered parameters, grids over tolerance or with jumps,
// searches that ended below the truth, failed fits). names lists the
// hypotheses in the order of the confusion matrix.
func verdict(names []string, dr DesignReport) []string {
	cr := dr.Criteria[BICCriterion]
	H := len(names)
	out := []string{fmt.Sprintf("Under BIC this design recovers the generating hypothesis in %s of synthetic participants on average (normalised mutual information %s), with %d trials per participant and %d synthetic participants per hypothesis.",
		pct(float64(cr.RecoveryRate)), f2(cr.NormalizedMI), dr.TrialsPerParticipant, dr.Participants)}
	type pair struct {
		a, b   int
		ab, ba cell
	}
	groups := make([][]pair, notToldApart+1)
	for a := 0; a < H; a++ {
		for b := a + 1; b < H; b++ {
			p := pair{a: a, b: b, ab: confusionCell(cr, a, b), ba: confusionCell(cr, b, a)}
			k := classify(p.ab.state(), p.ba.state())
			groups[k] = append(groups[k], p)
		}
	}
	npairs := H * (H - 1) / 2
	if npairs == 0 {
		return out
	}
	out = append(out, fmt.Sprintf("Of the %d %s of hypotheses, under BIC %d %s told apart, %d only one way and %d not at all; for %d the %d synthetic participants per hypothesis do not settle it. "+
		"The rule: \"A's data won by B\" is the share of A's synthetic participants whose lowest BIC is B's; that direction is clean when its 95%% interval lies below %s, confused when the interval lies at or above %s; "+
		"a pair is told apart when both directions are clean, one way only when one is clean and the other confused, not at all when one is confused and the other not clean.",
		npairs, plural(npairs, "pair", "pairs"), len(groups[toldApart]), plural(len(groups[toldApart]), "is", "are"), len(groups[oneWayOnly]), len(groups[notToldApart]), len(groups[unsettledPair]),
		dr.Participants, pct(pairConfusion), pct(pairConfusion)))
	withCI := func(p pair) string {
		return fmt.Sprintf("under BIC, %s's data won by %s in %s (95%% interval %s); %s's data won by %s in %s (%s)",
			names[p.a], names[p.b], pct(p.ab.p), pctRange(p.ab.lo, p.ab.hi), names[p.b], names[p.a], pct(p.ba.p), pctRange(p.ba.lo, p.ba.hi))
	}
	for _, p := range groups[notToldApart] {
		out = append(out, "Not told apart: "+withCI(p)+".")
	}
	for _, p := range groups[oneWayOnly] {
		out = append(out, "Told apart one way only: "+withCI(p)+".")
	}
	for _, p := range groups[unsettledPair] {
		out = append(out, "Not settled: "+withCI(p)+".")
	}
	if g := groups[toldApart]; len(g) > 0 {
		var parts []string
		for _, p := range g {
			parts = append(parts, fmt.Sprintf("%s's data won by %s in %s and %s's data won by %s in %s",
				names[p.a], names[p.b], pct(p.ab.p), names[p.b], names[p.a], pct(p.ba.p)))
		}
		out = append(out, "Told apart, under BIC: "+strings.Join(parts, "; ")+".")
	}
	out = append(out, weaknesses(dr)...)
	return out
}

func plural(n int, one, many string) string {
	if n == 1 {
		return one
	}
	return many
}

// weaknesses lists what the report records against its own figures: each
// poorly recovered parameter (r, coverage, estimates at a bound, a flat
// profile), each grid over tolerance or with jumps, searches that ended
// below the truth, failed fits and datasets without a winner.
func weaknesses(dr DesignReport) []string {
	var out []string
	for _, p := range dr.ParamRecovery {
		var why []string
		r, cov, at := float64(p.R), float64(p.Coverage), float64(p.AtBound)
		switch {
		case math.IsNaN(r):
			why = append(why, fmt.Sprintf("r cannot be computed (%d usable %s)", p.N, plural(p.N, "estimate", "estimates")))
		case r < weakR:
			why = append(why, fmt.Sprintf("r = %s between truth and estimate (want %s or more)", f2(p.R), f2(weakR)))
		}
		switch {
		case math.IsNaN(cov):
			why = append(why, "no profile interval, so the coverage of its intervals is unknown")
		case cov < coverageLow || cov > coverageHigh:
			why = append(why, fmt.Sprintf("its 95%% profile intervals hold the true value in %s of the participants (want %s)",
				pct(cov), pctRange(coverageLow, coverageHigh)))
		}
		if at > atBoundMax {
			why = append(why, fmt.Sprintf("%s of its estimates end at an end of its range (want %s or fewer)", pct(at), pct(atBoundMax)))
		}
		if p.Flat {
			why = append(why, fmt.Sprintf("its median SE, %s, is more than a quarter of its range", strconv.FormatFloat(float64(p.MedianSE), 'g', 3, 64)))
		}
		if len(why) > 0 {
			out = append(out, fmt.Sprintf("Parameter %s of %s is poorly recovered: %s.", p.Parameter, p.Hypothesis, strings.Join(why, "; ")))
		}
	}
	for _, e := range dr.Surrogate {
		if e.OverTolerance {
			worst := e.LogLikError
			if e.SmoothError > 0 {
				worst = e.SmoothError
			}
			out = append(out, fmt.Sprintf("The prediction grid of %s is over tolerance: interpolation moves ln L by up to %s for a typical dataset even after refinement, so searches on it can settle on the wrong optimum.",
				e.Hypothesis, strconv.FormatFloat(worst, 'g', 3, 64)))
		}
		if e.Jumps {
			at := ""
			if len(e.JumpsAt) > 0 {
				var vs []string
				for _, v := range e.JumpsAt {
					vs = append(vs, strconv.FormatFloat(v, 'g', 3, 64))
				}
				name, n := "its parameter", 0
				for _, p := range dr.ParamRecovery {
					if p.Hypothesis == e.Hypothesis {
						name, n = p.Parameter, n+1
					}
				}
				if n != 1 {
					name = "its parameter"
				}
				at = fmt.Sprintf(" at %s = %s", name, strings.Join(vs, ", "))
			}
			if len(e.JumpPoints) > 0 {
				var names []string
				for k := range e.JumpPoints[0] {
					names = append(names, k)
				}
				sort.Strings(names)
				var vs []string
				for _, k := range names {
					vs = append(vs, k+" = "+strconv.FormatFloat(e.JumpPoints[0][k], 'g', 3, 64))
				}
				at = fmt.Sprintf(" near %d of the %d points where its grid was checked, for example at %s", len(e.JumpPoints), e.Points, strings.Join(vs, ", "))
			}
			out = append(out, fmt.Sprintf("The exact predictions of %s jump%s (an invalid trial flips between a recovered and a misdirected report; across a jump ln L moves by up to %s for a typical dataset); no grid closes that gap, so fits of %s near a jump are less certain than these figures say.",
				e.Hypothesis, at, strconv.FormatFloat(e.LogLikError, 'g', 3, 64), e.Hypothesis))
		}
	}
	ff := dr.FitFailures
	if ff.BelowTruth > 0 {
		out = append(out, fmt.Sprintf("In %d of %d self-fits the search ended below the ln L of the generating parameters (by up to %s): those fits are not maximum-likelihood fits, so the figures above carry search error as well as the design's own.",
			ff.BelowTruth, ff.TruthChecked, strconv.FormatFloat(float64(ff.MaxTruthGap), 'g', 3, 64)))
	}
	if ff.Failed > 0 {
		out = append(out, fmt.Sprintf("%d of %d fits failed (no finite likelihood); a failed fit never wins a dataset.", ff.Failed, ff.Total))
	}
	if ff.NoWinner > 0 {
		out = append(out, fmt.Sprintf("%d datasets had no BIC winner and are left out of the confusion matrix.", ff.NoWinner))
	}
	return out
}

// JSON encodes the report, indented, with a final newline.
func (r *Report) JSON() ([]byte, error) {
	var buf bytes.Buffer
	enc := json.NewEncoder(&buf)
	enc.SetIndent("", "  ")
	if err := enc.Encode(r); err != nil {
		return nil, err
	}
	return buf.Bytes(), nil
}
