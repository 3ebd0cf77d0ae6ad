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

	"gonum.org/v1/plot/vg/draw"

	"discrimen/models"
	"discrimen/recovery"
)

//go:embed templates/report.html.tmpl
var reportTemplateText string

// styleTemplateText defines "style", the CSS that report.html and the
// predictions page share.
//
//go:embed templates/style.html.tmpl
var styleTemplateText string

// pageFuncs are the formatting functions every page template may call.
var pageFuncs = template.FuncMap{
	"prob": func(v recovery.NullFloat) string { return fmtProb(float64(v)) },
	"g3":   func(v recovery.NullFloat) string { return fmtG(float64(v), 3) },
	"pct":  func(v recovery.NullFloat) string { return fmtPct(float64(v)) },
	"f1":   func(v float64) string { return strconv.FormatFloat(v, 'f', 1, 64) },
	"f2":   func(v float64) string { return strconv.FormatFloat(v, 'f', 2, 64) },
	"g3f":  func(v float64) string { return fmtG(v, 3) },
	"join": strings.Join,
	"css":  func(s string) template.CSS { return template.CSS(s) },
}

// newPageTemplate parses a page with the shared style template beside it.
func newPageTemplate(name, text string) *template.Template {
	t := template.Must(template.New(name).Funcs(pageFuncs).Parse(text))
	return template.Must(t.Parse(styleTemplateText))
}

var reportTemplate = newPageTemplate("report", reportTemplateText)

// fmtProb prints a probability with two decimals, as in the heat maps.
func fmtProb(v float64) string {
	if !finite(v) {
		return "—"
	}
	return strings.Replace(strconv.FormatFloat(v, 'f', 2, 64), "-", "−", 1)
}

// fmtG prints v with the given significant digits, or a dash when it is
// not a number.
func fmtG(v float64, digits int) string {
	if !finite(v) {
		return "—"
	}
	if v == 0 {
		return "0"
	}
	// A typographic minus sign, as in print.
	return strings.Replace(strconv.FormatFloat(v, 'g', digits, 64), "-", "−", 1)
}

func fmtPct(v float64) string {
	if !finite(v) {
		return "—"
	}
	return strconv.FormatFloat(100*v, 'f', 0, 64) + "%"
}

// fmtCount prints a win count: whole unless ties split a dataset.
func fmtCount(v float64) string {
	if !finite(v) {
		return "—"
	}
	if math.Abs(v-math.Round(v)) < 1e-9 {
		return strconv.FormatFloat(math.Round(v), 'f', 0, 64)
	}
	return strconv.FormatFloat(v, 'f', 1, 64)
}

// The view types below are what the template sees: every number already
// formatted, every chart already drawn.

type htmlView struct {
	R          *recovery.Report
	Hypotheses []hypView
	Designs    []designView
	Ranking    *rankingView
	HasGroup   bool
	// ITINote names each design's inter-trial interval for the notes on
	// testing minutes.
	ITINote string
	// Warnings are the study file's warnings (report.json "warnings").
	Warnings []models.Problem
	Sections []sectionLink
	Timing   string
	Method   methodView
	// GradedNote names the designs with trial-to-trial variability of
	// precision, with their precision_sd; empty when every design is
	// deterministic.
	GradedNote string
}

// methodView holds the method constants the notes quote, formatted from
// the report's own Method block, so that a stored report quotes the
// settings it was made with. Missing marks a report without the block
// (every value is then a dash).
type methodView struct {
	Missing                                    bool
	Starts, StartSpacing, RescoreWindow        string
	LapseMax, ARMax                            string
	SERoughStep, SEFineStep, SEChange          string
	GridTolerance, JumpWidth, ContentionWindow string
	ModeTries, ModeWindow, ProfileThreshold    string
	TruthTolerance                             string
	GroupBootstrapRounds                       string
	PolishMinStep, DeepWindow                  string
	PolishCompassEvalsPerDim                   string
	PolishQuickEvalsPerDim                     string
	RefineCheckPoints, RefineBudgetShare       string
	ModeRepolishWindow, ModeScreenWindow       string
}

