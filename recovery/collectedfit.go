package recovery

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"runtime"
	"strings"
	"time"

	"discrimen/internal/parallel"
	"discrimen/models"
)

// StudyHash is the SHA-256 of the study's canonical JSON (the study as
// loaded, defaults filled, marshalled as report.json's study_file holds
// it), written "sha256:HEX". A recovery report carries it so that a fit of
// collected data can refuse the report of another study.
func StudyHash(s *models.Study) (string, error) {
	b, err := json.Marshal(s)
	if err != nil {
		return "", err
	}
	sum := sha256.Sum256(b)
	return "sha256:" + hex.EncodeToString(sum[:]), nil
}

// CollectedFit is the fit of collected data (fit.json): every hypothesis
// of the study fitted to every participant of one design, the group-level
// model selection, the posterior predictive checks and, with a recovery
// report of the same study, how often the study found each winner to be
// the true hypothesis.
type CollectedFit struct {
	Study        string           `json:"study"`
	StudyHash    string           `json:"study_hash"`
	Version      string           `json:"version"`
	Design       string           `json:"design"`
	Measures     []string         `json:"measures"`
	TrialsFile   string           `json:"trials_file"`
	EEGFile      string           `json:"eeg_file,omitempty"`
	Hypotheses   []string         `json:"hypotheses"`
	Participants []ParticipantFit `json:"participants"`
	Group        *GroupFit        `json:"group"`
	Recovery     *RecoveryBridge  `json:"recovery,omitempty"`
	// GridHealth is each candidate's prediction grid measured against
	// exact predictions on this design (the report's Fit health): where
	// the predictions jump, fits near the jump are less certain.
	GridHealth []SurrogateError    `json:"grid_health"`
	Method     Method              `json:"method"`
	Notes      []string            `json:"notes"`
	Timing     CollectedFitTiming  `json:"timing"`
	cands      []models.Hypothesis // the candidates, in study order
}

// CollectedFitTiming is the only part of fit.json that changes between
// runs of the same inputs.
type CollectedFitTiming struct {
	GridSeconds  float64 `json:"grid_seconds"`
	FitSeconds   float64 `json:"fit_seconds"`
	TotalSeconds float64 `json:"total_seconds"`
	Workers      int     `json:"workers"`
}

// ParticipantFit is one participant's fits. Winner lists, per criterion,
// the candidates that share the win (within TieTolerance of the smallest
// value); it is empty when no fit is finite.
type ParticipantFit struct {
	Participant string                 `json:"participant"`
	Trials      int                    `json:"trials"`
	EEG         bool                   `json:"eeg"`
	Winner      map[Criterion][]string `json:"winner"`
	Fits        []CandidateFit         `json:"fits"`
	Check       *PredictiveCheck       `json:"check"`
	// TrueGivenWinner is, with a recovery report, P(true | winner) of the
	// BIC winner from the design's BIC inversion matrix (NA for a tie).
	TrueGivenWinner *NullFloat `json:"p_true_given_winner,omitempty"`
}

// CandidateFit is one candidate fitted to one participant.
type CandidateFit struct {
	Candidate   string                   `json:"candidate"`
	LogL        NullFloat                `json:"logl"`
	K           int                      `json:"k"`
	N           int                      `json:"n"`
	AIC         NullFloat                `json:"aic"`
	AICc        NullFloat                `json:"aicc"`
	BIC         NullFloat                `json:"bic"`
	Params      map[string]ParamEstimate `json:"params"`
	Measurement map[string]NullFloat     `json:"measurement"`
	Converged   bool                     `json:"converged"`
	Failed      bool                     `json:"failed"`
	Error       string                   `json:"error,omitempty"`
}

// ParamEstimate is an estimate with its 95% profile-likelihood interval
// and, as a secondary figure, its grid-Hessian standard error (NA where
// the Hessian failed its checks, SEReliable false).
type ParamEstimate struct {
	Estimate   NullFloat `json:"estimate"`
	Interval   Interval  `json:"interval"`
	SE         NullFloat `json:"se"`
	SEReliable bool      `json:"se_reliable"`
}

