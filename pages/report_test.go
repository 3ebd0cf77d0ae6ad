package pages

import (
	"bytes"
	"context"
	"encoding/xml"
	"fmt"
	"image/color"
	"io"
	"math"
	"regexp"
	"strings"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"

	"discrimen/models"
	"discrimen/recovery"
)

// htmlScript is a hypothesis name that must come out escaped everywhere.
const htmlScript = `switch<script>alert(1)</script>`

// htmlSections are the ids and headings every full report has, in order.
var htmlSections = []struct{ id, title string }{
	{"study", "Study"},
	{"verdict", "Verdict"},
	{"who-wins", "Who wins"},
	{"who-generated", "Who generated"},
	{"parameters", "Recovering parameters"},
	{"look-alikes", "Look-alikes"},
	{"group", "Group analysis"},
	{"predictions", "What each hypothesis predicts"},
	{"fit-health", "Fit health"},
	{"method", "Method notes"},
	{"limits", "What a simulation can and cannot promise"},
}

// numMatrix converts a float matrix to the report's numbers.
func numMatrix(rows [][]float64) [][]recovery.NullFloat {
	out := make([][]recovery.NullFloat, len(rows))
	for i, r := range rows {
		out[i] = make([]recovery.NullFloat, len(r))
		for j, v := range r {
			out[i][j] = recovery.NullFloat(v)
		}
	}
	return out
}

func htmlMatrix(rows ...[]float64) [][]recovery.NullFloat { return numMatrix(rows) }

func ptr[T any](v T) *T { return &v }