// newMethodView formats m for the method notes: counts under eleven in
// words, as in running prose.
func newMethodView(m recovery.Method) methodView {
	if m == (recovery.Method{}) {
		const dash = "—"
		return methodView{Missing: true, Starts: dash, StartSpacing: dash, RescoreWindow: dash, LapseMax: dash, ARMax: dash,
			SERoughStep: dash, SEFineStep: dash, SEChange: dash, GridTolerance: dash, JumpWidth: dash,
			ContentionWindow: dash, ModeTries: dash, ModeWindow: dash, ProfileThreshold: dash, TruthTolerance: dash,
			GroupBootstrapRounds: dash, PolishMinStep: dash, DeepWindow: dash, PolishCompassEvalsPerDim: dash, PolishQuickEvalsPerDim: dash,
			RefineCheckPoints: dash, RefineBudgetShare: dash, ModeRepolishWindow: dash, ModeScreenWindow: dash}
	}
	// A report made before the group bootstrap has no rounds.
	rounds := "—"
	if m.GroupBootstrapRounds > 0 {
		rounds = strconv.Itoa(m.GroupBootstrapRounds)
	}
	return methodView{
		Starts: strconv.Itoa(m.Starts), StartSpacing: countWord(m.StartSpacing), RescoreWindow: fmtG(m.RescoreWindow, 3),
		LapseMax: fmtG(m.LapseMax, 3), ARMax: fmtG(m.ARMax, 3),
		SERoughStep: fmtG(100*m.SERoughStep, 3) + "%", SEFineStep: fractionOf(m.SEFineStep), SEChange: fmtG(100*m.SEMaxChange, 3) + "%",
		GridTolerance: fmtG(m.GridTolerance, 3), JumpWidth: fmtG(m.JumpWidth, 3), ContentionWindow: fmtG(m.ContentionWindow, 3),
		ModeTries: countWord(m.ModeTries), ModeWindow: fmtG(m.ModeWindow, 3), ProfileThreshold: fmtG(m.ProfileThreshold, 5),
		TruthTolerance: fmtG(m.TruthTolerance, 3), GroupBootstrapRounds: rounds,
		PolishMinStep: orDash(m.PolishMinStep > 0, fmtG(m.PolishMinStep, 3)), DeepWindow: orDash(m.DeepWindow > 0, fmtG(m.DeepWindow, 3)),
		PolishCompassEvalsPerDim: orDash(m.PolishCompassEvalsPerDim > 0, countWord(m.PolishCompassEvalsPerDim)),
		PolishQuickEvalsPerDim:   orDash(m.PolishQuickEvalsPerDim > 0, countWord(m.PolishQuickEvalsPerDim)),
		RefineCheckPoints:        orDash(m.RefineCheckPoints > 0, strconv.Itoa(m.RefineCheckPoints)),
		RefineBudgetShare:        orDash(m.RefineCheckPoints > 0, fmtG(100*m.RefineBudgetShare, 3)+"%"),
		ModeRepolishWindow:       orDash(m.ModeTriesDeep > 0, fmtG(m.ModeRepolishWindow, 3)),
		ModeScreenWindow:         orDash(m.ModeTriesDeep > 0, fmtG(m.ModeScreenWindow, 3)),
	}
}

// orDash is v, or a dash for a setting the report's method block lacks
// (a report made before it existed).
func orDash(ok bool, v string) string {
	if !ok {
		return "—"
	}
	return v
}

// countWord writes 0 to 10 in words and larger counts in digits.
func countWord(n int) string {
	words := []string{"zero", "one", "two", "three", "four", "five", "six", "seven", "eight", "nine", "ten"}
	if n >= 0 && n < len(words) {
		return words[n]
	}
	return strconv.Itoa(n)
}

// fractionOf writes f as a multiplier before a plural noun: "half" or
// "0.25 times".
func fractionOf(f float64) string {
	if f == 0.5 {
		return "half"
	}
	return fmtG(f, 3) + " times"
}

type sectionLink struct{ ID, Title string }

type hypView struct {
	Name, Family, Colour, Params string
}

type designView struct {
	Name         string
	Measures     string
	Participants int
	Trials       int
	Minutes      float64
	ITI          string
	CTIs         string
	Validity     string
	Verdict      []string
	Confusion    template.HTML
	Inversion    template.HTML
	Criteria     []criterionRow
	Scatters     []scatterView
	Tradeoffs    []recovery.TradeoffReport
	Mimicry      []recovery.MimicryReport
	Group        *groupView
	PredRT       template.HTML
	PredAcc      template.HTML
	PredNeural   template.HTML
	LongestCTI   int
	Health       recovery.FitFailures
	PerGenerator []generatorHealth
	Surrogate    []recovery.SurrogateError
	Ranked       bool
}

type criterionRow struct {
	Name                 string
	Rate, MIBits, NormMI recovery.NullFloat
	Datasets             int
}

type scatterView struct {
	Chart template.HTML
	P     recovery.ParamRecoveryReport
	Fails int
}

type groupView struct {
	Chart        template.HTML
	Confusion    template.HTML
	ConfusionN   int
	Replicates   int
	Sizes        string
	Columns      []groupColumn
	Flags        []groupFlagView
	Rows         []sampleRow
	Target       string
	Threshold    string
	Summary      []string
	Notes        []string
	BMSRuns      int
	Quadratures  int
	NotConverged int
}

// sampleRow is one generator's row of the group table: its rate at each
// size and the participants it needs.
type sampleRow struct {
	Hypothesis, Colour, N string
	Cells                 []groupCellView
}

// groupColumn heads one group size of the table; Flagged marks a size
// above half of some pool.
type groupColumn struct {
	N       int
	Flagged bool
}