// GroupFit is random-effects Bayesian model selection over the
// participants (BMSQuadrature on ln evidence ≈ −BIC/2), keyed by
// hypothesis, with each criterion's win counts beside it.
type GroupFit struct {
	Participants        int                                `json:"participants"`
	Excluded            []string                           `json:"excluded"`
	ExpectedFrequencies map[string]NullFloat               `json:"expected_frequencies"`
	Exceedance          map[string]NullFloat               `json:"exceedance"`
	ProtectedExceedance map[string]NullFloat               `json:"protected_exceedance"`
	OmnibusRisk         NullFloat                          `json:"omnibus_risk"`
	Converged           bool                               `json:"converged"`
	Threshold           float64                            `json:"pxp_threshold"`
	Leader              string                             `json:"leader"`
	Verdict             string                             `json:"verdict"`
	Wins                map[Criterion]map[string]NullFloat `json:"wins"`
	// Verdicts holds one sentence per criterion (the most frequent
	// single-participant winner) and the BMS one, each with the recovery
	// report's P(true | winner) when one was given.
	Verdicts []string `json:"verdicts"`
	result   BMSResult
}

// PredictiveCheck compares a participant's data with the predictions of
// the participant's BIC winner at its estimates (the first of a tie).
type PredictiveCheck struct {
	Candidate string      `json:"candidate"`
	Cells     []CheckCell `json:"cells"`
	Misfit    Misfit      `json:"misfit"`
}

// CheckCell is one condition's observed and predicted figure:
//
//	rt:          mean RT of target reports; predicted rt_base + rt_scale·RT_model; sd rt_sd/√n
//	accuracy:    share of target reports; predicted (1−lapse)·acc + lapse/V; sd √(p(1−p)/n)
//	misdirected: share of cued reports on invalid trials, likewise
//	neural:      mean of the CTI's bins; predicted eeg_offset + eeg_gain·mean(e_b);
//	             sd of the mean of an AR(1) series, eeg_sd·√(Σ_ij ρ^|i−j|)/n
//
// and z = (observed − predicted)/sd.
type CheckCell struct {
	CTIms     int       `json:"cti_ms"`
	Cue       string    `json:"cue"`
	Measure   string    `json:"measure"`
	N         int       `json:"n"`
	Observed  NullFloat `json:"observed"`
	Predicted NullFloat `json:"predicted"`
	Z         NullFloat `json:"z"`
}

// Misfit summarises a check: how many cells lie more than 2 standard
// errors from the prediction (about 5% of them would by chance alone if
// the winner made the data) and the largest |z|.
type Misfit struct {
	Cells   int       `json:"cells"`
	Over2   int       `json:"over_2"`
	MaxAbsZ NullFloat `json:"max_abs_z"`
	Worst   string    `json:"worst"`
	Summary string    `json:"summary"`
}

// RecoveryBridge ties the fit to the recovery report of the same study
// and design: P(true | winner) from the design's inversion matrices.
type RecoveryBridge struct {
	Version          string                             `json:"version"`
	StudyHash        string                             `json:"study_hash"`
	TrueGivenWinner  map[Criterion]map[string]NullFloat `json:"p_true_given_winner"`
	ReportedDatasets int                                `json:"datasets_per_generator"`
}

// recoveryReportHead is the part of report.json the bridge reads.
type recoveryReportHead struct {
	Study     string `json:"study"`
	Version   string `json:"version"`
	StudyHash string `json:"study_hash"`
	Designs   []struct {
		Name         string                        `json:"name"`
		Participants int                           `json:"participants"`
		Criteria     map[Criterion]CriterionReport `json:"criteria"`
	} `json:"designs"`
	Hypotheses []string `json:"hypotheses"`
}