// htmlDesign is one hand-made design report over the hypotheses flat,
// ramp and htmlScript, with 6 synthetic participants per generator.
func htmlDesign(name string, measures []string, group bool) recovery.DesignReport {
	names := []string{"flat", "ramp", htmlScript}
	conf := htmlMatrix([]float64{1, 0, 0}, []float64{0, 5.0 / 6, 1.0 / 6}, []float64{0, 2.0 / 6, 4.0 / 6})
	counts := htmlMatrix([]float64{6, 0, 0}, []float64{0, 5, 1}, []float64{0, 2, 4})
	lo, hi := make([][]float64, 3), make([][]float64, 3)
	for i := range lo {
		lo[i], hi[i] = make([]float64, 3), make([]float64, 3)
		for j := range lo[i] {
			lo[i][j], hi[i][j] = recovery.WilsonInterval(float64(counts[i][j]), 6)
		}
	}
	inv := htmlMatrix([]float64{1, 0, 0}, []float64{0, 5.0 / 7, 0.2}, []float64{0, 2.0 / 7, 0.8})
	crit := recovery.CriterionReport{Confusion: conf, Counts: counts, CILow: numMatrix(lo), CIHigh: numMatrix(hi), Inversion: inv,
		RecoveryRate: recovery.NullFloat((1 + 5.0/6 + 4.0/6) / 3), MIBits: 0.98, NormalizedMI: 0.62, Datasets: []int{6, 6, 6}, Failures: []int{0, 0, 0}}
	aic := crit
	aic.RecoveryRate = 0.83
	truth := []recovery.NullFloat{0.5, 1, 1.5, 2, 2.5, 3}
	est := []recovery.NullFloat{0.6, 0.9, 1.7, 2.1, recovery.NullFloat(math.NaN()), 2.8}
	d := recovery.DesignReport{
		Name: name, Measures: measures, Participants: 6, TrialsPerParticipant: 90, MinutesPerParticipant: 4.65,
		Criteria: map[recovery.Criterion]recovery.CriterionReport{"bic": crit, "aic": aic, "aicc": crit},
		ParamRecovery: []recovery.ParamRecoveryReport{
			{Hypothesis: "flat", Parameter: "level", N: 6, R: 0.6, Bias: 0.094, RMSE: 0.335, Slope: 0.75, Coverage: 1, MedianSE: 0.16, ReliableSEs: 3},
			{Hypothesis: "ramp", Parameter: "slope", N: 5, R: 0.95, Bias: -0.04, RMSE: 0.26, Slope: 1.25, Coverage: 0.25, MedianSE: 0.1, ReliableSEs: 4},
			{Hypothesis: htmlScript, Parameter: "width", N: 6, R: -0.09, Bias: 0.002, RMSE: 0.07, Slope: -0.12, Coverage: 1, Flat: true, MedianSE: 0.03, ReliableSEs: 1},
		},
		Recovery: []recovery.RecoveryPoints{
			{Hypothesis: "flat", Parameter: "level", Min: 0.3, Max: 1.5, Truth: []recovery.NullFloat{0.4, 0.7, 0.9, 1.1, 1.3, 1.45}, Estimate: []recovery.NullFloat{0.5, 0.6, 1.0, 1.0, 1.2, 1.5}},
			{Hypothesis: "ramp", Parameter: "slope", Min: 0.5, Max: 3, Truth: truth, Estimate: est},
			{Hypothesis: htmlScript, Parameter: "width", Min: 0.05, Max: 0.3, Truth: []recovery.NullFloat{0.06, 0.1, 0.15, 0.2, 0.25, 0.29}, Estimate: []recovery.NullFloat{0.2, 0.1, 0.28, 0.07, 0.15, 0.2}},
		},
		Tradeoffs: []recovery.TradeoffReport{{Hypothesis: htmlScript, A: "midpoint", B: "width", R: 0.72, N: 6}},
		Mimicry: []recovery.MimicryReport{
			{A: "flat", B: "ramp", WhenA: recovery.QuantilesReport{N: 6, Mean: -6, Q05: -11.1, Q25: -8.8, Q50: -5.81, Q75: -1.5, Q95: -0.76}, WhenB: recovery.QuantilesReport{N: 6, Mean: 40, Q05: 21.7, Q25: 34.2, Q50: 40.1, Q75: 52.6, Q95: 53.2}},
			{A: "ramp", B: htmlScript, WhenA: recovery.QuantilesReport{N: 6, Mean: -8, Q05: -9.6, Q25: -8.9, Q50: -8.03, Q75: -4.7, Q95: -2.6}, WhenB: recovery.QuantilesReport{N: 6, Mean: -3, Q05: -8.7, Q25: -4.4, Q50: -3.14, Q75: -1.9, Q95: 1.6}},
		},
		FitFailures: recovery.FitFailures{Failed: 1, NotConverged: 2, Total: 54},
		Surrogate:   []recovery.SurrogateError{{Hypothesis: "ramp", Points: 40, GridNodes: 129, MaxRTms: 1.66, MedianRTms: 0.058, MaxAccuracy: 0.001, MaxNeural: 2e-4, MedianNeural: 1e-5}},
		Verdict:     []string{"Under BIC this design recovers the generating hypothesis in 83% of synthetic participants.", "It cannot reliably tell apart ramp and " + htmlScript + "."},
	}
	for i, n := range names {
		hp := models.HypothesisPrediction{Name: n, CTIms: []int{300, 600, 900},
			Valid:    models.ClassReadouts{RTms: []float64{110 - 10*float64(i), 60, 50}, Accuracy: []float64{0.9, 0.9, 0.9}},
			Invalid:  models.ClassReadouts{RTms: []float64{130, 110 + float64(i), 1500}, Accuracy: []float64{0.9, 0.5, 0.05}},
			Neural:   models.NeuralReadouts{BinMs: 100, ByCTI: [][]float64{{0, 0.1, 0.2}, {0, 0.1, 0.2, 0.3, 0.4, 0.5}, {0, 0.1 * float64(i), 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8}}},
			Censored: models.CensoredReadouts{Valid: []float64{0, 0, 0}, Invalid: []float64{0, 0, 1}},
		}
		d.Predictions = append(d.Predictions, hp)
	}
	if group {
		d.Group = &recovery.GroupReport{
			Generators: names, GroupSizes: []int{3, 6, 12}, Replicates: 20, PXPThreshold: 0.95, TargetRate: 0.8,
			Recovery:            htmlMatrix([]float64{0.5, 0.85, 0.95}, []float64{0.2, 0.4, 0.7}, []float64{0.1, 0.3, 0.45}),
			CILow:               htmlMatrix([]float64{0.3, 0.64, 0.76}, []float64{0.08, 0.22, 0.48}, []float64{0.03, 0.15, 0.26}),
			CIHigh:              htmlMatrix([]float64{0.7, 0.95, 0.99}, []float64{0.42, 0.61, 0.85}, []float64{0.3, 0.52, 0.65}),
			EffectiveReplicates: htmlMatrix([]float64{20, 4, 1}, []float64{15.4, 3.96, 1}, []float64{12, 4.04, 1}),
			Pool:                []int{12, 12, 12},
			Flags: []recovery.GroupFlag{{GroupSize: 12, Pool: 12, Generators: names,
				Reason: "N = 12 is above half the pool of 12: replicate groups overlap heavily (every replicate group is the whole pool)"}},
			Confusion: [][][]recovery.NullFloat{
				htmlMatrix([]float64{0.5, 0, 0}, []float64{0, 0.2, 0.1}, []float64{0, 0.2, 0.1}),
				htmlMatrix([]float64{0.85, 0, 0}, []float64{0, 0.4, 0.1}, []float64{0, 0.3, 0.3}),
				htmlMatrix([]float64{0.95, 0, 0}, []float64{0, 0.7, 0.1}, []float64{0, 0.35, 0.45}),
			},
			SampleSize: map[string]*int{"flat": ptr(6), "ramp": nil, htmlScript: nil},
			Summary:    []string{"6 participants suffice for flat", "no group size tried (3, 6, 12) reaches 80% for ramp"},
			Notes:      []string{"Replicates draw participants without replacement."},
			BMSRuns:    180, Quadratures: 3,
		}
	}
	return d
}