// groupCellView is a rate with its 95% interval and the effective number
// of replicates behind it, formatted; empty for a skipped size.
type groupCellView struct {
	Rate, Interval, Effective string
}

// groupFlagView is one flagged size: its reason, and the generators it
// concerns when they are not all of them.
type groupFlagView struct {
	N          int
	Reason     string
	Generators string
}

type generatorHealth struct {
	Hypothesis string
	Datasets   int
	NoWinner   int
}

// Report renders r as report.html, one self-contained page: inline CSS and
// SVG, no scripts, no external references. Every string from the study is
// escaped by html/template (in the page) or by vgsvg (in the charts). The
// method notes quote r.Method. Report panics if r is nil.
func Report(r *recovery.Report) ([]byte, error) {
	if r == nil {
		panic("pages: Report: nil report")
	}
	v := htmlView{R: r, Ranking: newRankingView(r), Method: newMethodView(r.Method), ITINote: itiNote(r.Designs), Warnings: r.Warnings, GradedNote: gradedNote(r.Designs)}
	hypIndex := map[string]int{}
	specs := map[string]models.Hypothesis{}
	if r.StudyFile != nil {
		for _, h := range r.StudyFile.Hypotheses {
			specs[h.Name] = h
		}
	}
	for i, name := range r.Hypotheses {
		hypIndex[name] = i
		fam := ""
		if i < len(r.Families) {
			fam = r.Families[i]
		}
		v.Hypotheses = append(v.Hypotheses, hypView{Name: name, Family: fam, Colour: hexColour(hypColour(i)), Params: paramSummary(specs[name])})
	}
	for di := range r.Designs {
		dv, err := designPage(r, di, hypIndex, specs)
		if err != nil {
			return nil, err
		}
		v.HasGroup = v.HasGroup || dv.Group != nil
		v.Designs = append(v.Designs, dv)
	}
	v.Sections = []sectionLink{{"study", "Study"}, {"verdict", "Verdict"}, {"who-wins", "Who wins"}, {"who-generated", "Who generated"},
		{"parameters", "Recovering parameters"}, {"look-alikes", "Look-alikes"}}
	if v.HasGroup {
		v.Sections = append(v.Sections, sectionLink{"group", "Group analysis"})
	}
	v.Sections = append(v.Sections, sectionLink{"predictions", "What each hypothesis predicts"}, sectionLink{"fit-health", "Fit health"},
		sectionLink{"method", "Method notes"}, sectionLink{"limits", "What a simulation can and cannot promise"})
	if r.Timing.TotalSeconds > 0 {
		v.Timing = fmt.Sprintf("%d fits in %.1f s on %d workers", r.Timing.Fits, r.Timing.TotalSeconds, r.Timing.Workers)
	}
	var buf bytes.Buffer
	if err := reportTemplate.Execute(&buf, v); err != nil {
		return nil, fmt.Errorf("pages: rendering report.html: %w", err)
	}
	return buf.Bytes(), nil
}

// paramSummary lists a hypothesis's parameters: free ones with range and
// generating distribution, fixed ones with their value.
func paramSummary(h models.Hypothesis) string {
	if h.Params == nil {
		return ""
	}
	names := make([]string, 0, len(h.Params))
	for n := range h.Params {
		names = append(names, n)
	}
	sort.Strings(names)
	var parts []string
	if len(h.KnotsS) > 0 {
		ts := make([]string, len(h.KnotsS))
		for i, t := range h.KnotsS {
			ts[i] = fmtG(t, 4)
		}
		parts = append(parts, "knots at "+strings.Join(ts, ", ")+" s")
	}
	for _, n := range names {
		p := h.Params[n]
		switch {
		case p.Value != nil:
			parts = append(parts, fmt.Sprintf("%s = %s", n, fmtG(*p.Value, 4)))
		case p.Min != nil && p.Max != nil:
			parts = append(parts, fmt.Sprintf("%s ∈ [%s, %s], true values %s", n, fmtG(*p.Min, 4), fmtG(*p.Max, 4), generateText(p)))
		}
	}
	return strings.Join(parts, "; ")
}

// generateText states a free parameter's generating distribution with its
// numbers: "uniform on [0.5, 1.5]", "loguniform on [0.05, 0.5]",
// "normal(mean 0.2, sd 0.1) truncated to [0.02, 0.6]".
func generateText(p models.Param) string {
	lo, hi := p.GenerateRange()
	on := fmt.Sprintf("[%s, %s]", fmtG(lo, 4), fmtG(hi, 4))
	dist := "uniform"
	if p.Generate != nil && p.Generate.Dist != "" {
		dist = p.Generate.Dist
	}
	if dist == "normal" {
		return fmt.Sprintf("normal(mean %s, sd %s) truncated to %s", fmtG(p.Generate.Mean, 4), fmtG(p.Generate.SD, 4), on)
	}
	return dist + " on " + on
}

