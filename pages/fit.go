package pages

import (
	"bytes"
	_ "embed"
	"fmt"
	"html/template"
	"math"
	"sort"
	"strings"

	"discrimen/recovery"
)

//go:embed templates/fit.html.tmpl
var fitTemplateText string

var fitTemplate = newPageTemplate("fit", fitTemplateText)

type fitView struct {
	F            *recovery.CollectedFit
	Tie          string
	Group        []fitGroupRow
	OmnibusRisk  string
	Participants []fitParticipantRow
	Charts       []fitChart
	Misfits      []string
	Rows         []fitEstimateRow
	Jumps        []string
}

type fitGroupRow struct {
	Name, Colour               string
	Expected, XP, PXP          string
	WinsBIC, WinsAIC, WinsAICc string
	TrueGivenWinner            string
	Leader                     bool
}

type fitParticipantRow struct {
	Label, EEG, BIC, AIC, AICc, TrueGivenWinner, Over2, MaxZ string
	Trials                                                   int
}

type fitChart struct {
	SVG            template.HTML
	Title, Caption string
}

type fitEstimateRow struct {
	Participant, Candidate       string
	LogL, AIC, AICc, BIC, Params string
	K, N                         int
	Best                         bool
}

// Fit renders fit.html, the page of a fit of collected data, in the
// recovery report's style.
func Fit(f *recovery.CollectedFit) ([]byte, error) {
	v := fitView{F: f, Tie: fmt.Sprintf("%g", recovery.TieTolerance)}
	colour := map[string]string{}
	for i, h := range f.Hypotheses {
		colour[h] = hexColour(hypColour(i))
	}
	if g := f.Group; g != nil {
		v.OmnibusRisk = fmtProb(float64(g.OmnibusRisk))
		for _, h := range f.Hypotheses {
			row := fitGroupRow{Name: h, Colour: colour[h], Expected: fmtProb(float64(g.ExpectedFrequencies[h])), XP: fmtProb(float64(g.Exceedance[h])),
				PXP: fmtProb(float64(g.ProtectedExceedance[h])), WinsBIC: fmtCount(float64(g.Wins[recovery.BICCriterion][h])),
				WinsAIC: fmtCount(float64(g.Wins[recovery.AICCriterion][h])), WinsAICc: fmtCount(float64(g.Wins[recovery.AICcCriterion][h])), Leader: h == g.Leader}
			if f.Recovery != nil {
				row.TrueGivenWinner = fmtProb(float64(f.Recovery.TrueGivenWinner[recovery.BICCriterion][h]))
			}
			v.Group = append(v.Group, row)
		}
	}
	for _, p := range f.Participants {
		row := fitParticipantRow{Label: p.Participant, Trials: p.Trials, EEG: "no", BIC: winnerText(p.Winner[recovery.BICCriterion]),
			AIC: winnerText(p.Winner[recovery.AICCriterion]), AICc: winnerText(p.Winner[recovery.AICcCriterion]), Over2: "—", MaxZ: "—"}
		if p.EEG {
			row.EEG = "yes"
		}
		if p.TrueGivenWinner != nil {
			row.TrueGivenWinner = fmtProb(float64(*p.TrueGivenWinner))
		}
		if p.Check != nil {
			row.Over2 = fmt.Sprintf("%d of %d", p.Check.Misfit.Over2, p.Check.Misfit.Cells)
			row.MaxZ = fmtG(float64(p.Check.Misfit.MaxAbsZ), 3)
			if p.Check.Misfit.Over2 > 0 && float64(p.Check.Misfit.Over2) > 0.1*float64(p.Check.Misfit.Cells) {
				v.Misfits = append(v.Misfits, p.Participant+": "+p.Check.Misfit.Summary+".")
			}
		}
		v.Participants = append(v.Participants, row)
		best := map[string]bool{}
		for _, c := range p.Winner[recovery.BICCriterion] {
			best[c] = true
		}
		for _, c := range p.Fits {
			v.Rows = append(v.Rows, fitEstimateRow{Participant: p.Participant, Candidate: c.Candidate, LogL: fmtG(float64(c.LogL), 6), K: c.K, N: c.N,
				AIC: fmtG(float64(c.AIC), 6), AICc: fmtG(float64(c.AICc), 6), BIC: fmtG(float64(c.BIC), 6), Params: paramsText(c), Best: best[c.Candidate]})
		}
	}
	if len(v.Misfits) == 0 {
		v.Misfits = []string{"No participant has more than one cell in ten off by more than 2 standard errors."}
	}
	for _, g := range f.GridHealth {
		switch {
		case len(g.JumpsAt) > 0:
			at := make([]string, len(g.JumpsAt))
			for i, x := range g.JumpsAt {
				at[i] = fmtG(x, 3)
			}
			v.Jumps = append(v.Jumps, fmt.Sprintf("%s: its exact predictions jump at %s", g.Hypothesis, strings.Join(at, ", ")))
		case g.Jumps:
			v.Jumps = append(v.Jumps, g.Hypothesis+": its exact predictions jump inside its parameter range")
		}
	}
	charts, err := checkCharts(f)
	if err != nil {
		return nil, err
	}
	v.Charts = charts
	var buf bytes.Buffer
	if err := fitTemplate.Execute(&buf, v); err != nil {
		return nil, fmt.Errorf("pages: fit page: %w", err)
	}
	return buf.Bytes(), nil
}