// htmlReport is a hand-made report: 3 hypotheses, 2 designs, group
// analysis on the first, and a ranking.
func htmlReport(group bool) *recovery.Report {
	lo, hi, v := 0.05, 0.3, 0.2
	study := &models.Study{Name: "radio watch <b>(invented)</b>", Seed: 7,
		Designs: []models.Design{{Name: "behaviour", CTIms: []int{300, 600, 900}, Validity: 0.75}},
		Hypotheses: []models.Hypothesis{
			{Name: "flat", Family: "constant", Params: map[string]models.Param{"level": {Min: ptr(0.3), Max: ptr(1.5)}}},
			{Name: "ramp", Family: "linear", Params: map[string]models.Param{"slope": {Min: ptr(0.5), Max: ptr(3.0), Generate: &models.Generate{Dist: "loguniform"}}}},
			{Name: htmlScript, Family: "logistic", Params: map[string]models.Param{"width": {Min: &lo, Max: &hi}, "midpoint": {Value: &v}}},
		},
		Replication: models.Replication{GroupSizes: []int{3, 6, 12}, Replicates: 20, PXPThreshold: 0.95, TargetRate: 0.8},
	}
	r := &recovery.Report{Study: study.Name, Seed: 7, Version: recovery.Version, Method: recovery.CurrentMethod(), Hypotheses: []string{"flat", "ramp", htmlScript},
		Families: []string{"constant", "linear", "logistic"}, StudyFile: study,
		Designs: []recovery.DesignReport{htmlDesign("behaviour", []string{"rt", "accuracy"}, group), htmlDesign("behaviour+eeg", []string{"rt", "accuracy", "eeg"}, false)},
	}
	r.Designs[0].ITIms, r.Designs[1].ITIms = 1000, 1500
	if group {
		iv := func(lo, hi float64) recovery.Bounds {
			return recovery.Bounds{Low: recovery.NullFloat(lo), High: recovery.NullFloat(hi)}
		}
		no, yes := false, true
		r.Ranking = []recovery.DesignRank{
			{Design: "behaviour+eeg", Rank: 2, Figure: 0.72, FigureInterval: iv(0.61, 0.8), DifferenceToFirst: 0.11, DifferenceInterval: iv(0.02, 0.2), ReachesTarget: &no,
				NormalizedMI: 0.55, NormalizedMIInterval: iv(0.45, 0.66), WorstDiagonal: 0.6, WorstDiagonalInterval: iv(0.4, 0.75), RecoveryRate: 0.72, RecoveryRateInterval: iv(0.61, 0.8),
				ParameterR: 0.7, ParameterRInterval: iv(0.6, 0.78), TrialsPerParticipant: 90, MinutesPerParticipant: 4.65, NormalizedMIPerMinute: 0.118, NormalizedMIPerMinuteInterval: iv(0.0968, 0.142)},
			{Design: "behaviour", Rank: 1, Figure: 0.83, FigureInterval: iv(0.74, 0.91), DifferenceInterval: iv(0, 0), ReachesTarget: &yes,
				NormalizedMI: 0.62, NormalizedMIInterval: iv(0.52, 0.73), WorstDiagonal: 0.67, WorstDiagonalInterval: iv(0.5, 0.83), RecoveryRate: 0.83, RecoveryRateInterval: iv(0.74, 0.91),
				ParameterR: 0.8, ParameterRInterval: iv(0.71, 0.86), TrialsPerParticipant: 90, MinutesPerParticipant: 4.65, NormalizedMIPerMinute: 0.133, NormalizedMIPerMinuteInterval: iv(0.112, 0.157)},
		}
		r.RankedBy = &recovery.RankingMethod{Objective: models.ObjectiveCheapestReaching, Target: 0.8, Figure: "recovery_rate", BootstrapRounds: 1000, Level: 0.95, Paired: true}
		r.Preferred = "behaviour"
		r.Verdict = "behaviour tells the hypotheses apart best for the same testing time."
	}
	return r
}

func renderHTML(t *testing.T, r *recovery.Report) string {
	t.Helper()
	b, err := Report(r)
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}

// sectionBody returns the text of the section with the given id.
func sectionBody(t *testing.T, page, id string) string {
	t.Helper()
	start := strings.Index(page, `<section id="`+id+`">`)
	if start < 0 {
		t.Fatalf("no section %q", id)
	}
	end := strings.Index(page[start:], "</section>")
	if end < 0 {
		t.Fatalf("section %q is not closed", id)
	}
	return page[start : start+end]
}

// htmlVoid lists the HTML elements that have no end tag.
var htmlVoid = map[string]bool{"meta": true, "br": true, "link": true, "img": true, "hr": true, "input": true}

// checkWellNested reads the page with encoding/xml in its lenient mode and
// checks that every element is closed by its own end tag.
func checkWellNested(t *testing.T, page string) {
	t.Helper()
	dec := xml.NewDecoder(strings.NewReader(page))
	dec.Strict = false
	dec.Entity = xml.HTMLEntity
	var stack []string
	elements := 0
	for {
		tok, err := dec.RawToken()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatalf("page does not parse: %v", err)
		}
		switch e := tok.(type) {
		case xml.StartElement:
			elements++
			if !htmlVoid[e.Name.Local] {
				stack = append(stack, e.Name.Local)
			}
		case xml.EndElement:
			if htmlVoid[e.Name.Local] {
				continue
			}
			if len(stack) == 0 || stack[len(stack)-1] != e.Name.Local {
				t.Fatalf("</%s> closes %v (line %d)", e.Name.Local, stack, lineOf(dec, page))
			}
			stack = stack[:len(stack)-1]
		}
	}
	if len(stack) != 0 {
		t.Fatalf("unclosed elements %v", stack)
	}
	if elements < 200 {
		t.Fatalf("only %d elements: the page is nearly empty", elements)
	}
}