// ReadRecoveryReport reads the bridge from a recovery report (report.json)
// of study s and design: it refuses a report of another study (another
// study hash), one without a hash (an older release) and one without the
// design.
func ReadRecoveryReport(data []byte, s *models.Study, design string) (*RecoveryBridge, error) {
	var head recoveryReportHead
	if err := json.Unmarshal(data, &head); err != nil {
		return nil, fmt.Errorf("the recovery report is not a report.json: %v", err)
	}
	want, err := StudyHash(s)
	if err != nil {
		return nil, err
	}
	if head.StudyHash == "" {
		return nil, fmt.Errorf("the recovery report (discrimen %s) has no study_hash; run the study again with this release", head.Version)
	}
	if head.StudyHash != want {
		return nil, fmt.Errorf("the recovery report is of another study (%q, study_hash %s; this study's is %s); give the report of this study file", head.Study, head.StudyHash, want)
	}
	for _, d := range head.Designs {
		if d.Name != design {
			continue
		}
		b := &RecoveryBridge{Version: head.Version, StudyHash: head.StudyHash, TrueGivenWinner: map[Criterion]map[string]NullFloat{}, ReportedDatasets: d.Participants}
		for _, c := range Criteria {
			cr, ok := d.Criteria[c]
			if !ok || len(cr.Inversion) != len(head.Hypotheses) {
				return nil, fmt.Errorf("the recovery report's design %q has no %s inversion matrix", design, c.Label())
			}
			m := map[string]NullFloat{}
			for j, h := range head.Hypotheses {
				m[h] = cr.Inversion[j][j]
			}
			b.TrueGivenWinner[c] = m
		}
		return b, nil
	}
	return nil, fmt.Errorf("the recovery report has no design %q", design)
}

// FitOptions configure FitCollected.
type FitOptions struct {
	Workers int // goroutines (0 = all cores)
	// Recovery is the bridge to the study's recovery report, or nil.
	Recovery *RecoveryBridge
}

// FitCollected compiles the design's prediction grids and fits the data.
func FitCollected(ctx context.Context, s *models.Study, data *Collected, opt FitOptions) (*CollectedFit, error) {
	workers := opt.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	start := time.Now()
	c, err := CompileDesign(ctx, s, data.Design, workers)
	if err != nil {
		return nil, err
	}
	out, err := c.FitCollected(ctx, data, opt)
	if err != nil {
		return nil, err
	}
	out.Timing.GridSeconds = c.GridSeconds
	out.Timing.TotalSeconds = time.Since(start).Seconds()
	return out, nil
}

// FitCollected fits every candidate to every participant of data, which
// must be of one of c's designs, with the recovery engine's fitter: the
// same likelihood, grid search, exact polish and profile intervals.
// Every candidate's estimates and intervals are reported, so every
// candidate is finished as the engine finishes a self-fit (the deep
// polish, the grid-Hessian SEs and the profile intervals): a
// participant's fit of candidate H is then the one `run` makes when H
// generated the participant. It is FitBlock over every participant and
// AssembleFit; a queue can run the blocks apart and assemble them later.
func (c *Compiled) FitCollected(ctx context.Context, data *Collected, opt FitOptions) (*CollectedFit, error) {
	start := time.Now()
	parts, err := c.FitBlock(ctx, data, 0, len(data.Participants), opt.Workers)
	if err != nil {
		return nil, err
	}
	out, err := c.AssembleFit(data, parts, opt.Recovery)
	if err != nil {
		return nil, err
	}
	out.Timing.FitSeconds = time.Since(start).Seconds()
	workers := opt.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	out.Timing.Workers = max(1, min(workers, len(data.Participants)))
	return out, nil
}

func (c *Compiled) designIndex(name string) (int, error) {
	for i := range c.Designs {
		if c.Designs[i].Name == name {
			return i, nil
		}
	}
	return -1, fmt.Errorf("recovery: the data are of design %q, not compiled", name)
}