func findDesign(r *recovery.Report, name string) *models.Design {
	if r.StudyFile == nil {
		return nil
	}
	for i := range r.StudyFile.Designs {
		if r.StudyFile.Designs[i].Name == name {
			return &r.StudyFile.Designs[i]
		}
	}
	return nil
}

// designPage builds design di's part of the page.
func designPage(r *recovery.Report, di int, hypIndex map[string]int, specs map[string]models.Hypothesis) (designView, error) {
	d := &r.Designs[di]
	dv := designView{
		Name: d.Name, Measures: strings.Join(d.Measures, ", "), Participants: d.Participants, Trials: d.TrialsPerParticipant,
		Minutes: d.MinutesPerParticipant, ITI: fmtITI(d.ITIms), Verdict: d.Verdict, Tradeoffs: d.Tradeoffs, Mimicry: d.Mimicry,
		Health: d.FitFailures, Surrogate: d.Surrogate,
	}
	if sd := findDesign(r, d.Name); sd != nil {
		dv.CTIs = joinInts(sd.CTIms)
		if sd.Validity > 0 {
			dv.Validity = fmtG(sd.Validity, 3)
		}
	} else if len(d.Predictions) > 0 {
		dv.CTIs = joinInts(d.Predictions[0].CTIms)
	}
	for _, rk := range r.Ranking {
		dv.Ranked = dv.Ranked || rk.Design == d.Name
	}
	names := r.Hypotheses
	for _, crit := range recovery.Criteria {
		cr, ok := d.Criteria[crit]
		if !ok {
			continue
		}
		n := 0
		for _, x := range cr.Datasets {
			n += x
		}
		dv.Criteria = append(dv.Criteria, criterionRow{Name: crit.Label(), Rate: cr.RecoveryRate, MIBits: cr.MIBits, NormMI: cr.NormalizedMI, Datasets: n})
	}
	if cr, ok := d.Criteria[recovery.BICCriterion]; ok && len(cr.Confusion) == len(names) && len(names) > 0 {
		var err error
		dv.Confusion, err = heatmapChart(heatmapSpec{
			Label: "Confusion matrix under BIC for design " + d.Name, Names: names, P: cr.Confusion, Counts: cr.Counts, N: cr.Datasets,
			Lo: cr.CILow, Hi: cr.CIHigh, XLabel: "winning candidate", YLabel: "generating hypothesis",
		})
		if err != nil {
			return dv, err
		}
		if len(cr.Inversion) == len(names) {
			dv.Inversion, err = heatmapChart(heatmapSpec{
				Label: "Inversion matrix under BIC for design " + d.Name, Names: names, P: cr.Inversion,
				XLabel: "winning candidate", YLabel: "generating hypothesis",
			})
			if err != nil {
				return dv, err
			}
		}
		for g, name := range names {
			gh := generatorHealth{Hypothesis: name}
			if g < len(cr.Datasets) {
				gh.Datasets = cr.Datasets[g]
			}
			if g < len(cr.Failures) {
				gh.NoWinner = cr.Failures[g]
			}
			dv.PerGenerator = append(dv.PerGenerator, gh)
		}
	}
	// Parameter recovery: one scatter per (hypothesis, parameter), in the
	// order of the summary table.
	points := map[[2]string]recovery.RecoveryPoints{}
	for _, rp := range d.Recovery {
		points[[2]string{rp.Hypothesis, rp.Parameter}] = rp
	}
	for _, pr := range d.ParamRecovery {
		rp, ok := points[[2]string{pr.Hypothesis, pr.Parameter}]
		sv := scatterView{P: pr}
		if ok {
			log := false
			if h, ok := specs[pr.Hypothesis]; ok {
				if p, ok := h.Params[pr.Parameter]; ok && p.Generate != nil && p.Generate.Dist == "loguniform" {
					log = true
				}
			}
			for _, e := range rp.Estimate {
				if !finite(float64(e)) {
					sv.Fails++
				}
			}
			chart, err := scatterChart(scatterSpec{
				Label: fmt.Sprintf("%s: %s, true against estimated", pr.Hypothesis, pr.Parameter),
				Title: shortName(pr.Hypothesis, 24) + " · " + pr.Parameter,
				Truth: rp.Truth, Estimate: rp.Estimate, Min: float64(rp.Min), Max: float64(rp.Max), Log: log, Flat: pr.Flat,
				Colour: hypColour(hypIndex[pr.Hypothesis]),
			})
			if err != nil {
				return dv, err
			}
			sv.Chart = chart
		}
		dv.Scatters = append(dv.Scatters, sv)
	}
	if d.Group != nil {
		gv, err := groupPage(r, d, names)
		if err != nil {
			return dv, err
		}
		dv.Group = gv
	}
	if err := predictionCharts(&dv, d.Predictions, hypIndex); err != nil {
		return dv, err
	}
	return dv, nil
}

