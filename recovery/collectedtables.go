package recovery

import (
	"fmt"
	"math"
)

// The tidy tables of a fit of collected data (docs/model.md §10), each
// with its JSON sidecar as the recovery tables have:
//
//	fit_candidates.csv  one row per participant × candidate
//	fit_params.csv      one row per participant × candidate × free parameter
//	fit_checks.csv      one row per participant × condition × measure of the check
//	fit_group.csv       one row per hypothesis: the group level

// TableFiles renders the four tables and their sidecars.
func (f *CollectedFit) TableFiles() ([]File, error) {
	var files []File
	for _, t := range f.Tables() {
		c, err := t.CSV()
		if err != nil {
			return nil, err
		}
		s, err := t.Sidecar()
		if err != nil {
			return nil, err
		}
		files = append(files, File{t.Name + ".csv", c}, File{t.Name + ".json", s})
	}
	return files, nil
}

// Tables builds the four tables.
func (f *CollectedFit) Tables() []Table {
	part := Column{Name: "participant", Description: "participant label, as in the trials file"}
	cand := Column{Name: "candidate", Description: "the hypothesis fitted"}
	ct := Table{Name: "fit_candidates", Columns: []Column{part, cand,
		{Name: "loglik", Description: "maximised log-likelihood ln L̂ (natural log) from exact predictions; NA for a failed fit"},
		{Name: "k", Description: "free parameters: the candidate's plus every measurement term the participant's data measure (docs/model.md §5)"},
		{Name: "n", Description: "observations the likelihood uses: RTs of target reports, reports, EEG bins"},
		{Name: "aic", Description: "AIC = 2k − 2 ln L̂"},
		{Name: "aicc", Description: "AICc = AIC + 2k(k+1)/(n−k−1); NA when n ≤ k+1"},
		{Name: "bic", Description: "BIC = k ln n − 2 ln L̂"},
		{Name: "win_bic", Description: fmt.Sprintf("share of the participant's win under BIC: 1/m when m candidates lie within %g of the smallest, 0 otherwise; NA when no fit is finite", TieTolerance)},
		{Name: "win_aic", Description: "likewise under AIC"},
		{Name: "win_aicc", Description: "likewise under AICc"},
		{Name: "converged", Description: "whether the search that gave the estimate met its stopping rule", Levels: boolLevels("met", "not met")},
		{Name: "failed", Description: "whether the fit failed (no finite likelihood)", Levels: boolLevels("failed", "a finite fit")},
	}}
	pt := Table{Name: "fit_params", Columns: []Column{part, cand,
		{Name: "parameter", Description: "free hypothesis parameter of the candidate"},
		{Name: "estimate", Description: "maximum-likelihood estimate"},
		{Name: "low", Description: "lower end of the 95% profile-likelihood interval (docs/model.md §5)"},
		{Name: "high", Description: "upper end of the interval"},
		{Name: "open_low", Description: "whether the interval reaches the range's lower end (the data do not bound it there)", Levels: boolLevels("open", "closed")},
		{Name: "open_high", Description: "whether the interval reaches the range's upper end", Levels: boolLevels("open", "closed")},
		{Name: "pieces", Description: "connected parts of the interval (1 for an ordinary interval)"},
	}}
	kt := Table{Name: "fit_checks", Columns: []Column{part,
		{Name: "candidate", Description: "the participant's BIC winner, whose predictions are checked"},
		{Name: "cti_ms", Description: "cue-target interval", Units: "ms"},
		{Name: "cue", Description: "trial class; NA for the neural signal", Levels: []Level{{"valid", "valid trials"}, {"invalid", "invalid trials"}}},
		{Name: "measure", Description: "what is compared", Levels: []Level{{"rt", "mean RT of target reports (ms)"}, {"accuracy", "share of target reports"}, {"misdirected", "share of cued reports on invalid trials"}, {"neural", "mean of the CTI's EEG bins"}}},
		{Name: "n", Description: "observations in the cell (RTs, trials or bins)"},
		{Name: "observed", Description: "the data's figure"},
		{Name: "predicted", Description: "the winner's prediction at its estimates, measurement terms included"},
		{Name: "z", Description: "(observed − predicted) / its standard error under the winner (docs/model.md §10)"},
	}}
	gt := Table{Name: "fit_group", Columns: []Column{
		{Name: "hypothesis", Description: "hypothesis of the study"},
		{Name: "expected_frequency", Description: "posterior mean frequency of the hypothesis in the population (random-effects BMS on −BIC/2)"},
		{Name: "exceedance", Description: "exceedance probability: P(its frequency is the largest)"},
		{Name: "protected_exceedance", Description: "protected exceedance probability, XP·(1 − omnibus risk) + omnibus risk / K"},
		{Name: "omnibus_risk", Description: "Bayesian omnibus risk: the posterior probability that all frequencies are equal (the same on every row)"},
		{Name: "wins_bic", Description: "participants won under BIC (ties split)"},
		{Name: "wins_aic", Description: "participants won under AIC (ties split)"},
		{Name: "wins_aicc", Description: "participants won under AICc (ties split)"},
		{Name: "p_true_given_winner_bic", Description: "from the recovery report: the share of the study's BIC wins of this hypothesis whose data it generated (inversion matrix); NA without a report"},
	}}
	for _, pf := range f.Participants {
		label := text(pf.Participant)
		shares := map[Criterion][]float64{}
		for _, c := range Criteria {
			vals := make([]float64, len(pf.Fits))
			for j := range pf.Fits {
				vals[j] = criterionOf(c, &pf.Fits[j])
			}
			s, failed := WinShares(vals, TieTolerance)
			if failed {
				for j := range s {
					s[j] = math.NaN()
				}
			}
			shares[c] = s
		}
		for j := range pf.Fits {
			ft := &pf.Fits[j]
			ct.Rows = append(ct.Rows, []string{label, text(ft.Candidate), num(float64(ft.LogL)), integer(ft.K), integer(ft.N), num(float64(ft.AIC)), num(float64(ft.AICc)), num(float64(ft.BIC)),
				num(shares[BICCriterion][j]), num(shares[AICCriterion][j]), num(shares[AICcCriterion][j]), boolean(ft.Converged), boolean(ft.Failed)})
			if ft.Failed || j >= len(f.cands) {
				continue
			}
			for _, name := range f.cands[j].FreeParams() {
				pe, ok := ft.Params[name]
				if !ok {
					continue
				}
				iv := pe.Interval
				pt.Rows = append(pt.Rows, []string{label, text(ft.Candidate), text(name), num(float64(pe.Estimate)), num(float64(iv.Low)), num(float64(iv.High)), boolean(iv.OpenLow), boolean(iv.OpenHigh), integer(len(iv.Pieces))})
			}
		}
		if pf.Check != nil {
			for _, cell := range pf.Check.Cells {
				kt.Rows = append(kt.Rows, []string{label, text(pf.Check.Candidate), integer(cell.CTIms), text(cell.Cue), cell.Measure, integer(cell.N), num(float64(cell.Observed)), num(float64(cell.Predicted)), num(float64(cell.Z))})
			}
		}
	}
	if g := f.Group; g != nil {
		for _, h := range f.Hypotheses {
			ptw := math.NaN()
			if f.Recovery != nil {
				ptw = float64(f.Recovery.TrueGivenWinner[BICCriterion][h])
			}
			gt.Rows = append(gt.Rows, []string{text(h), num(float64(g.ExpectedFrequencies[h])), num(float64(g.Exceedance[h])), num(float64(g.ProtectedExceedance[h])), num(float64(g.OmnibusRisk)),
				num(float64(g.Wins[BICCriterion][h])), num(float64(g.Wins[AICCriterion][h])), num(float64(g.Wins[AICcCriterion][h])), num(ptw)})
		}
	}
	return []Table{ct, pt, kt, gt}
}
