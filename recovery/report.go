package recovery

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"math"
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
	Study      string          `json:"study"`
	Seed       uint64          `json:"seed"`
	Version    string          `json:"version"`
	Hypotheses []string        `json:"hypotheses"`
	Families   []string        `json:"families"`
	Designs    []DesignReport  `json:"designs"`
	Ranking    []DesignRank    `json:"design_ranking,omitempty"`
	Preferred  string          `json:"preferred_design,omitempty"`
	Verdict    string          `json:"ranking_verdict,omitempty"`
	Method     Method          `json:"method"`
	Timing     Timing          `json:"timing"`
	StudyFile  *models.Study   `json:"study_file"`
	Fits       [][]DatasetFits `json:"-"` // per design: per-dataset fits, for fits.csv
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

// DesignRank is one row of the design ranking (model.md §8).
type DesignRank struct {
	Design                string    `json:"design"`
	Rank                  int       `json:"rank"`
	NormalizedMI          NullFloat `json:"normalized_mi"`
	WorstDiagonal         NullFloat `json:"worst_diagonal"`
	ParameterR            NullFloat `json:"parameter_r"`
	TrialsPerParticipant  int       `json:"trials_per_participant"`
	MinutesPerParticipant float64   `json:"minutes_per_participant"`
	NormalizedMIPerMinute NullFloat `json:"normalized_mi_per_minute"`
}

func quantilesReport(q Quantiles) QuantilesReport {
	return QuantilesReport{N: q.N, Mean: NullFloat(q.Mean), Q05: NullFloat(q.Q05), Q25: NullFloat(q.Q25), Q50: NullFloat(q.Q50), Q75: NullFloat(q.Q75), Q95: NullFloat(q.Q95)}
}

// itiMs is the inter-trial interval that testing time assumes (our
// assumption, stated in the report).
const itiMs = 1000