// FitBlock fits participants [from, to) of data with workers goroutines
// (0 = all cores). A participant's result depends only on its own data,
// so blocks fitted apart, in any order, assemble to the same fit.
func (c *Compiled) FitBlock(ctx context.Context, data *Collected, from, to, workers int) ([]ParticipantFit, error) {
	di, err := c.designIndex(data.Design)
	if err != nil {
		return nil, err
	}
	if from < 0 || to > len(data.Participants) || from >= to {
		return nil, fmt.Errorf("recovery: FitBlock: block [%d, %d) of %d participants", from, to, len(data.Participants))
	}
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	d := &c.Designs[di]
	n := to - from
	out := make([]ParticipantFit, n)
	w := max(1, min(workers, n))
	fitters := make([][]*fitter, w)
	for i := range fitters {
		for _, g := range c.grids[di] {
			fitters[i] = append(fitters[i], newFitter(g))
		}
	}
	err = parallel.For(ctx, n, w, func(wi, i int) error {
		p := from + i
		cp := &data.Participants[p]
		sum := summariseCollected(d, cp)
		fs := fitters[wi]
		fits := make([]Fit, len(fs))
		for j, f := range fs {
			fits[j] = f.fit(sum)
			fits[j].Design, fits[j].Participant = d.Name, p
			fits[j].TruthLogL = math.NaN()
			f.polish(sum, &fits[j], true)
			f.finishSelf(sum, &fits[j])
		}
		out[i] = participantFit(d, cp, fits, fs, sum)
		return nil
	})
	if ctx.Err() != nil {
		return nil, fmt.Errorf("%w: %v", ErrCanceled, ctx.Err())
	}
	if err != nil {
		return nil, err
	}
	return out, nil
}

// AssembleFit puts the fitted participants of data, in data's order, into
// one fit: the group level, the notes and, with a recovery bridge, P(true
// | winner) beside each verdict.
func (c *Compiled) AssembleFit(data *Collected, parts []ParticipantFit, bridge *RecoveryBridge) (*CollectedFit, error) {
	di, err := c.designIndex(data.Design)
	if err != nil {
		return nil, err
	}
	if len(parts) == 0 {
		return nil, errors.New("recovery: AssembleFit: no participants")
	}
	if len(parts) != len(data.Participants) {
		return nil, fmt.Errorf("recovery: AssembleFit: %d fitted participants, the data have %d", len(parts), len(data.Participants))
	}
	d := &c.Designs[di]
	hash, err := StudyHash(c.Study)
	if err != nil {
		return nil, err
	}
	out := &CollectedFit{
		Study: c.Study.Name, StudyHash: hash, Version: Version, Design: d.Name, Measures: d.Measures,
		TrialsFile: data.TrialsFile, EEGFile: data.EEGFile, Method: CurrentMethod(), Recovery: bridge,
		Participants: parts, cands: c.Study.Hypotheses, GridHealth: c.Surrogate[di],
	}
	for _, h := range c.Study.Hypotheses {
		out.Hypotheses = append(out.Hypotheses, h.Name)
	}
	for i := range out.Participants {
		pf := &out.Participants[i]
		if pf.Participant != data.Participants[i].Label || len(pf.Fits) != len(out.Hypotheses) {
			return nil, fmt.Errorf("recovery: AssembleFit: participant %d is %q with %d fits, want %q with %d", i, pf.Participant, len(pf.Fits), data.Participants[i].Label, len(out.Hypotheses))
		}
		pf.TrueGivenWinner = nil
		if w := pf.Winner[BICCriterion]; bridge != nil && len(w) > 0 {
			v := NullFloat(math.NaN())
			if len(w) == 1 {
				v = bridge.TrueGivenWinner[BICCriterion][w[0]]
			}
			pf.TrueGivenWinner = &v
		}
	}
	out.Group = groupFit(out, c.Study.Replication.PXPThreshold)
	out.Notes = collectedNotes(d, out)
	return out, nil
}

// finishSelf gives a polished fit what RunShard gives a self-fit: the
// grid-Hessian standard errors and the profile-likelihood intervals.
func (f *fitter) finishSelf(sum *sufficientStats, fit *Fit) {
	if fit.Failed {
		return
	}
	sp := newSpace(f.grid, sum)
	th := thetaOf(sp, fit)
	if sp.totalDims > 0 {
		fit.SE, fit.SEReliable, fit.SENote = f.standardErrors(sum, sp, th)
	}
	fit.Intervals = f.profileIntervals(sum, sp, th, -fit.LogL)
}

// winners lists, per criterion, the candidates sharing the win.
func winners(fits []Fit) map[Criterion][]string {
	out := map[Criterion][]string{}
	vals := make([]float64, len(fits))
	for _, c := range Criteria {
		for j := range fits {
			vals[j] = c.Of(&fits[j])
		}
		shares, failed := WinShares(vals, TieTolerance)
		list := []string{}
		if !failed {
			for j, s := range shares {
				if s > 0 {
					list = append(list, fits[j].Candidate)
				}
			}
		}
		out[c] = list
	}
	return out
}