// fmtITI writes an inter-trial interval in seconds, or a dash for a
// report made before designs recorded it.
func fmtITI(ms int) string {
	if ms <= 0 {
		return "—"
	}
	return fmtG(float64(ms)/1000, 3) + " s"
}

// itiNote names the designs' inter-trial intervals: "1 s in every
// design", or each design's.
// gradedNote lists the designs whose agent has precision_sd > 0, with
// their σ ("lamp-behaviour (0.2) and lamp-behaviour-eeg (0.2)"), or
// returns "" when there are none.
func gradedNote(ds []recovery.DesignReport) string {
	var parts []string
	for _, d := range ds {
		if d.PrecisionSD > 0 {
			parts = append(parts, fmt.Sprintf("%s (%s)", d.Name, fmtG(d.PrecisionSD, 3)))
		}
	}
	switch len(parts) {
	case 0:
		return ""
	case 1:
		return parts[0]
	}
	return strings.Join(parts[:len(parts)-1], ", ") + " and " + parts[len(parts)-1]
}

func itiNote(ds []recovery.DesignReport) string {
	if len(ds) == 0 {
		return "—"
	}
	same := true
	for _, d := range ds {
		same = same && d.ITIms == ds[0].ITIms
	}
	if same {
		if len(ds) == 1 {
			return fmtITI(ds[0].ITIms)
		}
		return fmtITI(ds[0].ITIms) + " in every design"
	}
	parts := make([]string, len(ds))
	for i, d := range ds {
		parts[i] = fmtITI(d.ITIms) + " for " + d.Name
	}
	return strings.Join(parts, ", ")
}

// rankingView is the ranking table: one row per design in rank order,
// one cell per figure with its 95% bootstrap interval, the objective's
// figure marked.
type rankingView struct {
	Objective string // in words
	Headers   []rankHeader
	Rows      []rankRow
	Bootstrap string // how the intervals were made, or "" without them
	Cheapest  bool   // show the reaches-target column
	Target    string
}

type rankHeader struct {
	Label     string
	Objective bool
}

type rankRow struct {
	Rank    int
	Design  string
	Best    bool
	Cells   []rankCell
	Diff    rankCell
	Trials  int
	Minutes float64
	Reaches string
}

type rankCell struct {
	Value, Interval string
	Objective       bool
}

// rankFigures are the ranking's figures in table order: JSON name, header,
// digits (0: two decimals), and the row's value and interval.
var rankFigures = []struct {
	name, label string
	perMinute   bool
	get         func(*recovery.DesignRank) (recovery.NullFloat, recovery.Bounds)
}{
	{"normalized_mi", "normalised MI", false, func(r *recovery.DesignRank) (recovery.NullFloat, recovery.Bounds) {
		return r.NormalizedMI, r.NormalizedMIInterval
	}},
	{"worst_diagonal", "worst diagonal", false, func(r *recovery.DesignRank) (recovery.NullFloat, recovery.Bounds) {
		return r.WorstDiagonal, r.WorstDiagonalInterval
	}},
	{"recovery_rate", "recovery rate", false, func(r *recovery.DesignRank) (recovery.NullFloat, recovery.Bounds) {
		return r.RecoveryRate, r.RecoveryRateInterval
	}},
	{"parameter_r", "parameter r", false, func(r *recovery.DesignRank) (recovery.NullFloat, recovery.Bounds) {
		return r.ParameterR, r.ParameterRInterval
	}},
	{"normalized_mi_per_minute", "normalised MI per minute", true, func(r *recovery.DesignRank) (recovery.NullFloat, recovery.Bounds) {
		return r.NormalizedMIPerMinute, r.NormalizedMIPerMinuteInterval
	}},
}

// rankObjectives names each ranking objective on the page.
var rankObjectives = map[string]string{
	models.ObjectiveInformation:          "normalised mutual information under BIC",
	models.ObjectiveInformationPerMinute: "normalised mutual information under BIC per minute of testing",
	models.ObjectiveWorstRecovery:        "the worst diagonal of the BIC confusion matrix",
	models.ObjectiveCheapestReaching:     "the fewest minutes per participant among designs whose BIC recovery rate reaches the target",
}

