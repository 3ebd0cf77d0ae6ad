package pages

import (
	"strings"
	"testing"

	"discrimen/models"
	"discrimen/recovery"
)

// fitStudy is an invented scenario: a watch officer listening for berth
// numbers on radio channels.
const fitStudy = `{
  "name": "berth-watch-fit (invented scenario)",
  "seed": 5,
  "designs": [{"name": "two-waits", "cti_ms": [300, 600], "trials_per_cti": 30, "participants": 4, "measures": ["rt", "accuracy", "eeg"]}],
  "hypotheses": [
    {"name": "steady-lamp", "family": "constant", "params": {"level": {"min": 0.2, "max": 1.8}}},
    {"name": "rising-watch", "family": "linear", "params": {"slope": {"min": 0, "max": 2}}}
  ],
  "replication": {"group_sizes": [2]}
}`

func TestFitPage(t *testing.T) {
	s, err := models.LoadStudy([]byte(fitStudy))
	if err != nil {
		t.Fatal(err)
	}
	files, err := recovery.Export(s, "two-waits", "rising-watch", 3)
	if err != nil {
		t.Fatal(err)
	}
	designs, _ := s.ExpandedDesigns()
	data, err := recovery.ParseCollected(&designs[0], recovery.DataFile{Name: "trials.csv", Data: files[0].Data}, &recovery.DataFile{Name: "eeg.csv", Data: files[2].Data}, nil)
	if err != nil {
		t.Fatal(err)
	}
	cf, err := recovery.FitCollected(t.Context(), s, data, recovery.FitOptions{Workers: 1})
	if err != nil {
		t.Fatal(err)
	}
	b, err := Fit(cf)
	if err != nil {
		t.Fatal(err)
	}
	page := string(b)
	checkWellNested(t, page)
	if n, _ := checkSVGs(t, page); n != 4 {
		t.Errorf("%d charts, want 4 (rt, accuracy, misdirected, neural)", n)
	}
	for _, want := range []string{
		"berth-watch-fit (invented scenario)", cf.Group.Verdict, "ethics approval", "Predictive checks", "rising-watch", "steady-lamp",
		"slope " + fmtG(float64(cf.Participants[0].Fits[1].Params["slope"].Estimate), 4),
	} {
		if !strings.Contains(page, escapeText(want)) {
			t.Errorf("page lacks %q", want)
		}
	}
	if strings.Contains(page, "P(true | BIC win)") {
		t.Error("a column of the recovery report without one")
	}
}

// escapeText is how html/template writes the text s.
func escapeText(s string) string {
	return strings.NewReplacer("&", "&amp;", "<", "&lt;", ">", "&gt;", `"`, "&#34;", "'", "&#39;").Replace(s)
}