func lineOf(dec *xml.Decoder, page string) int {
	return strings.Count(page[:min(int(dec.InputOffset()), len(page))], "\n") + 1
}

var svgFragment = regexp.MustCompile(`(?s)<svg .*?</svg>`)

// checkSVGs parses every inline SVG strictly as XML and returns how many
// there are and their text content.
func checkSVGs(t *testing.T, page string) (int, string) {
	t.Helper()
	frags := svgFragment.FindAllString(page, -1)
	var text strings.Builder
	for i, f := range frags {
		dec := xml.NewDecoder(strings.NewReader(f))
		root := ""
		for {
			tok, err := dec.Token()
			if err == io.EOF {
				break
			}
			if err != nil {
				t.Fatalf("SVG %d does not parse as XML: %v", i, err)
			}
			switch e := tok.(type) {
			case xml.StartElement:
				if root == "" {
					root = e.Name.Local
					if e.Name.Space != "http://www.w3.org/2000/svg" {
						t.Errorf("SVG %d namespace %q", i, e.Name.Space)
					}
					vb := false
					for _, a := range e.Attr {
						vb = vb || a.Name.Local == "viewBox"
					}
					if !vb {
						t.Errorf("SVG %d has no viewBox", i)
					}
				}
			case xml.CharData:
				text.Write(e)
				text.WriteByte('\n')
			}
		}
		if root != "svg" {
			t.Fatalf("fragment %d has root %q", i, root)
		}
	}
	return len(frags), text.String()
}