// criterionOf is c's value of a candidate fit, NaN for a failed one.
func criterionOf(c Criterion, f *CandidateFit) float64 {
	if f.Failed {
		return math.NaN()
	}
	switch c {
	case BICCriterion:
		return float64(f.BIC)
	case AICCriterion:
		return float64(f.AIC)
	case AICcCriterion:
		return float64(f.AICc)
	}
	panic(fmt.Sprintf("recovery: unknown criterion %q", string(c)))
}

func participantFit(d *models.Design, cp *CollectedParticipant, fits []Fit, fs []*fitter, sum *sufficientStats) ParticipantFit {
	pf := ParticipantFit{Participant: cp.Label, Trials: len(cp.Trials), EEG: cp.EEG != nil, Winner: winners(fits)}
	for j := range fits {
		f := &fits[j]
		cf := CandidateFit{Candidate: f.Candidate, LogL: NullFloat(f.LogL), K: f.K, N: f.N, AIC: NullFloat(f.AIC), AICc: NullFloat(f.AICc), BIC: NullFloat(f.BIC),
			Params: map[string]ParamEstimate{}, Measurement: map[string]NullFloat{}, Converged: f.Converged, Failed: f.Failed, Error: f.Error}
		for i, name := range fs[j].grid.Names {
			pe := ParamEstimate{Estimate: NullFloat(math.NaN()), Interval: NoInterval(), SE: NullFloat(math.NaN())}
			if !f.Failed {
				pe.Estimate = NullFloat(f.Params[i])
				if i < len(f.Intervals) {
					pe.Interval = f.Intervals[i]
				}
				if i < len(f.SE) {
					pe.SE, pe.SEReliable = NullFloat(f.SE[i]), f.SEReliable
				}
			}
			cf.Params[name] = pe
		}
		for _, t := range designTerms(d) {
			v := math.NaN()
			if !f.Failed {
				v = t.of(&f.Measurement)
			}
			cf.Measurement[t.name] = NullFloat(v)
		}
		pf.Fits = append(pf.Fits, cf)
	}
	if w := pf.Winner[BICCriterion]; len(w) > 0 {
		for j := range fits {
			if fits[j].Candidate == w[0] {
				pf.Check = predictiveCheck(d, cp, &fits[j], fs[j], sum)
			}
		}
	}
	return pf
}

