package pages

import (
	"bytes"
	_ "embed"
	"fmt"
	"html/template"
	"image/color"
	"math"
	"sort"
	"strconv"
	"strings"

	"discrimen/models"
	"discrimen/recovery"
)

//go:embed templates/predictions.html.tmpl
var predictionsTemplateText string

var predictionsTemplate = newPageTemplate("predictions", predictionsTemplateText)

// predictionsView is what predictions.html.tmpl sees: numbers formatted,
// charts drawn.
type predictionsView struct {
	Study      string
	Invented   bool
	Version    string
	Design     predDesignView
	Hypotheses []predHypView
	RT         template.HTML
	Acc        template.HTML
	Mis        template.HTML
	Neural     []template.HTML
	BinMs      int
	Longest    int
	Rows       []predRow
	Censored   bool
}

type predDesignView struct {
	Name, Validity, CTIs, Measures, Criterion string
	PrecisionSD                               string // "" when 0
	Streams, Items, TrialsPerCTI              int
	PresentationMs, ResponseWindowMs, EpochMs int
	EEGBinMs                                  int
	EEG                                       bool
}

type predHypView struct {
	Name, Family, Colour string
	Params               []predParam
}

type predParam struct{ Name, Value string }

// predRow is one (hypothesis, CTI) line of the numbers table.
type predRow struct {
	Hypothesis, Colour                       string
	First                                    bool // first row of its hypothesis
	Span                                     int  // rows of its hypothesis
	CTI                                      int
	ValidRT, ValidAcc, InvalidRT, InvalidAcc string
	Misdirected, Censored                    string
}

// Predictions renders what each hypothesis predicts for design d as one
// self-contained page (inline CSS and SVG, no scripts, no external
// references): the design, the parameter values used, RT, accuracy and
// misdirected reports by CTI, and the neural signal before the target at
// every CTI. preds is what models.PredictDesign returns for d; studyName
// heads the page and, when it says "invented", the page says the scenario
// is invented. Every string is escaped by html/template or by vgsvg.
func Predictions(studyName string, d *models.Design, preds []models.HypothesisPrediction) ([]byte, error) {
	if d == nil {
		panic("pages: Predictions: nil design")
	}
	if len(preds) == 0 {
		return nil, fmt.Errorf("pages: predictions page for design %q: no hypotheses to show", d.Name)
	}
	if err := checkPredictionShapes(d, preds); err != nil {
		return nil, err
	}
	v := predictionsView{
		Study:    studyName,
		Invented: strings.Contains(strings.ToLower(studyName), "invented"),
		Version:  recovery.Version,
		Design: predDesignView{
			Name: d.Name, Streams: d.Streams, Items: d.Items, CTIs: joinInts(d.CTIms), Measures: strings.Join(d.Measures, ", "),
			TrialsPerCTI: d.TrialsPerCTI, PresentationMs: d.PresentationMs, ResponseWindowMs: d.ResponseWindowMs,
			EpochMs: d.EpochMs, EEGBinMs: d.EEGBinMs, EEG: d.HasMeasure("eeg"),
		},
	}
	if d.Validity > 0 {
		v.Design.Validity = fmtG(d.Validity, 3)
	}
	if d.Agent.Criterion > 0 {
		v.Design.Criterion = fmtG(d.Agent.Criterion, 3)
	}
	if d.Agent.PrecisionSD > 0 {
		v.Design.PrecisionSD = fmtG(d.Agent.PrecisionSD, 3)
	}
	byOrder := func(i int, _ string) color.RGBA { return hypColour(i) }
	for i, hp := range preds {
		hv := predHypView{Name: hp.Name, Family: hp.Family, Colour: hexColour(hypColour(i))}
		names := make([]string, 0, len(hp.Params))
		for n := range hp.Params {
			names = append(names, n)
		}
		sort.Strings(names)
		for _, n := range names {
			hv.Params = append(hv.Params, predParam{n, fmtG(hp.Params[n], 4)})
		}
		v.Hypotheses = append(v.Hypotheses, hv)
		ord := ascendingOrder(hp.CTIms)
		for k, c := range ord {
			row := predRow{Hypothesis: hp.Name, Colour: hv.Colour, First: k == 0, Span: len(ord), CTI: hp.CTIms[c],
				ValidRT: fmtFixed(hp.Valid.RTms[c], 1), ValidAcc: fmtFixed(hp.Valid.Accuracy[c], 3),
				InvalidRT: fmtFixed(hp.Invalid.RTms[c], 1), InvalidAcc: fmtFixed(hp.Invalid.Accuracy[c], 3),
				Misdirected: fmtFixed(hp.Invalid.Misdirected[c], 3), Censored: hp.Censored.Label(c, "—")}
			v.Censored = v.Censored || row.Censored != "—"
			v.Rows = append(v.Rows, row)
		}
	}

	ps := newPredictionSeries(preds, byOrder)
	v.Longest, v.BinMs = ps.Longest, ps.BinMs
	var err error
	label := func(what string) string { return what + " for design " + d.Name }
	if v.RT, err = lineChart(lineSpec{Label: label("Predicted RT by CTI"), Title: "response time",
		XLabel: "cue–target interval (ms)", YLabel: "agent's RT from target onset (ms)", Series: ps.RT, XTicks: ps.CTIs,
		W: 270, H: 215}); err != nil {
		return nil, err
	}
	zero, one := 0.0, 1.0
	if v.Acc, err = lineChart(lineSpec{Label: label("Predicted accuracy by CTI"), Title: "accuracy",
		XLabel: "cue–target interval (ms)", YLabel: "P(target reported)", Series: ps.Acc, XTicks: ps.CTIs,
		YMin: &zero, YMax: &one, W: 270, H: 215}); err != nil {
		return nil, err
	}
	if v.Mis, err = lineChart(lineSpec{Label: label("Predicted misdirected reports by CTI"), Title: "misdirected (invalid cue)",
		XLabel: "cue–target interval (ms)", YLabel: "P(cued stream's item reported)", Series: ps.Mis, XTicks: ps.CTIs,
		YMin: &zero, YMax: &one, W: 270, H: 215}); err != nil {
		return nil, err
	}

	// One neural panel per CTI, shortest first, all on the same axes so
	// that the panels compare at a glance. Sizes: the page's content is
	// 1184 px wide and a figure adds 22 px of padding and border and 14 px
	// of gap, so three behaviour charts of 270 pt (360 px) or four neural
	// panels of 195 pt (260 px) share a row.
	lo, hi := neuralRange(preds)
	xMin, xMax := 0.0, float64(ps.Longest)
	for _, c := range ascendingOrder(d.CTIms) {
		cti := float64(d.CTIms[c])
		chart, err := lineChart(lineSpec{
			Label: label(fmt.Sprintf("Predicted neural signal before the target at CTI %d ms", d.CTIms[c])),
			Title: fmt.Sprintf("CTI %d ms", d.CTIms[c]), XLabel: "time from cue onset (ms)", YLabel: "expected precision − baseline",
			Series: neuralAt(preds, c, byOrder), YMin: &lo, YMax: &hi, XMin: &xMin, XMax: &xMax, VLine: &cti, W: 195, H: 165,
		})
		if err != nil {
			return nil, err
		}
		if chart != "" {
			v.Neural = append(v.Neural, chart)
		}
	}

	var buf bytes.Buffer
	if err := predictionsTemplate.Execute(&buf, v); err != nil {
		return nil, fmt.Errorf("pages: rendering the predictions page: %w", err)
	}
	return buf.Bytes(), nil
}