func newRankingView(r *recovery.Report) *rankingView {
	if len(r.Ranking) == 0 {
		return nil
	}
	rows := append([]recovery.DesignRank(nil), r.Ranking...)
	sort.SliceStable(rows, func(a, b int) bool { return rows[a].Rank < rows[b].Rank })
	v := &rankingView{}
	figure := ""
	if m := r.RankedBy; m != nil {
		figure = m.Figure
		v.Objective = rankObjectives[m.Objective]
		if v.Objective == "" {
			v.Objective = m.Objective
		}
		v.Cheapest = m.Objective == models.ObjectiveCheapestReaching
		v.Target = fmtProb(m.Target)
		if m.BootstrapRounds > 0 {
			pairing := "the same participants resampled for every design"
			if !m.Paired {
				pairing = "not paired: the designs' participant counts differ"
			}
			v.Bootstrap = fmt.Sprintf("%s%% percentile interval from a bootstrap over the synthetic participants (%d rounds, %s)", fmtG(100*m.Level, 3), m.BootstrapRounds, pairing)
		}
	}
	fmtFig := func(x recovery.NullFloat, perMinute bool) string {
		if perMinute {
			return fmtG(float64(x), 3)
		}
		return fmtProb(float64(x))
	}
	interval := func(iv recovery.Bounds, perMinute bool) string {
		if !finite(float64(iv.Low)) || !finite(float64(iv.High)) {
			return ""
		}
		return fmtFig(iv.Low, perMinute) + " to " + fmtFig(iv.High, perMinute)
	}
	objPerMinute := false
	for _, f := range rankFigures {
		v.Headers = append(v.Headers, rankHeader{Label: f.label, Objective: f.name == figure})
		if f.name == figure {
			objPerMinute = f.perMinute
		}
	}
	for i := range rows {
		row := &rows[i]
		rr := rankRow{Rank: row.Rank, Design: row.Design, Best: row.Design == r.Preferred, Trials: row.TrialsPerParticipant, Minutes: row.MinutesPerParticipant}
		for _, f := range rankFigures {
			x, iv := f.get(row)
			rr.Cells = append(rr.Cells, rankCell{Value: fmtFig(x, f.perMinute), Interval: interval(iv, f.perMinute), Objective: f.name == figure})
		}
		if row.Rank > 1 {
			rr.Diff = rankCell{Value: fmtFig(row.DifferenceToFirst, objPerMinute), Interval: interval(row.DifferenceInterval, objPerMinute)}
		} else {
			rr.Diff = rankCell{Value: "—"}
		}
		if row.ReachesTarget != nil {
			rr.Reaches = "no"
			if *row.ReachesTarget {
				rr.Reaches = "yes"
			}
		}
		v.Rows = append(v.Rows, rr)
	}
	return v
}

func joinInts(x []int) string {
	s := make([]string, len(x))
	for i, v := range x {
		s[i] = strconv.Itoa(v)
	}
	return strings.Join(s, ", ")
}

// groupPage draws the group recovery curves: Recovery[g][k] is the share
// of replicate groups of size GroupSizes[k] recovering generator g.
func groupPage(r *recovery.Report, d *recovery.DesignReport, names []string) (*groupView, error) {
	g := d.Group
	gv := &groupView{Replicates: g.Replicates, Sizes: joinInts(g.GroupSizes), Summary: g.Summary, Notes: g.Notes,
		BMSRuns: g.BMSRuns, Quadratures: g.Quadratures, NotConverged: g.NotConverged}
	rows := g.Generators
	if len(rows) == 0 {
		rows = names
	}
	colour := map[string]int{}
	for i, n := range names {
		colour[n] = i
	}
	target, threshold := g.TargetRate, g.PXPThreshold
	if r.StudyFile != nil {
		if target <= 0 {
			target = r.StudyFile.Replication.TargetRate
		}
		if threshold <= 0 {
			threshold = r.StudyFile.Replication.PXPThreshold
		}
	}
	var hline *float64
	if target > 0 {
		hline = &target
		gv.Target = fmtPct(target)
	}
	if threshold > 0 {
		gv.Threshold = fmtG(threshold, 3)
	}
	// Sizes above half of some pool are marked: a * on the axis, a ring
	// around the points, a star in the table's heading, and a note each.
	flagged := map[int]bool{}
	for _, f := range g.Flags {
		flagged[f.GroupSize] = true
		fv := groupFlagView{N: f.GroupSize, Reason: f.Reason}
		if len(f.Generators) < len(rows) {
			fv.Generators = strings.Join(f.Generators, ", ")
		}
		gv.Flags = append(gv.Flags, fv)
	}
	xs := make([]float64, len(g.GroupSizes))
	labels := make([]string, len(g.GroupSizes))
	for k, n := range g.GroupSizes {
		xs[k] = float64(n)
		labels[k] = strconv.Itoa(n)
		if flagged[n] {
			labels[k] += "*"
		}
		gv.Columns = append(gv.Columns, groupColumn{N: n, Flagged: flagged[n]})
	}
	// Shift each generator's points a little sideways so that interval
	// bars at the same group size stay apart.
	span := 1.0
	if len(xs) > 1 {
		span = xs[len(xs)-1] - xs[0]
	}
	var series []lineSeries
	for gi := range g.Recovery {
		if gi >= len(rows) {
			break
		}
		sr := lineSeries{Colour: hypColour(colour[rows[gi]]), Markers: true}
		off := (float64(gi) - float64(len(g.Recovery)-1)/2) * 0.012 * span
		for k := range g.Recovery[gi] {
			if k >= len(xs) {
				break
			}
			sr.X = append(sr.X, xs[k]+off)
			sr.Y = append(sr.Y, float64(g.Recovery[gi][k]))
			sr.Hollow = append(sr.Hollow, flagged[g.GroupSizes[k]])
			lo, hi := math.NaN(), math.NaN()
			if gi < len(g.CILow) && k < len(g.CILow[gi]) {
				lo = float64(g.CILow[gi][k])
			}
			if gi < len(g.CIHigh) && k < len(g.CIHigh[gi]) {
				hi = float64(g.CIHigh[gi][k])
			}
			sr.Lo, sr.Hi = append(sr.Lo, lo), append(sr.Hi, hi)
		}
		series = append(series, sr)
	}
	zero, one := 0.0, 1.0
	chart, err := lineChart(lineSpec{
		Label: "Group recovery against group size for design " + d.Name, XLabel: "participants per group",
		YLabel: "share of groups recovering the generator", Series: series, YMin: &zero, YMax: &one, XTicks: xs, XTickLabels: labels, HLine: hline, W: 380, H: 250,
	})
	if err != nil {
		return nil, err
	}
	gv.Chart = chart
	// The group-level confusion at the largest size that was run.
	for k := len(g.Confusion) - 1; k >= 0 && k < len(g.GroupSizes); k-- {
		m := g.Confusion[k]
		if len(m) != len(rows) || len(rows) == 0 || !finite(float64(m[0][0])) {
			continue
		}
		gv.ConfusionN = g.GroupSizes[k]
		gv.Confusion, err = heatmapChart(heatmapSpec{
			Label: fmt.Sprintf("Group-level confusion at %d participants for design %s", g.GroupSizes[k], d.Name), Names: rows, P: m,
			XLabel: "winning candidate (protected exceedance)", YLabel: "generating hypothesis",
		})
		if err != nil {
			return nil, err
		}
		break
	}
	maxN := 0
	for _, n := range g.GroupSizes {
		maxN = max(maxN, n)
	}
	for gi, name := range rows {
		row := sampleRow{Hypothesis: name, Colour: hexColour(hypColour(colour[name])), N: "—"}
		for k := range g.GroupSizes {
			row.Cells = append(row.Cells, groupCellAt(g, gi, k))
		}
		if n, ok := g.SampleSize[name]; ok {
			if n != nil {
				row.N = strconv.Itoa(*n)
			} else {
				row.N = fmt.Sprintf("not reached by %d", maxN)
			}
		}
		gv.Rows = append(gv.Rows, row)
	}
	return gv, nil
}

