package pages

import (
	"fmt"
	"html/template"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"discrimen/models"
)

// predictionsStudy is the demo study with two hypotheses renamed to names
// that must come out escaped, and its EEG design.
func predictionsStudy(t *testing.T) (*models.Study, *models.Design) {
	t.Helper()
	data, err := os.ReadFile("../testdata/studies/radio-watch.json")
	if err != nil {
		t.Fatal(err)
	}
	s, err := models.LoadStudy(data)
	if err != nil {
		t.Fatal(err)
	}
	s.Hypotheses[1].Name = htmlScript
	s.Hypotheses[2].Name = `surge & "late"`
	designs, err := s.ExpandedDesigns()
	if err != nil {
		t.Fatal(err)
	}
	for i := range designs {
		if designs[i].Name == "lamp-behaviour-eeg" {
			return s, &designs[i]
		}
	}
	t.Fatal("demo study has no design lamp-behaviour-eeg")
	return nil, nil
}

func renderPredictions(t *testing.T, name string, d *models.Design, preds []models.HypothesisPrediction) string {
	t.Helper()
	b, err := Predictions(name, d, preds)
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}

func TestPredictionsPage(t *testing.T) {
	s, d := predictionsStudy(t)
	preds, err := models.PredictDesign(s, d, nil)
	if err != nil {
		t.Fatal(err)
	}
	page := renderPredictions(t, s.Name, d, preds)
	if keep := os.Getenv("DISCRIMEN_PREDICTIONS_PAGE"); keep != "" {
		if err := os.WriteFile(keep, []byte(page), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	if !strings.HasPrefix(page, "<!DOCTYPE html>") || !strings.HasSuffix(strings.TrimSpace(page), "</html>") {
		t.Fatal("page is not a whole HTML document")
	}
	checkWellNested(t, page)

	// Every section with its heading.
	for _, sc := range []struct{ id, title string }{
		{"design", "Design"}, {"parameters", "Parameters used"}, {"behaviour", "Response time and reports by CTI"},
		{"neural", "Neural signal at every CTI"}, {"numbers", "The numbers"},
	} {
		if !strings.Contains(sectionBody(t, page, sc.id), "<h2>"+sc.title+"</h2>") {
			t.Errorf("section %q lacks <h2>%s</h2>", sc.id, sc.title)
		}
	}

	// One SVG per chart: RT, accuracy, misdirected, and a neural panel for
	// each of the design's four CTIs, in that order.
	n, svgText := checkSVGs(t, page)
	if want := 3 + len(d.CTIms); n != want {
		t.Errorf("%d inline SVGs, want %d", n, want)
	}
	labels := regexp.MustCompile(`<svg class="chart" role="img" aria-label="([^"]*)"`).FindAllStringSubmatch(page, -1)
	want := []string{"Predicted RT by CTI", "Predicted accuracy by CTI", "Predicted misdirected reports by CTI"}
	for _, cti := range []int{300, 600, 900, 1200} {
		want = append(want, fmt.Sprintf("Predicted neural signal before the target at CTI %d ms", cti))
	}
	if len(labels) != len(want) {
		t.Fatalf("%d labelled charts, want %d", len(labels), len(want))
	}
	for i, w := range want {
		if got := labels[i][1]; got != w+" for design lamp-behaviour-eeg" {
			t.Errorf("chart %d is labelled %q, want %q", i, got, w+" for design lamp-behaviour-eeg")
		}
	}
	for _, cti := range d.CTIms {
		if !strings.Contains(svgText, fmt.Sprintf("CTI %d ms", cti)) {
			t.Errorf("no neural panel titled CTI %d ms", cti)
		}
	}

	// Every hypothesis name, escaped; the hostile one never raw.
	for _, h := range s.Hypotheses {
		esc := template.HTMLEscapeString(h.Name)
		if c := strings.Count(page, esc); c < 3 {
			t.Errorf("hypothesis %q appears escaped %d times, want at least 3 (legend, parameters, numbers)", h.Name, c)
		}
	}
	for _, bad := range []string{"<script", "<link", "<img", "@import", "url("} {
		if strings.Contains(strings.ToLower(page), bad) {
			t.Errorf("page contains %q", bad)
		}
	}
	// No reference leaves the page, except namespace names.
	for _, m := range regexp.MustCompile(`https?://[^\s"'<>)]*`).FindAllString(page, -1) {
		if m != "http://www.w3.org/2000/svg" && m != "http://www.w3.org/1999/xhtml" {
			t.Errorf("external reference %q", m)
		}
	}

	// The parameter table holds the values used. early-lift's tau is
	// loguniform on [0.05, 1], whose median is the geometric mean
	// √(0.05 · 1) = 0.2236.
	params := sectionBody(t, page, "parameters")
	if tau := math.Sqrt(0.05); !strings.Contains(params, "tau = "+fmtG(tau, 4)) || fmtG(tau, 4) != "0.2236" {
		t.Errorf("parameter table lacks tau = 0.2236:\n%s", params)
	}
	if !strings.Contains(params, "window = 0.2") {
		t.Error("parameter table lacks the fixed window = 0.2")
	}
	// The design summary and the criterion note.
	design := sectionBody(t, page, "design")
	for _, w := range []string{"<dt>streams</dt><dd>3</dd>", "<dt>possible items</dt><dd>8</dd>", "<dt>cue validity</dt><dd>0.75</dd>",
		"<dt>CTIs (ms)</dt><dd>300, 600, 900, 1200</dd>", "<dt>measures</dt><dd>rt, accuracy, eeg</dd>"} {
		if !strings.Contains(design, w) {
			t.Errorf("design summary lacks %q", w)
		}
	}
	behaviour := sectionBody(t, page, "behaviour")
	if !strings.Contains(behaviour, "by construction") || !strings.Contains(behaviour, "stopping criterion ("+fmtG(d.Agent.Criterion, 3)+")") {
		t.Error("behaviour section lacks the note that valid accuracy sits at the criterion")
	}
	if !strings.Contains(page, "An invented scenario.") {
		t.Error("study named invented, but the page does not say the scenario is invented")
	}
	// The numbers table prints each prediction as the CLI does.
	numbers := sectionBody(t, page, "numbers")
	for _, hp := range preds {
		for c := range hp.CTIms {
			row := fmt.Sprintf(`<td class="num">%d</td><td class="num">%s</td><td class="num">%s</td><td class="num">%s</td><td class="num">%s</td><td class="num">%s</td>`,
				hp.CTIms[c], fmtFixed(hp.Valid.RTms[c], 1), fmtFixed(hp.Valid.Accuracy[c], 3), fmtFixed(hp.Invalid.RTms[c], 1),
				fmtFixed(hp.Invalid.Accuracy[c], 3), fmtFixed(hp.Invalid.Misdirected[c], 3))
			if !strings.Contains(numbers, row) {
				t.Errorf("numbers table lacks %s at CTI %d: %s", hp.Name, hp.CTIms[c], row)
			}
		}
	}

	// Rendering repeats exactly.
	if again := renderPredictions(t, s.Name, d, preds); again != page {
		t.Error("two renderings of the same predictions differ")
	}
}

// TestPredictionsPageNotInvented: a study whose name does not say it is
// invented gets no such note, and a design without EEG says the neural
// panels are for comparison.
func TestPredictionsPageNotInvented(t *testing.T) {
	s, _ := predictionsStudy(t)
	designs, err := s.ExpandedDesigns()
	if err != nil {
		t.Fatal(err)
	}
	d := &designs[0]
	if d.HasMeasure("eeg") {
		t.Fatalf("design %q records eeg; the test wants one that does not", d.Name)
	}
	preds, err := models.PredictDesign(s, d, nil)
	if err != nil {
		t.Fatal(err)
	}
	page := renderPredictions(t, "berth watch", d, preds)
	if strings.Contains(page, "invented") {
		t.Error("page calls the scenario invented though the study's name does not")
	}
	if !strings.Contains(sectionBody(t, page, "neural"), "This design does not record it") {
		t.Error("neural section does not say the design records no EEG")
	}
	if n, _ := checkSVGs(t, page); n != 3+len(d.CTIms) {
		t.Errorf("%d SVGs, want %d", n, 3+len(d.CTIms))
	}
}

func TestPredictionsPageBadInput(t *testing.T) {
	s, d := predictionsStudy(t)
	preds, err := models.PredictDesign(s, d, nil)
	if err != nil {
		t.Fatal(err)
	}
	short := append([]models.HypothesisPrediction(nil), preds...)
	short[2].Invalid.Misdirected = short[2].Invalid.Misdirected[:2]
	cases := []struct {
		name  string
		preds []models.HypothesisPrediction
		want  string
	}{
		{"no hypotheses", nil, `design "lamp-behaviour-eeg": no hypotheses to show`},
		{"short field", short, `hypotheses[2] ("surge & \"late\""): invalid.misdirected has 2 values for 4 CTIs`},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Predictions(s.Name, d, tc.preds)
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Fatalf("error %v, want one containing %q", err, tc.want)
			}
		})
	}
	t.Run("nil design", func(t *testing.T) {
		defer func() {
			if r := recover(); r == nil || !strings.HasPrefix(fmt.Sprint(r), "pages: Predictions") {
				t.Fatalf("recover() = %v, want a pages: panic", r)
			}
		}()
		_, _ = Predictions(s.Name, nil, preds)
	})
}