// predictiveCheck compares the data with the fit's exact predictions.
func predictiveCheck(d *models.Design, cp *CollectedParticipant, fit *Fit, f *fitter, sum *sufficientStats) *PredictiveCheck {
	pr := f.grid.listener.NewPrediction()
	pred := make([]float64, f.grid.lay.size())
	f.grid.exactInto(fit.Params, pred, f.ws, pr)
	m := fit.Measurement
	V := float64(d.Items)
	ch := &PredictiveCheck{Candidate: fit.Candidate}
	add := func(cti int, cue, measure string, n int, obs, p, sd float64) {
		z := math.NaN()
		if sd > 0 && !math.IsNaN(obs) {
			z = (obs - p) / sd
		}
		ch.Cells = append(ch.Cells, CheckCell{CTIms: cti, Cue: cue, Measure: measure, N: n, Observed: NullFloat(obs), Predicted: NullFloat(p), Z: NullFloat(z)})
	}
	for c, cti := range d.CTIms {
		for k, cue := range []string{"valid", "invalid"} {
			cls := &pr.Valid
			if k == 1 {
				cls = &pr.Invalid
			}
			n := sum.nT[k][c] + sum.nC[k][c] + sum.nO[k][c]
			if sum.measRT && sum.rtN[k][c] > 0 {
				add(cti, cue, "rt", int(sum.rtN[k][c]), sum.rtMean[k][c], m.RTBase+m.RTScale*cls.RTms[c], m.RTSD/math.Sqrt(sum.rtN[k][c]))
			}
			if sum.measAcc && n > 0 {
				p := (1-m.Lapse)*cls.Accuracy[c] + m.Lapse/V
				add(cti, cue, "accuracy", int(n), sum.nT[k][c]/n, p, binomialSD(p, n))
				if k == 1 {
					q := (1-m.Lapse)*cls.Misdirected[c] + m.Lapse/V
					add(cti, cue, "misdirected", int(n), sum.nC[k][c]/n, q, binomialSD(q, n))
				}
			}
		}
		if sum.measEEG && cp.EEG != nil {
			bins := pr.Neural[c]
			var obs, e float64
			for b, y := range cp.EEG[c] {
				obs += y
				e += bins[b]
			}
			nb := float64(len(bins))
			add(cti, "", "neural", len(bins), obs/nb, m.EEGOffset+m.EEGGain*e/nb, m.EEGSD*math.Sqrt(ar1SumCorr(m.EEGAR, len(bins)))/nb)
		}
	}
	ms := &ch.Misfit
	worst := -1.0
	for _, cell := range ch.Cells {
		z := math.Abs(float64(cell.Z))
		if math.IsNaN(z) {
			continue
		}
		ms.Cells++
		if z > 2 {
			ms.Over2++
		}
		if z > worst {
			worst = z
			ms.Worst = cellName(cell)
		}
	}
	ms.MaxAbsZ = NullFloat(math.NaN())
	if worst >= 0 {
		ms.MaxAbsZ = NullFloat(worst)
	}
	ms.Summary = fmt.Sprintf("%d of %d cells lie more than 2 standard errors from %s's predictions (about %.1f would by chance if %s made the data); the largest |z| is %.2f (%s)",
		ms.Over2, ms.Cells, fit.Candidate, 0.0455*float64(ms.Cells), fit.Candidate, worst, ms.Worst)
	return ch
}

func cellName(c CheckCell) string {
	if c.Cue == "" {
		return fmt.Sprintf("%s at CTI %d ms", c.Measure, c.CTIms)
	}
	return fmt.Sprintf("%s, %s trials, CTI %d ms", c.Measure, c.Cue, c.CTIms)
}

// binomialSD is √(p(1−p)/n), with p kept inside [1e-9, 1−1e-9] as the
// likelihood floors its probabilities.
func binomialSD(p, n float64) float64 {
	p = math.Max(1e-9, math.Min(1-1e-9, p))
	return math.Sqrt(p * (1 - p) / n)
}

// ar1SumCorr is Σ_ij ρ^|i−j| over n points of a stationary AR(1) series:
// the variance of their sum over the marginal variance.
func ar1SumCorr(rho float64, n int) float64 {
	s := float64(n)
	pk := 1.0
	for k := 1; k < n; k++ {
		pk *= rho
		s += 2 * float64(n-k) * pk
	}
	return s
}