// minutesPerParticipant estimates testing time: each trial lasts its CTI,
// the response window and an inter-trial interval of itiMs.
func minutesPerParticipant(d *models.Design) float64 {
	ms := 0.0
	for _, c := range d.CTIms {
		ms += float64(d.TrialsPerCTI) * float64(c+d.ResponseWindowMs+itiMs)
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
	rep := &Report{Study: s.Name, Seed: s.Seed, Version: Version, Method: CurrentMethod(), StudyFile: s}
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
	for di := range c.Designs {
		d := &c.Designs[di]
		dr := c.designReport(di, byDesign[di])
		rep.Designs = append(rep.Designs, dr)
		for g := 0; g < H; g++ {
			for _, p := range byDesign[di][g] {
				rep.Fits[di] = append(rep.Fits[di], DatasetFits{Truth: p.Truth, Fits: p.Fits})
			}
		}
		_ = d
	}
	if err := c.groupLevel(rep, byDesign); err != nil {
		return nil, err
	}
	rankDesigns(rep)
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
				Slope: NullFloat(pr.Slope), Coverage: NullFloat(pr.Coverage), Flat: flat, MedianSE: NullFloat(medSE), ReliableSEs: reliable,
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
	dr.Verdict = verdict(s, d, dr)
	return dr
}

// verdict states in plain words what the design can and cannot tell apart
// under BIC: a pair is told apart when each is recovered as itself at least
// 80% of the time and mistaken for the other less than 10% of the time.
func verdict(s *models.Study, d *models.Design, dr DesignReport) []string {
	cr := dr.Criteria[BICCriterion]
	H := len(s.Hypotheses)
	var apart, confused []string
	for a := 0; a < H; a++ {
		for b := a + 1; b < H; b++ {
			pab, pba := float64(cr.Confusion[a][b]), float64(cr.Confusion[b][a])
			paa, pbb := float64(cr.Confusion[a][a]), float64(cr.Confusion[b][b])
			pair := s.Hypotheses[a].Name + " and " + s.Hypotheses[b].Name
			switch {
			case paa >= 0.8 && pbb >= 0.8 && pab < 0.1 && pba < 0.1:
				apart = append(apart, pair)
			case pab >= 0.2 || pba >= 0.2:
				confused = append(confused, fmt.Sprintf("%s (mistaken for each other in %.0f%% and %.0f%% of datasets)", pair, 100*pab, 100*pba))
			}
		}
	}
	var out []string
	out = append(out, fmt.Sprintf("Under BIC this design recovers the generating hypothesis in %.0f%% of synthetic participants on average (normalised mutual information %.2f).",
		100*float64(cr.RecoveryRate), float64(cr.NormalizedMI)))
	if len(apart) > 0 {
		out = append(out, fmt.Sprintf("It can tell apart %d of %d pairs, for example %s.", len(apart), H*(H-1)/2, apart[0]))
	}
	for _, c := range confused {
		out = append(out, "It cannot reliably tell apart "+c+" at "+strconv.Itoa(d.TrialsPerCTI*len(d.CTIms))+" trials per participant.")
	}
	for _, p := range dr.ParamRecovery {
		if p.Flat {
			out = append(out, fmt.Sprintf("Parameter %s of %s is poorly identified (median SE %.3g, more than a quarter of its range; r = %.2f).", p.Parameter, p.Hypothesis, float64(p.MedianSE), float64(p.R)))
		}
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

// FitsCSV writes one tidy row per dataset × candidate.
func (r *Report) FitsCSV() ([]byte, error) {
	var buf bytes.Buffer
	w := csv.NewWriter(&buf)
	w.Write([]string{"design", "generator", "participant", "candidate", "parameter_names", "estimates", "standard_errors", "se_reliable",
		"true_values", "loglik", "k", "n", "aic", "aicc", "bic", "converged", "status", "evaluations", "failed",
		"rt_base", "rt_scale", "rt_sd", "lapse", "eeg_offset", "eeg_gain", "eeg_sd", "eeg_ar",
		"interval_low", "interval_high", "interval_open_low", "interval_open_high", "interval_pieces", "truth_loglik", "polished"})
	g := func(v float64) string {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return "NA"
		}
		return strconv.FormatFloat(v, 'g', 10, 64)
	}
	join := func(x []float64) string {
		s := ""
		for i, v := range x {
			if i > 0 {
				s += ";"
			}
			s += g(v)
		}
		return s
	}
	names := func(x []string) string {
		s := ""
		for i, v := range x {
			if i > 0 {
				s += ";"
			}
			s += v
		}
		return s
	}
	for _, design := range r.Fits {
		for _, grp := range design {
			for _, f := range grp.Fits {
				truth := ""
				if f.Candidate == f.Generator {
					truth = join(grp.Truth.Free)
				}
				m := f.Measurement
				var lo, hi, ol, oh, pcs []string
				for _, iv := range f.Intervals {
					lo, hi = append(lo, g(float64(iv.Low))), append(hi, g(float64(iv.High)))
					ol, oh = append(ol, strconv.FormatBool(iv.OpenLow)), append(oh, strconv.FormatBool(iv.OpenHigh))
					var ps []string
					for _, p := range iv.Pieces {
						ps = append(ps, g(float64(p[0]))+".."+g(float64(p[1])))
					}
					pcs = append(pcs, strings.Join(ps, "|"))
				}
				w.Write([]string{f.Design, f.Generator, strconv.Itoa(f.Participant), f.Candidate, names(f.Names), join(f.Params), join(f.SE),
					strconv.FormatBool(f.SEReliable), truth, g(f.LogL), strconv.Itoa(f.K), strconv.Itoa(f.N), g(f.AIC), g(f.AICc), g(f.BIC),
					strconv.FormatBool(f.Converged), f.Status, strconv.Itoa(f.Evaluations), strconv.FormatBool(f.Failed),
					g(m.RTBase), g(m.RTScale), g(m.RTSD), g(m.Lapse), g(m.EEGOffset), g(m.EEGGain), g(m.EEGSD), g(m.EEGAR),
					strings.Join(lo, ";"), strings.Join(hi, ";"), strings.Join(ol, ";"), strings.Join(oh, ";"), strings.Join(pcs, ";"), g(f.TruthLogL), strconv.FormatBool(f.Polished)})
			}
		}
	}
	w.Flush()
	return buf.Bytes(), w.Error()
}