// TestPredictionsInBrowser loads the page in headless Chromium: the parsed
// DOM keeps every chart and section.
func TestPredictionsInBrowser(t *testing.T) {
	if _, err := os.Stat(chromiumPath); err != nil {
		t.Skipf("no browser at %s (install Debian's chromium package to run this test): %v", chromiumPath, err)
	}
	if testing.Short() {
		t.Skip("starts a browser")
	}
	s, d := predictionsStudy(t)
	preds, err := models.PredictDesign(s, d, nil)
	if err != nil {
		t.Fatal(err)
	}
	page := renderPredictions(t, s.Name, d, preds)
	dir := t.TempDir()
	file := filepath.Join(dir, "predictions.html")
	if err := os.WriteFile(file, []byte(page), 0o644); err != nil {
		t.Fatal(err)
	}
	dom := string(runChromium(t, dir, "--dump-dom", "file://"+file))
	want := strings.Count(page, "<svg ")
	if got := strings.Count(dom, "<svg "); got != want || strings.Count(dom, "</svg>") != want {
		t.Errorf("DOM has %d <svg> elements, source %d", got, want)
	}
	for _, id := range []string{"design", "parameters", "behaviour", "neural", "numbers"} {
		if !strings.Contains(dom, `<section id="`+id+`">`) {
			t.Errorf("DOM lacks section %q", id)
		}
	}
	if strings.Contains(dom, "parsererror") || strings.Contains(dom, "<script") {
		t.Error("DOM holds a parser error or a script")
	}
}