func TestHTMLReport(t *testing.T) {
	page := renderHTML(t, htmlReport(true))
	if !strings.HasPrefix(page, "<!DOCTYPE html>") || !strings.HasSuffix(strings.TrimSpace(page), "</html>") {
		t.Fatal("page is not a whole HTML document")
	}
	checkWellNested(t, page)

	// Every section, in order, with its heading.
	last := -1
	for _, s := range htmlSections {
		at := strings.Index(page, `<section id="`+s.id+`">`)
		if at < 0 {
			t.Fatalf("no section id %q", s.id)
		}
		if at < last {
			t.Errorf("section %q out of order", s.id)
		}
		last = at
		if !strings.Contains(sectionBody(t, page, s.id), "<h2>"+s.title+"</h2>") {
			t.Errorf("section %q lacks <h2>%s</h2>", s.id, s.title)
		}
	}

	// Charts: 2 designs × (confusion, inversion, 3 scatters, RT, accuracy,
	// neural) + the first design's group curves and group confusion.
	n, svgText := checkSVGs(t, page)
	if want := 2*8 + 2; n != want {
		t.Errorf("%d inline SVGs, want %d", n, want)
	}
	// A confusion cell as printed: P = 1/6 → 0.17 with 1 of 6 wins and its
	// Wilson interval.
	wins := sectionBody(t, page, "who-wins")
	loW, hiW := recovery.WilsonInterval(1, 6)
	for _, want := range []string{">0.17</text>", ">1/6</text>", fmt.Sprintf(">%.2f–%.2f</text>", loW, hiW), ">0.83</text>"} {
		if !strings.Contains(wins, want) {
			t.Errorf("who-wins lacks %q", want)
		}
	}
	// The criterion table: BIC recovery rate (1 + 5/6 + 4/6)/3 = 0.83, AIC's.
	if !regexp.MustCompile(`<td>AIC</td><td class="num">0.83</td>`).MatchString(wins) {
		t.Error("criterion table lacks AIC's recovery rate")
	}
	if !strings.Contains(sectionBody(t, page, "who-generated"), ">0.71</text>") {
		t.Error("inversion matrix lacks 5/7 = 0.71")
	}

	// No reference leaves the page, except namespace names.
	for _, m := range regexp.MustCompile(`https?://[^\s"'<>)]*`).FindAllString(page, -1) {
		if m != "http://www.w3.org/2000/svg" && m != "http://www.w3.org/1999/xhtml" {
			t.Errorf("external reference %q", m)
		}
	}
	for _, bad := range []string{"<script", "<link", "<img", "@import", "url("} {
		if strings.Contains(strings.ToLower(page), bad) {
			t.Errorf("page contains %q", bad)
		}
	}
	// The hostile name is escaped in the page and in the charts.
	if !strings.Contains(page, "switch&lt;script&gt;alert(1)&lt;/script&gt;") {
		t.Error("escaped hypothesis name missing from the page")
	}
	// Charts shorten long names; the decoded SVG text holds the name.
	if !strings.Contains(svgText, shortName(htmlScript, 22)) || !strings.Contains(svgText, "switch<script>") {
		t.Error("hypothesis name missing from the charts' text")
	}
	if strings.Contains(page, "<b>(invented)</b>") || !strings.Contains(page, "&lt;b&gt;(invented)&lt;/b&gt;") {
		t.Error("study name not escaped")
	}

	// Group analysis and ranking are rendered.
	grp := sectionBody(t, page, "group")
	for _, want := range []string{"not reached by 12", `<td class="num">6</td>`, "180 group analyses", "6 participants suffice for flat",
		// The flagged size: a note, a star in the heading, none on the others.
		`<li><span class="badge">N = 12*</span> N = 12 is above half the pool of 12: replicate groups overlap heavily (every replicate group is the whole pool).</li>`,
		`<th class="num">N = 6</th><th class="num">N = 12*</th>`,
		// flat at N = 6: rate, interval and effective replicates.
		`<td class="num">85% <span class="note">(64–95%)</span><br><span class="note">worth 4.0 studies</span></td>`,
		`<td class="num">45% <span class="note">(26–65%)</span><br><span class="note">worth 1.0 studies</span></td>`,
		"Ringed points and sizes marked * are above half the pool"} {
		if !strings.Contains(grp, want) {
			t.Errorf("group section lacks %q", want)
		}
	}
	// The chart marks the flagged size on its axis.
	if _, text := checkSVGs(t, grp); !strings.Contains(text, "12*") || strings.Contains(text, "6*") {
		t.Errorf("group chart's axis does not mark 12 (and only 12) with *: %q", text)
	}
	if !strings.Contains(sectionBody(t, page, "method"), "resamples each pool with replacement 200 times") {
		t.Error("method notes do not quote the bootstrap rounds")
	}
	verdict := sectionBody(t, page, "verdict")
	if !strings.Contains(verdict, `<tr class="best"><td class="num">1</td><td>behaviour</td>`) {
		t.Error("ranking table does not list the preferred design first")
	}
	if !strings.Contains(verdict, "Preferred design: behaviour.") {
		t.Error("preferred design missing")
	}
	// The ranking table: every figure with its bootstrap interval, the
	// objective's column (recovery rate) in bold, the paired difference to
	// rank 1, whether the target is reached.
	for _, want := range []string{
		"Ranked by the fewest minutes per participant among designs whose BIC recovery rate reaches the target of 0.80",
		"Under each figure: its 95% percentile interval from a bootstrap over the synthetic participants (1000 rounds, the same participants resampled for every design).",
		`<th class="num objective">recovery rate</th>`, `<th class="num">rank 1 minus this</th>`, `<th>reaches the target</th>`,
		`<td class="num objective">0.83<span class="ci">0.74 to 0.91</span></td>`,
		`<td class="num">0.62<span class="ci">0.52 to 0.73</span></td>`,
		`<td class="num">0.133<span class="ci">0.112 to 0.157</span></td>`,
		`<td class="num">0.11<span class="ci">0.02 to 0.20</span></td><td>no</td><td class="num">90</td><td class="num">4.7</td></tr>`,
		`<td class="num">—</td><td>yes</td>`,
	} {
		if !strings.Contains(verdict, want) {
			t.Errorf("verdict section lacks %q", want)
		}
	}
	// Each design's inter-trial interval in the study table and the notes.
	study := sectionBody(t, page, "study")
	for _, want := range []string{`<td>300, 600, 900</td><td class="num">1 s</td>`, `<td class="num">1.5 s</td>`, "inter-trial interval (1 s for behaviour, 1.5 s for behaviour&#43;eeg)"} {
		if !strings.Contains(study, want) {
			t.Errorf("study section lacks %q", want)
		}
	}
	// Parameter summaries, a failed fit, the flat flag and the method notes.
	params := sectionBody(t, page, "parameters")
	for _, want := range []string{"r = 0.95", "coverage = 25%", "1 failed", "poorly identified", "bias = −0.04"} {
		if !strings.Contains(params, want) {
			t.Errorf("parameters section lacks %q", want)
		}
	}
	method := sectionBody(t, page, "method")
	for _, want := range []string{"Akaike 1974", "Schwarz 1978", "eLife 8:e49547", "J. Math. Psychol. 48:28", "NeuroImage 46:1004", "NeuroImage 84:971", "(<code>iti_ms</code>): 1 s for behaviour, 1.5 s for behaviour&#43;eeg."} {
		if !strings.Contains(method, want) {
			t.Errorf("method notes lack %q", want)
		}
	}
	// A median ΔBIC that favours the non-generator is highlighted: when
	// htmlScript generates, ΔBIC(ramp − it) has median −3.14 < 0.
	if !strings.Contains(sectionBody(t, page, "look-alikes"), `<td class="num swap">−3.14</td>`) {
		t.Error("look-alike swap not highlighted")
	}
	if !strings.Contains(sectionBody(t, page, "study"), "midpoint = 0.2; width ∈ [0.05, 0.3], true values uniform on [0.05, 0.3]") {
		t.Error("parameter summary missing")
	}
}