// groupCellAt formats generator gi's rate at the k-th group size: the
// rate, its interval and the effective number of replicates, each "—"
// where the report has none.
func groupCellAt(g *recovery.GroupReport, gi, k int) groupCellView {
	at := func(m [][]recovery.NullFloat) float64 {
		if gi < len(m) && k < len(m[gi]) {
			return float64(m[gi][k])
		}
		return math.NaN()
	}
	rate := at(g.Recovery)
	if !finite(rate) {
		return groupCellView{Rate: "—"}
	}
	c := groupCellView{Rate: fmtPct(rate)}
	if lo, hi := at(g.CILow), at(g.CIHigh); finite(lo) && finite(hi) {
		c.Interval = strings.TrimSuffix(fmtPct(lo), "%") + "–" + fmtPct(hi)
	}
	if e := at(g.EffectiveReplicates); finite(e) {
		if e >= 10 {
			c.Effective = strconv.FormatFloat(math.Round(e), 'f', 0, 64)
		} else {
			c.Effective = strconv.FormatFloat(e, 'f', 1, 64)
		}
	}
	return c
}

// predictionSeries holds every hypothesis's prediction curves, in the
// styles all pages share: valid cue solid with circles, invalid cue dashed
// with triangles, censored points ringed.
type predictionSeries struct {
	RT, Acc, Mis []lineSeries
	CTIs         []float64 // every CTI of the design, ascending (the x ticks)
	Longest      int       // the longest CTI in ms
	LongestIndex int       // its index in cti_ms
	BinMs        int
}