func winnerText(w []string) string {
	if len(w) == 0 {
		return "—"
	}
	return strings.Join(w, " = ")
}

func paramsText(c recovery.CandidateFit) string {
	if c.Failed {
		return "failed: " + c.Error
	}
	names := make([]string, 0, len(c.Params))
	for n := range c.Params {
		names = append(names, n)
	}
	sort.Strings(names)
	var parts []string
	for _, n := range names {
		pe := c.Params[n]
		iv := pe.Interval
		lo, hi := fmtG(float64(iv.Low), 3), fmtG(float64(iv.High), 3)
		if iv.OpenLow {
			lo = "↤" + lo
		}
		if iv.OpenHigh {
			hi += "↦"
		}
		s := fmt.Sprintf("%s %s [%s, %s]", n, fmtG(float64(pe.Estimate), 4), lo, hi)
		if len(iv.Pieces) > 1 {
			s += fmt.Sprintf(" in %d pieces", len(iv.Pieces))
		}
		parts = append(parts, s)
	}
	if len(parts) == 0 {
		return "no free parameter"
	}
	return strings.Join(parts, "; ")
}

// checkCharts draws, per measure and cue, the participants' mean observed
// figure by CTI (points with ±2 pooled standard errors) and the mean of
// their winners' predictions (line).
func checkCharts(f *recovery.CollectedFit) ([]fitChart, error) {
	type key struct{ measure, cue string }
	type acc struct {
		obs, pred, varSum float64
		n                 int
	}
	cells := map[key]map[int]*acc{}
	var ctis []int
	seenCTI := map[int]bool{}
	for _, p := range f.Participants {
		if p.Check == nil {
			continue
		}
		for _, c := range p.Check.Cells {
			o, pr, z := float64(c.Observed), float64(c.Predicted), float64(c.Z)
			if !finite(o) || !finite(pr) {
				continue
			}
			k := key{c.Measure, c.Cue}
			if cells[k] == nil {
				cells[k] = map[int]*acc{}
			}
			a := cells[k][c.CTIms]
			if a == nil {
				a = &acc{}
				cells[k][c.CTIms] = a
			}
			a.obs += o
			a.pred += pr
			if finite(z) && z != 0 {
				se := (o - pr) / z
				a.varSum += se * se
			}
			a.n++
			if !seenCTI[c.CTIms] {
				seenCTI[c.CTIms] = true
				ctis = append(ctis, c.CTIms)
			}
		}
	}
	sort.Ints(ctis)
	xt := make([]float64, len(ctis))
	for i, c := range ctis {
		xt[i] = float64(c)
	}
	specs := []struct {
		measure, title, unit string
	}{{"rt", "Response time", "ms"}, {"accuracy", "Accuracy", "share of target reports"}, {"misdirected", "Misdirected reports", "share of cued reports"}, {"neural", "Neural signal", "mean of the bins"}}
	var out []fitChart
	for _, s := range specs {
		var series []lineSeries
		for ci, cue := range []string{"valid", "invalid", ""} {
			m := cells[key{s.measure, cue}]
			if m == nil {
				continue
			}
			col := hypColour(ci)
			var xs, obs, pred, lo, hi []float64
			for _, c := range ctis {
				a := m[c]
				if a == nil {
					continue
				}
				n := float64(a.n)
				o, p := a.obs/n, a.pred/n
				se := math.Sqrt(a.varSum) / n
				xs, obs, pred = append(xs, float64(c)), append(obs, o), append(pred, p)
				lo, hi = append(lo, o-2*se), append(hi, o+2*se)
			}
			series = append(series, lineSeries{X: xs, Y: pred, Colour: col}, lineSeries{X: xs, Y: obs, Colour: col, Dashed: true, Markers: true, Lo: lo, Hi: hi})
		}
		if len(series) == 0 {
			continue
		}
		svg, err := lineChart(lineSpec{Label: s.title + ": observed and predicted by CTI", XLabel: "CTI (ms)", YLabel: s.unit, Series: series, XTicks: xt})
		if err != nil {
			return nil, err
		}
		caption := "solid: predicted; dashed with markers: observed"
		switch s.measure {
		case "rt", "accuracy":
			caption += fmt.Sprintf("; %s valid, %s invalid trials", colourName(0), colourName(1))
		case "misdirected":
			caption += "; invalid trials"
		}
		out = append(out, fitChart{SVG: svg, Title: s.title, Caption: caption})
	}
	return out, nil
}

// colourName names the first hypothesis colours for chart captions.
func colourName(i int) string {
	return [...]string{"blue", "orange", "green"}[i]
}