// groupFit runs BMSQuadrature on ln evidence −BIC/2 of the participants
// whose every fit is finite.
func groupFit(out *CollectedFit, threshold float64) *GroupFit {
	g := &GroupFit{Excluded: []string{}, Threshold: threshold, Wins: map[Criterion]map[string]NullFloat{}}
	var ev [][]float64
	for p, pf := range out.Participants {
		row := make([]float64, len(pf.Fits))
		ok := true
		for j, f := range pf.Fits {
			row[j] = -float64(f.BIC) / 2
			ok = ok && !f.Failed && !math.IsNaN(row[j]) && !math.IsInf(row[j], 0)
		}
		if !ok {
			g.Excluded = append(g.Excluded, out.Participants[p].Participant)
			continue
		}
		ev = append(ev, row)
	}
	for _, c := range Criteria {
		m := map[string]NullFloat{}
		for _, h := range out.Hypotheses {
			m[h] = 0
		}
		for _, pf := range out.Participants {
			for _, h := range pf.Winner[c] {
				m[h] += NullFloat(1 / float64(len(pf.Winner[c])))
			}
		}
		g.Wins[c] = m
		best, bestN := "", NullFloat(-1)
		for _, h := range out.Hypotheses {
			if m[h] > bestN {
				best, bestN = h, m[h]
			}
		}
		s := fmt.Sprintf("%s: %s wins %s of %d participants", c.Label(), best, strings.TrimSuffix(strings.TrimRight(fmt.Sprintf("%.2f", float64(bestN)), "0"), "."), len(out.Participants))
		if out.Recovery != nil {
			s += fmt.Sprintf("; in the recovery study, when %s won a synthetic participant under %s, it had generated the data %s of the time", best, c.Label(), pctText(float64(out.Recovery.TrueGivenWinner[c][best])))
		}
		g.Verdicts = append(g.Verdicts, s)
	}
	g.Participants = len(ev)
	nan := NullFloat(math.NaN())
	g.OmnibusRisk = nan
	g.ExpectedFrequencies, g.Exceedance, g.ProtectedExceedance = map[string]NullFloat{}, map[string]NullFloat{}, map[string]NullFloat{}
	if len(ev) == 0 {
		for _, h := range out.Hypotheses {
			g.ExpectedFrequencies[h], g.Exceedance[h], g.ProtectedExceedance[h] = nan, nan, nan
		}
		g.Verdict = "no participant has a finite fit of every hypothesis: no group-level selection"
		return g
	}
	r := BMSQuadrature(ev)
	g.result = r
	lead := 0
	for k, h := range out.Hypotheses {
		g.ExpectedFrequencies[h] = NullFloat(r.Expected[k])
		g.Exceedance[h] = NullFloat(r.XP[k])
		g.ProtectedExceedance[h] = NullFloat(r.PXP[k])
		if r.PXP[k] > r.PXP[lead] {
			lead = k
		}
	}
	g.OmnibusRisk, g.Converged, g.Leader = NullFloat(r.BOR), r.Converged, out.Hypotheses[lead]
	if r.PXP[lead] >= threshold {
		g.Verdict = fmt.Sprintf("%s is the most frequent hypothesis in the group: protected exceedance probability %.3f ≥ %.2f (omnibus risk %.3f, %d participants)", g.Leader, r.PXP[lead], threshold, r.BOR, len(ev))
	} else {
		g.Verdict = fmt.Sprintf("no hypothesis reaches protected exceedance probability %.2f: the highest is %s's, %.3f (omnibus risk %.3f, %d participants)", threshold, g.Leader, r.PXP[lead], r.BOR, len(ev))
	}
	if out.Recovery != nil {
		g.Verdict += fmt.Sprintf("; in the recovery study, when %s won a synthetic participant under BIC, it had generated the data %s of the time", g.Leader, pctText(float64(out.Recovery.TrueGivenWinner[BICCriterion][g.Leader])))
	}
	g.Verdicts = append(g.Verdicts, "BMS: "+g.Verdict)
	return g
}

func pctText(v float64) string {
	if math.IsNaN(v) {
		return "(not known)"
	}
	return fmt.Sprintf("%.0f%%", 100*v)
}

func collectedNotes(d *models.Design, out *CollectedFit) []string {
	notes := []string{
		"Every candidate is fitted as the recovery engine fits a generator's own candidate: grid search, the deep exact polish, profile-likelihood intervals (docs/model.md §5).",
		"The group level is random-effects BMS on ln evidence ≈ −BIC/2 with deterministic exceedance probabilities (BMSQuadrature); a participant with a failed fit is left out of it.",
	}
	if d.HasMeasure("eeg") {
		without := 0
		for _, p := range out.Participants {
			if !p.EEG {
				without++
			}
		}
		if without > 0 {
			notes = append(notes, fmt.Sprintf("%d of %d participants have no EEG: they are fitted on the behavioural measures alone, so their ln L, k and n are not comparable with the others'.", without, len(out.Participants)))
		}
	}
	if out.Recovery != nil && out.Recovery.Version != Version {
		notes = append(notes, fmt.Sprintf("The recovery report was made by discrimen %s, this fit by %s.", out.Recovery.Version, Version))
	}
	return notes
}

// JSON renders fit.json.
func (f *CollectedFit) JSON() ([]byte, error) {
	b, err := json.MarshalIndent(f, "", "  ")
	if err != nil {
		return nil, err
	}
	return append(b, '\n'), nil
}

// BMS returns the group's BMS result (for tests and pages).
func (g *GroupFit) BMS() BMSResult { return g.result }