// TestHTMLSkipsAbsentParts: without a group analysis or ranking those
// parts are left out, and the rest still renders.
func TestHTMLSkipsAbsentParts(t *testing.T) {
	page := renderHTML(t, htmlReport(false))
	checkWellNested(t, page)
	if strings.Contains(page, `id="group"`) || strings.Contains(page, "#group") {
		t.Error("group section rendered without a group report")
	}
	if strings.Contains(page, "Designs ranked") || strings.Contains(page, "Preferred design") {
		t.Error("ranking rendered without a ranking")
	}
	n, _ := checkSVGs(t, page)
	if n != 2*8 {
		t.Errorf("%d SVGs, want 16", n)
	}
	// A report without predictions or recovery points still renders.
	r := htmlReport(false)
	r.StudyFile = nil
	for i := range r.Designs {
		r.Designs[i].Predictions = nil
		r.Designs[i].Recovery = nil
		r.Designs[i].Criteria = map[recovery.Criterion]recovery.CriterionReport{}
	}
	page = renderHTML(t, r)
	checkWellNested(t, page)
	if n, _ := checkSVGs(t, page); n != 0 {
		t.Errorf("%d SVGs from a report without data", n)
	}
}

// TestHTMLMethodNotesReadReport: the method notes quote the report's own
// Method block, whatever the code's constants are, and say so when a
// report has none.
func TestHTMLMethodNotesReadReport(t *testing.T) {
	cases := []struct {
		name   string
		method recovery.Method
		want   []string
		not    []string
	}{
		{"this build", recovery.CurrentMethod(), []string{
			"from the 3 best grid nodes, at least two grid steps apart", "within 1 of the best one in −ln L", "costs more than 0.5 of ln L", "within 1.9207 = χ²₁(0.95)/2", "more than 1e−06 below it", "(in (0, 0.5))", "(in (−0.99, 0.99))",
			"steps of 1% of each range", "steps of half those", "by more than 20% between",
		}, []string{"does not record the constants"}},
		{"other settings", recovery.Method{Starts: 7, StartSpacing: 12, RescoreWindow: 2.5, LapseMax: 0.4, ARMax: 0.9,
			SERoughStep: 0.02, SEFineStep: 0.25, SEMaxChange: 0.3}, []string{
			"from the 7 best grid nodes, at least 12 grid steps apart", "within 2.5 of the best one in −ln L", "(in (0, 0.4))", "(in (−0.9, 0.9))",
			"steps of 2% of each range", "steps of 0.25 times those", "by more than 30% between",
		}, []string{"from the 3 best", "steps of half those", "does not record the constants"}},
		{"no method block", recovery.Method{}, []string{"does not record the constants of its method", "from the — best grid nodes", "(in (0, —))"},
			[]string{"from the 3 best"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			r := htmlReport(true)
			r.Method = c.method
			page := renderHTML(t, r)
			checkWellNested(t, page)
			method := sectionBody(t, page, "method")
			for _, w := range c.want {
				if !strings.Contains(method, w) {
					t.Errorf("method notes lack %q", w)
				}
			}
			for _, w := range c.not {
				if strings.Contains(method, w) {
					t.Errorf("method notes hold %q", w)
				}
			}
		})
	}
}

// TestHTMLITIFromDesigns: the notes on testing minutes quote each
// design's own iti_ms (not a method constant), as one value when the
// designs share it, and a dash for a report made before designs recorded
// it.
func TestHTMLITIFromDesigns(t *testing.T) {
	for _, c := range []struct {
		name   string
		a, b   int
		study  string
		method string
	}{
		{"different", 1000, 2500, "inter-trial interval (1 s for behaviour, 2.5 s for behaviour&#43;eeg)", "(<code>iti_ms</code>): 1 s for behaviour, 2.5 s for behaviour&#43;eeg."},
		{"shared", 1200, 1200, "inter-trial interval (1.2 s in every design)", "(<code>iti_ms</code>): 1.2 s in every design."},
		{"not recorded", 0, 0, "inter-trial interval (— in every design)", "(<code>iti_ms</code>): — in every design."},
	} {
		t.Run(c.name, func(t *testing.T) {
			r := htmlReport(true)
			r.Designs[0].ITIms, r.Designs[1].ITIms = c.a, c.b
			page := renderHTML(t, r)
			if !strings.Contains(sectionBody(t, page, "study"), c.study) {
				t.Errorf("study section lacks %q", c.study)
			}
			if !strings.Contains(sectionBody(t, page, "method"), c.method) {
				t.Errorf("method notes lack %q", c.method)
			}
			if got := strings.Count(sectionBody(t, page, "study"), `<td class="num">`+fmtITI(c.a)+`</td>`); got < 1 {
				t.Errorf("study table lacks the ITI column value %q", fmtITI(c.a))
			}
		})
	}
}