// newPredictionSeries builds the curves; colour gives hypothesis i's colour.
func newPredictionSeries(preds []models.HypothesisPrediction, colour func(i int, name string) color.RGBA) predictionSeries {
	var ps predictionSeries
	seen := map[int]bool{}
	for i, hp := range preds {
		c := colour(i, hp.Name)
		x := make([]float64, len(hp.CTIms))
		for j, v := range hp.CTIms {
			x[j] = float64(v)
			if !seen[v] {
				seen[v] = true
				ps.CTIs = append(ps.CTIs, float64(v))
			}
			if v > ps.Longest {
				ps.Longest, ps.LongestIndex = v, j
			}
		}
		if hp.Neural.BinMs > 0 {
			ps.BinMs = hp.Neural.BinMs
		}
		// cti_ms need not be ascending; a line joins its points by CTI.
		ord := ascendingOrder(hp.CTIms)
		pick := func(v []float64) []float64 { return permuteFloats(v, ord) }
		// A point is ringed where at least half its trials are censored.
		pickB := func(v []float64) []bool {
			if v == nil {
				return nil
			}
			b := make([]bool, len(v))
			for i, x := range v {
				b[i] = x >= 0.5
			}
			return permuteBools(b, ord)
		}
		xs := pick(x)
		ps.RT = append(ps.RT,
			lineSeries{X: xs, Y: pick(hp.Valid.RTms), Hollow: pickB(hp.Censored.Valid), Colour: c, Markers: true},
			lineSeries{X: xs, Y: pick(hp.Invalid.RTms), Hollow: pickB(hp.Censored.Invalid), Colour: c, Dashed: true, Markers: true, Glyph: draw.TriangleGlyph{}})
		ps.Acc = append(ps.Acc,
			lineSeries{X: xs, Y: pick(hp.Valid.Accuracy), Colour: c, Markers: true},
			lineSeries{X: xs, Y: pick(hp.Invalid.Accuracy), Colour: c, Dashed: true, Markers: true, Glyph: draw.TriangleGlyph{}})
		ps.Mis = append(ps.Mis,
			lineSeries{X: xs, Y: pick(hp.Invalid.Misdirected), Colour: c, Dashed: true, Markers: true, Glyph: draw.TriangleGlyph{}})
	}
	sort.Float64s(ps.CTIs)
	return ps
}

// neuralAt returns every hypothesis's neural signal before the target at CTI
// index c: bin b covers [b·B, (b+1)·B) ms after cue onset and is drawn at
// its middle.
func neuralAt(preds []models.HypothesisPrediction, c int, colour func(i int, name string) color.RGBA) []lineSeries {
	var out []lineSeries
	for i, hp := range preds {
		if c >= len(hp.Neural.ByCTI) || len(hp.Neural.ByCTI[c]) == 0 || hp.Neural.BinMs <= 0 {
			continue
		}
		bins := hp.Neural.ByCTI[c]
		t := make([]float64, len(bins))
		for b := range bins {
			t[b] = (float64(b) + 0.5) * float64(hp.Neural.BinMs)
		}
		out = append(out, lineSeries{X: t, Y: bins, Colour: colour(i, hp.Name), Markers: len(bins) <= 12})
	}
	return out
}

// ascendingOrder returns the indices of v sorted by value.
func ascendingOrder(v []int) []int {
	ord := make([]int, len(v))
	for i := range ord {
		ord[i] = i
	}
	sort.SliceStable(ord, func(a, b int) bool { return v[ord[a]] < v[ord[b]] })
	return ord
}

func permuteFloats(v []float64, ord []int) []float64 {
	out := make([]float64, 0, len(ord))
	for _, i := range ord {
		if i < len(v) {
			out = append(out, v[i])
		}
	}
	return out
}

func permuteBools(v []bool, ord []int) []bool {
	if v == nil {
		return nil
	}
	out := make([]bool, len(ord))
	for k, i := range ord {
		out[k] = i < len(v) && v[i]
	}
	return out
}

// predictionCharts draws RT and accuracy by CTI (valid solid, invalid
// dashed) and the neural signal before the longest CTI's target.
func predictionCharts(dv *designView, preds []models.HypothesisPrediction, hypIndex map[string]int) error {
	if len(preds) == 0 {
		return nil
	}
	ps := newPredictionSeries(preds, func(_ int, name string) color.RGBA { return hypColour(hypIndex[name]) })
	dv.LongestCTI = ps.Longest
	var err error
	if dv.PredRT, err = lineChart(lineSpec{Label: "Predicted RT by CTI for design " + dv.Name, Title: "response time",
		XLabel: "cue–target interval (ms)", YLabel: "RT from target onset (ms)", Series: ps.RT, XTicks: ps.CTIs}); err != nil {
		return err
	}
	zero, one := 0.0, 1.0
	if dv.PredAcc, err = lineChart(lineSpec{Label: "Predicted accuracy by CTI for design " + dv.Name, Title: "accuracy",
		XLabel: "cue–target interval (ms)", YLabel: "P(correct report)", Series: ps.Acc, XTicks: ps.CTIs, YMin: &zero, YMax: &one}); err != nil {
		return err
	}
	neural := neuralAt(preds, ps.LongestIndex, func(_ int, name string) color.RGBA { return hypColour(hypIndex[name]) })
	if len(neural) > 0 && ps.BinMs > 0 {
		if dv.PredNeural, err = lineChart(lineSpec{Label: "Predicted neural signal before the longest CTI for design " + dv.Name,
			Title: fmt.Sprintf("neural signal, CTI %d ms", ps.Longest), XLabel: "time from cue onset (ms)",
			YLabel: "expected precision − baseline", Series: neural}); err != nil {
			return err
		}
	}
	return nil
}