// checkPredictionShapes returns an error naming the first field whose
// length does not match the design's CTIs.
func checkPredictionShapes(d *models.Design, preds []models.HypothesisPrediction) error {
	for i, hp := range preds {
		n := len(hp.CTIms)
		where := fmt.Sprintf("pages: predictions page: hypotheses[%d] (%q)", i, hp.Name)
		if n != len(d.CTIms) {
			return fmt.Errorf("%s: cti_ms has %d values, design %q has %d CTIs", where, n, d.Name, len(d.CTIms))
		}
		fields := []struct {
			name string
			n    int
		}{
			{"valid.rt_ms", len(hp.Valid.RTms)}, {"valid.accuracy", len(hp.Valid.Accuracy)},
			{"invalid.rt_ms", len(hp.Invalid.RTms)}, {"invalid.accuracy", len(hp.Invalid.Accuracy)},
			{"invalid.misdirected", len(hp.Invalid.Misdirected)}, {"neural.by_cti", len(hp.Neural.ByCTI)},
		}
		for _, f := range fields {
			if f.n != n {
				return fmt.Errorf("%s: %s has %d values for %d CTIs", where, f.name, f.n, n)
			}
		}
		for _, f := range []struct {
			name string
			v    []float64
		}{{"censored.valid", hp.Censored.Valid}, {"censored.invalid", hp.Censored.Invalid}} {
			if f.v != nil && len(f.v) != n {
				return fmt.Errorf("%s: %s has %d values for %d CTIs", where, f.name, len(f.v), n)
			}
		}
	}
	return nil
}

// neuralRange is the y range shared by the neural panels: the data's
// extremes with 5% of the span added at each end.
func neuralRange(preds []models.HypothesisPrediction) (lo, hi float64) {
	lo, hi = math.Inf(1), math.Inf(-1)
	for _, hp := range preds {
		for _, bins := range hp.Neural.ByCTI {
			for _, v := range bins {
				if finite(v) {
					lo, hi = math.Min(lo, v), math.Max(hi, v)
				}
			}
		}
	}
	if !(hi >= lo) {
		return 0, 1
	}
	span := hi - lo
	if span == 0 {
		span = math.Max(math.Abs(hi), 1)
	}
	return lo - 0.05*span, hi + 0.05*span
}

// fmtFixed prints v with the given decimals and a typographic minus, or a
// dash when it is not a number.
func fmtFixed(v float64, decimals int) string {
	if !finite(v) {
		return "—"
	}
	return strings.Replace(strconv.FormatFloat(v, 'f', decimals, 64), "-", "−", 1)
}