// TestHTMLGradedNote: the method notes state precision_sd and its cost
// for the designs that have it, and say nothing of it when none does (the
// deterministic agent's report is as before).
func TestHTMLGradedNote(t *testing.T) {
	r := htmlReport(true)
	if m := sectionBody(t, renderHTML(t, r), "method"); strings.Contains(m, "Trial-to-trial variability") {
		t.Errorf("deterministic designs: the method notes speak of trial-to-trial variability")
	}
	esc := func(s string) string { return strings.ReplaceAll(s, "+", "&#43;") } // as html/template writes it
	r.Designs[1].PrecisionSD = 0.2
	m := sectionBody(t, renderHTML(t, r), "method")
	for _, want := range []string{"<b>Trial-to-trial variability of precision.</b> In " + esc(r.Designs[1].Name) + " (0.2)", "about 50 times a deterministic one", "Ratcliff &amp; Tuerlinckx 2002"} {
		if !strings.Contains(m, want) {
			t.Errorf("method notes lack %q", want)
		}
	}
	r.Designs[0].PrecisionSD = 0.15
	if m := sectionBody(t, renderHTML(t, r), "method"); !strings.Contains(m, "In "+esc(r.Designs[0].Name)+" (0.15) and "+esc(r.Designs[1].Name)+" (0.2)") {
		t.Errorf("method notes do not list both designs with their precision_sd")
	}
}

func TestReportNilPanics(t *testing.T) {
	defer func() {
		if r := recover(); r == nil || !strings.HasPrefix(fmt.Sprint(r), "pages: Report") {
			t.Fatalf("recover() = %v, want a pages: panic", r)
		}
	}()
	_, _ = Report(nil)
}

func TestHTMLDeterministic(t *testing.T) {
	a, b := renderHTML(t, htmlReport(true)), renderHTML(t, htmlReport(true))
	if a != b {
		t.Fatal("two renderings of the same report differ")
	}
}

// TestHTMLFromRun renders a report from a tiny real run, so that the page
// is checked against what the engine produces (NaNs, nulls and all).
func TestHTMLFromRun(t *testing.T) {
	if testing.Short() {
		t.Skip("runs a small study")
	}
	s, err := models.LoadStudy([]byte(htmlTinyStudy))
	if err != nil {
		t.Fatal(err)
	}
	r, err := recovery.Run(context.Background(), s, recovery.Options{Workers: 2})
	if err != nil {
		t.Fatal(err)
	}
	page := renderHTML(t, r)
	checkWellNested(t, page)
	for _, sct := range htmlSections {
		if sct.id == "group" && r.Designs[0].Group == nil {
			continue
		}
		sectionBody(t, page, sct.id)
	}
	if _, err := checkSVGsCount(page); err != nil {
		t.Fatal(err)
	}
	// Each BIC confusion probability is printed in a cell.
	wins := sectionBody(t, page, "who-wins")
	for i, row := range r.Designs[0].Criteria["bic"].Confusion {
		for j, p := range row {
			if want := ">" + fmtProb(float64(p)) + "</text>"; !strings.Contains(wins, want) {
				t.Errorf("cell (%d, %d) = %s missing", i, j, want)
			}
		}
	}
}

func checkSVGsCount(page string) (int, error) {
	n := len(svgFragment.FindAllString(page, -1))
	if n == 0 {
		return 0, fmt.Errorf("no charts")
	}
	return n, nil
}

// htmlTinyStudy is an invented study small enough to run in seconds.
const htmlTinyStudy = `{
  "name": "berth numbers, tiny (invented)", "seed": 11,
  "designs": [{"name": "lamp", "cti_ms": [300, 600, 900], "trials_per_cti": 24, "participants": 6,
               "measures": ["rt", "accuracy", "eeg"]}],
  "hypotheses": [
    {"name": "steady", "family": "constant", "params": {"level": {"min": 0.3, "max": 1.5}}},
    {"name": "ramp", "family": "linear", "params": {"slope": {"min": 0.5, "max": 3, "generate": {"dist": "loguniform"}}}},
    {"name": "expect", "family": "hazard", "params": {"weber": {"min": 0.05, "max": 0.5}, "window": {"value": 0.2}}}
  ],
  "replication": {"group_sizes": [3, 6], "replicates": 10}
}`

func TestHeatColourAndContrast(t *testing.T) {
	// WCAG 2.1: black on white has contrast ratio 21, a colour with itself 1.
	if got := contrastRatio(color.RGBA{0, 0, 0, 255}, color.RGBA{255, 255, 255, 255}); !scalar.EqualWithinAbsOrRel(got, 21, 1e-12, 1e-12) {
		t.Errorf("contrast black/white = %v, want 21", got)
	}
	if got := contrastRatio(heatColour(0.3), heatColour(0.3)); !scalar.EqualWithinAbsOrRel(got, 1, 1e-12, 1e-12) {
		t.Errorf("contrast of a colour with itself = %v, want 1", got)
	}
	cases := []struct {
		name string
		v    float64
		want color.RGBA
	}{
		{"sand end takes dark text", 0, textDark},
		{"teal end takes white text", 1, textLight},
		{"pale sage at 0.4 takes dark text", 0.4, textDark},
		{"teal at 0.8 takes white text", 0.8, textLight},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			bg := heatColour(c.v)
			got := textOn(bg)
			if got != c.want {
				t.Errorf("textOn(%v) = %v, want %v", bg, got, c.want)
			}
			// WCAG AA asks 4.5 for small text; every cell clears it.
			if r := contrastRatio(bg, got); r < 4.5 {
				t.Errorf("contrast %v < 4.5", r)
			}
		})
	}
	// The scale darkens monotonically, so higher probability reads darker.
	prev := math.Inf(1)
	for i := 0; i <= 100; i++ {
		l := relativeLuminance(heatColour(float64(i) / 100))
		if l > prev+1e-12 {
			t.Fatalf("luminance rises at %d%%", i)
		}
		prev = l
	}
	// Every cell text colour clears 4.5 across the whole scale.
	for i := 0; i <= 100; i++ {
		bg := heatColour(float64(i) / 100)
		if r := contrastRatio(bg, textOn(bg)); r < 4.5 {
			t.Errorf("at %d%%: contrast %v < 4.5", i, r)
		}
	}
	// The 12 hypothesis colours are distinct.
	seen := map[color.RGBA]bool{}
	for i := range 12 {
		if seen[hypColour(i)] {
			t.Errorf("colour %d repeats", i)
		}
		seen[hypColour(i)] = true
	}
}

