package recovery

import (
	"math"
	"strings"
	"testing"

	"discrimen/models"
)

// fitExported exports generator gen's first n participants, parses the
// files (optionally rewritten by edit) and fits them.
func fitExported(t testing.TB, c *Compiled, s *models.Study, gen string, n int, edit func(name string, b []byte) (string, []byte), cols Columns) *CollectedFit {
	t.Helper()
	files, err := Export(s, "two-waits", gen, n)
	if err != nil {
		t.Fatal(err)
	}
	byName := map[string][]byte{}
	for _, f := range files {
		byName[f.Name] = f.Data
	}
	tn, tb := "trials.csv", byName["trials.csv"]
	en, eb := "eeg.csv", byName["eeg.csv"]
	if edit != nil {
		tn, tb = edit(tn, tb)
		en, eb = edit(en, eb)
	}
	data, err := ParseCollected(&c.Designs[0], DataFile{tn, tb}, &DataFile{en, eb}, cols)
	if err != nil {
		t.Fatal(err)
	}
	out, err := c.FitCollected(t.Context(), data, FitOptions{Workers: 2})
	if err != nil {
		t.Fatal(err)
	}
	return out
}

func close9(a, b float64) bool {
	return a == b || math.Abs(a-b) <= 1e-9*math.Max(1, math.Abs(b))
}

// TestRoundTripMatchesRun: the participants `run` fits, exported and
// fitted by FitCollected, give the run's ln L, estimates and intervals
// for the generator's own candidate (to 1e-9), and the run's winners.
func TestRoundTripMatchesRun(t *testing.T) {
	s := mustStudy(t, collectedStudy)
	rep, err := Run(t.Context(), s, Options{Workers: 2})
	if err != nil {
		t.Fatal(err)
	}
	c, err := CompileDesign(t.Context(), s, "two-waits", 2)
	if err != nil {
		t.Fatal(err)
	}
	P := c.Designs[0].Participants
	worstOther := 0.0
	for gi, h := range s.Hypotheses {
		cf := fitExported(t, c, s, h.Name, P, nil, nil)
		for p := range P {
			run := rep.Fits[0][gi*P+p].Fits
			got := cf.fits[p]
			self := got[gi]
			want := run[gi]
			if !close9(self.LogL, want.LogL) {
				t.Errorf("%s participant %d: self ln L %.12g, run %.12g", h.Name, p, self.LogL, want.LogL)
			}
			for i := range want.Params {
				if !close9(self.Params[i], want.Params[i]) {
					t.Errorf("%s participant %d: %s = %.12g, run %.12g", h.Name, p, want.Names[i], self.Params[i], want.Params[i])
				}
				wi, gi := want.Intervals[i], self.Intervals[i]
				if !close9(float64(gi.Low), float64(wi.Low)) || !close9(float64(gi.High), float64(wi.High)) || gi.OpenLow != wi.OpenLow || gi.OpenHigh != wi.OpenHigh || len(gi.Pieces) != len(wi.Pieces) {
					t.Errorf("%s participant %d: interval %+v, run %+v", h.Name, p, gi, wi)
				}
			}
			for j := range run {
				worstOther = math.Max(worstOther, math.Abs(got[j].LogL-run[j].LogL))
			}
			runWin := winners(run)
			for _, cr := range Criteria {
				if strings.Join(runWin[cr], ",") != strings.Join(cf.Participants[p].Winner[cr], ",") {
					t.Errorf("%s participant %d: %s winner %v, run %v", h.Name, p, cr, cf.Participants[p].Winner[cr], runWin[cr])
				}
			}
		}
	}
	t.Logf("largest |Δ ln L| over every candidate (the run polishes others less deeply): %.3g", worstOther)
}

// TestCollectedFormatsAgree: column order, TSV and renamed columns give
// the same fit.json (timing aside).
func TestCollectedFormatsAgree(t *testing.T) {
	s := mustStudy(t, collectedStudy)
	c, err := CompileDesign(t.Context(), s, "two-waits", 2)
	if err != nil {
		t.Fatal(err)
	}
	render := func(cf *CollectedFit) string {
		cf.Timing = CollectedFitTiming{}
		cf.TrialsFile, cf.EEGFile = "", ""
		b, err := cf.JSON()
		if err != nil {
			t.Fatal(err)
		}
		return string(b)
	}
	base := render(fitExported(t, c, s, "steady-lamp", 3, nil, nil))
	// Columns reversed, written as TSV, with renamed headers.
	reorder := func(name string, b []byte) (string, []byte) {
		lines := strings.Split(strings.TrimSuffix(string(b), "\n"), "\n")
		for i, l := range lines {
			f := strings.Split(l, ",")
			for a, z := 0, len(f)-1; a < z; a, z = a+1, z-1 {
				f[a], f[z] = f[z], f[a]
			}
			lines[i] = strings.Join(f, ",")
		}
		return name, []byte(strings.Join(lines, "\n") + "\n")
	}
	tsv := func(name string, b []byte) (string, []byte) {
		return strings.TrimSuffix(name, ".csv") + ".tsv", []byte(strings.ReplaceAll(string(b), ",", "\t"))
	}
	rename := func(name string, b []byte) (string, []byte) {
		head, rest, _ := strings.Cut(string(b), "\n")
		f := strings.Split(head, ",")
		for i, c := range f {
			if r, ok := map[string]string{"participant": "subj", "rt_ms": "RT", "value": "amp"}[c]; ok {
				f[i] = r
			}
		}
		head = strings.Join(f, ",")
		return name, []byte(head + "\n" + rest)
	}
	cases := map[string]struct {
		edit func(string, []byte) (string, []byte)
		cols Columns
	}{
		"column order": {reorder, nil},
		"tsv":          {tsv, nil},
		"renamed":      {rename, Columns{"participant": "subj", "rt_ms": "RT", "value": "amp"}},
	}
	for name, tc := range cases {
		if got := render(fitExported(t, c, s, "steady-lamp", 3, tc.edit, tc.cols)); got != base {
			t.Errorf("%s: fit.json differs", name)
		}
	}
}

// TestGroupIsBMSOfTheEvidences: the group level equals BMSQuadrature on
// −BIC/2 of the same fits.
func TestGroupIsBMSOfTheEvidences(t *testing.T) {
	s := mustStudy(t, collectedStudy)
	c, err := CompileDesign(t.Context(), s, "two-waits", 2)
	if err != nil {
		t.Fatal(err)
	}
	cf := fitExported(t, c, s, "rising-watch", 5, nil, nil)
	var ev [][]float64
	for _, pf := range cf.Participants {
		row := []float64{}
		for _, f := range pf.Fits {
			row = append(row, -float64(f.BIC)/2)
		}
		ev = append(ev, row)
	}
	want := BMSQuadrature(ev)
	g := cf.Group
	if g.Participants != 5 {
		t.Fatalf("%d participants in the group", g.Participants)
	}
	for k, h := range cf.Hypotheses {
		if !close9(float64(g.ExpectedFrequencies[h]), want.Expected[k]) || !close9(float64(g.Exceedance[h]), want.XP[k]) || !close9(float64(g.ProtectedExceedance[h]), want.PXP[k]) {
			t.Errorf("%s: group %v %v %v, BMS %v %v %v", h, g.ExpectedFrequencies[h], g.Exceedance[h], g.ProtectedExceedance[h], want.Expected[k], want.XP[k], want.PXP[k])
		}
	}
	if !close9(float64(g.OmnibusRisk), want.BOR) {
		t.Errorf("omnibus risk %v, BMS %v", g.OmnibusRisk, want.BOR)
	}
}