func TestNiceTicks(t *testing.T) {
	cases := []struct {
		name   string
		lo, hi float64
		want   []string
	}{
		{"unit probability", 0, 1, []string{"0.0", "0.2", "0.4", "0.6", "0.8", "1.0"}},
		{"neural range", -0.05, 1.6, []string{"0.0", "0.5", "1.0", "1.5"}},
		{"milliseconds", 40, 310, []string{"100", "200", "300"}},
		{"quarter steps", 0, 1.2, []string{"0.00", "0.25", "0.50", "0.75", "1.00"}},
		{"negative", -12, 3, []string{"−10", "−5", "0"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			var got []string
			for _, tk := range (niceTicks{}).Ticks(c.lo, c.hi) {
				if tk.Label != "" {
					got = append(got, tk.Label)
				}
			}
			if strings.Join(got, " ") != strings.Join(c.want, " ") {
				t.Errorf("labels %v, want %v", got, c.want)
			}
		})
	}
	if tk := (niceTicks{}).Ticks(1, 1); tk != nil {
		t.Errorf("empty range gave ticks %v", tk)
	}
}

func TestRenderSVGHeader(t *testing.T) {
	h, err := heatmapChart(heatmapSpec{Label: `a "quoted" <label>`, Names: []string{"a", "b"},
		P: htmlMatrix([]float64{1, 0}, []float64{0.25, 0.75})})
	if err != nil {
		t.Fatal(err)
	}
	s := string(h)
	if !strings.HasPrefix(s, `<svg class="chart" role="img" aria-label="a &#34;quoted&#34; &lt;label&gt;" width="`) {
		t.Errorf("header %q", s[:min(120, len(s))])
	}
	for _, bad := range []string{"<?xml", "<!--", "xlink"} {
		if strings.Contains(s, bad) {
			t.Errorf("chart contains %q", bad)
		}
	}
	if !bytes.Contains([]byte(s), []byte("'Liberation Sans',Arial")) {
		t.Error("chart font has no fallbacks")
	}
	if _, err := heatmapChart(heatmapSpec{Label: "ragged", Names: []string{"a", "b"}, P: htmlMatrix([]float64{1, 0}, []float64{1})}); err == nil {
		t.Error("ragged matrix accepted")
	}
}

// TestHTMLStudyWarningsAndGenerators: the Study section lists the study
// file's warnings, escaped, and states each generating distribution with
// its numbers; without warnings it has no warnings list.
func TestHTMLStudyWarningsAndGenerators(t *testing.T) {
	r := htmlReport(true)
	if strings.Contains(sectionBody(t, renderHTML(t, r), "study"), `class="warnings"`) {
		t.Error("a report without warnings lists warnings")
	}
	r.Warnings = []models.Problem{{Path: "hypotheses[1].params.midpoint", Problem: "midpoint range [200, 1200] s <beyond>"}}
	body := sectionBody(t, renderHTML(t, r), "study")
	if !strings.Contains(body, `<li><code>hypotheses[1].params.midpoint</code>: midpoint range [200, 1200] s &lt;beyond&gt;</li>`) {
		t.Errorf("warning missing or unescaped in the Study section:\n%s", body)
	}
	lo, hi := 0.05, 0.4
	cases := []struct {
		p    models.Param
		want string
	}{
		{models.Param{Min: &lo, Max: &hi}, "uniform on [0.05, 0.4]"},
		{models.Param{Min: &lo, Max: &hi, Generate: &models.Generate{Dist: "loguniform", Max: ptr(0.3)}}, "loguniform on [0.05, 0.3]"},
		{models.Param{Min: &lo, Max: &hi, Generate: &models.Generate{Dist: "normal", Mean: 0.2, SD: 0.1, Min: ptr(0.1)}}, "normal(mean 0.2, sd 0.1) truncated to [0.1, 0.4]"},
	}
	for _, c := range cases {
		if got := generateText(c.p); got != c.want {
			t.Errorf("generateText = %q, want %q", got, c.want)
		}
	}
}
