package recovery

import (
	"encoding/json"
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
			got := cf.Participants[p].Fits
			self := got[gi]
			want := run[gi]
			if !close9(float64(self.LogL), want.LogL) || self.K != want.K || self.N != want.N || !close9(float64(self.BIC), want.BIC) {
				t.Errorf("%s participant %d: self ln L %.12g k %d n %d, run %.12g k %d n %d", h.Name, p, float64(self.LogL), self.K, self.N, want.LogL, want.K, want.N)
			}
			for i, name := range want.Names {
				est := self.Params[name]
				if !close9(float64(est.Estimate), want.Params[i]) {
					t.Errorf("%s participant %d: %s = %.12g, run %.12g", h.Name, p, name, float64(est.Estimate), want.Params[i])
				}
				wi, gi := want.Intervals[i], est.Interval
				if !close9(float64(gi.Low), float64(wi.Low)) || !close9(float64(gi.High), float64(wi.High)) || gi.OpenLow != wi.OpenLow || gi.OpenHigh != wi.OpenHigh || len(gi.Pieces) != len(wi.Pieces) {
					t.Errorf("%s participant %d: interval %+v, run %+v", h.Name, p, gi, wi)
				}
			}
			for j := range run {
				worstOther = math.Max(worstOther, math.Abs(float64(got[j].LogL)-run[j].LogL))
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

// BenchmarkFitCollected40x6 fits 40 participants of the demo study's EEG
// design (about 7 exported from each of its 6 hypotheses) with all 6
// hypotheses on 2 goroutines; the prediction grids are built once, before
// the timer.
func BenchmarkFitCollected40x6(b *testing.B) {
	s := loadStudy(b, "../testdata/studies/radio-watch.json")
	const design = "lamp-behaviour-eeg"
	c, err := CompileDesign(b.Context(), s, design, 2)
	if err != nil {
		b.Fatal(err)
	}
	data := &Collected{Design: design}
	for p := range 40 {
		h := s.Hypotheses[p%len(s.Hypotheses)]
		files, err := Export(s, design, h.Name, p/len(s.Hypotheses)+1)
		if err != nil {
			b.Fatal(err)
		}
		one, err := ParseCollected(&c.Designs[0], DataFile{"trials.csv", files[0].Data}, &DataFile{"eeg.csv", files[2].Data}, nil)
		if err != nil {
			b.Fatal(err)
		}
		last := one.Participants[len(one.Participants)-1]
		last.Label = h.Name + "-" + last.Label
		data.Participants = append(data.Participants, last)
	}
	b.ResetTimer()
	for b.Loop() {
		out, err := c.FitCollected(b.Context(), data, FitOptions{Workers: 2})
		if err != nil {
			b.Fatal(err)
		}
		if len(out.Participants) != 40 || len(out.Participants[0].Fits) != 6 {
			b.Fatal("wrong shape")
		}
	}
}

// TestRecoveryBridge: a report of the same study gives P(true | winner)
// from its inversion diagonals; a report of another study, or one without
// a hash, is refused.
func TestRecoveryBridge(t *testing.T) {
	s := mustStudy(t, collectedStudy)
	rep, err := Run(t.Context(), s, Options{Workers: 2})
	if err != nil {
		t.Fatal(err)
	}
	js, err := rep.JSON()
	if err != nil {
		t.Fatal(err)
	}
	b, err := ReadRecoveryReport(js, s, "two-waits")
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range Criteria {
		inv := rep.Designs[0].Criteria[c].Inversion
		for j, h := range rep.Hypotheses {
			if got := b.TrueGivenWinner[c][h]; !close9(float64(got), float64(inv[j][j])) {
				t.Errorf("%s %s: %v, inversion %v", c, h, got, inv[j][j])
			}
		}
	}
	other := mustStudy(t, strings.Replace(collectedStudy, `"seed": 11`, `"seed": 12`, 1))
	hash, _ := StudyHash(other)
	want := `the recovery report is of another study ("berth-watch-collected (invented scenario)", study_hash ` + rep.StudyHash + `; this study's is ` + hash + `); give the report of this study file`
	if _, err := ReadRecoveryReport(js, other, "two-waits"); err == nil || err.Error() != want {
		t.Errorf("another study: got %v\nwant %s", err, want)
	}
	old := strings.Replace(string(js), `"study_hash": "`+rep.StudyHash+`",`, "", 1)
	if _, err := ReadRecoveryReport([]byte(old), s, "two-waits"); err == nil || err.Error() != "the recovery report (discrimen 0.1.0) has no study_hash; run the study again with this release" {
		t.Errorf("no hash: got %v", err)
	}
	if _, err := ReadRecoveryReport(js, s, "three-waits"); err == nil || err.Error() != `the recovery report has no design "three-waits"` {
		t.Errorf("no design: got %v", err)
	}
	// The bridge's figures reach fit.json beside each verdict.
	c, err := CompileDesign(t.Context(), s, "two-waits", 2)
	if err != nil {
		t.Fatal(err)
	}
	files, _ := Export(s, "two-waits", "steady-lamp", 3)
	data, err := ParseCollected(&c.Designs[0], DataFile{"trials.csv", files[0].Data}, &DataFile{"eeg.csv", files[2].Data}, nil)
	if err != nil {
		t.Fatal(err)
	}
	cf, err := c.FitCollected(t.Context(), data, FitOptions{Workers: 1, Recovery: b})
	if err != nil {
		t.Fatal(err)
	}
	for _, pf := range cf.Participants {
		w := pf.Winner[BICCriterion]
		if pf.TrueGivenWinner == nil || len(w) == 1 && *pf.TrueGivenWinner != b.TrueGivenWinner[BICCriterion][w[0]] {
			t.Errorf("participant %s: P(true | winner) %v for winner %v", pf.Participant, pf.TrueGivenWinner, w)
		}
	}
	if len(cf.Group.Verdicts) != 4 || !strings.Contains(cf.Group.Verdicts[3], "in the recovery study, when "+cf.Group.Leader+" won a synthetic participant under BIC, it had generated the data") {
		t.Errorf("verdicts %q", cf.Group.Verdicts)
	}
}

// TestFitCollectedRepeats: one input gives one fit.json (timing aside) on
// one and on two goroutines.
func TestFitCollectedRepeats(t *testing.T) {
	s := mustStudy(t, collectedStudy)
	c, err := CompileDesign(t.Context(), s, "two-waits", 2)
	if err != nil {
		t.Fatal(err)
	}
	files, _ := Export(s, "two-waits", "rising-watch", 4)
	data, err := ParseCollected(&c.Designs[0], DataFile{"trials.csv", files[0].Data}, &DataFile{"eeg.csv", files[2].Data}, nil)
	if err != nil {
		t.Fatal(err)
	}
	var got []string
	for _, w := range []int{1, 2, 2} {
		cf, err := c.FitCollected(t.Context(), data, FitOptions{Workers: w})
		if err != nil {
			t.Fatal(err)
		}
		cf.Timing = CollectedFitTiming{}
		js, _ := cf.JSON()
		got = append(got, string(js))
		tables, err := cf.TableFiles()
		if err != nil || len(tables) != 8 {
			t.Fatalf("%d tables, %v", len(tables), err)
		}
	}
	if got[0] != got[1] || got[1] != got[2] {
		t.Error("fit.json differs between runs")
	}
}

// TestFitWithoutEEGForSome: a participant without EEG is fitted on the
// behavioural measures alone: 4 fewer terms in k and no bins in n.
func TestFitWithoutEEGForSome(t *testing.T) {
	s := mustStudy(t, collectedStudy)
	c, err := CompileDesign(t.Context(), s, "two-waits", 2)
	if err != nil {
		t.Fatal(err)
	}
	files, _ := Export(s, "two-waits", "rising-watch", 2)
	var eeg []string
	for _, l := range strings.Split(strings.TrimSpace(string(files[2].Data)), "\n") {
		if !strings.HasPrefix(l, "1,") {
			eeg = append(eeg, l)
		}
	}
	data, err := ParseCollected(&c.Designs[0], DataFile{"trials.csv", files[0].Data}, &DataFile{"eeg.csv", []byte(strings.Join(eeg, "\n") + "\n")}, nil)
	if err != nil {
		t.Fatal(err)
	}
	cf, err := c.FitCollected(t.Context(), data, FitOptions{Workers: 1})
	if err != nil {
		t.Fatal(err)
	}
	a, b := cf.Participants[0], cf.Participants[1]
	bins, _ := DesignBins(&c.Designs[0])
	nObs := func(p CollectedParticipant, eeg bool) int {
		n := len(p.Trials)
		for _, tr := range p.Trials {
			if !math.IsNaN(tr.RTms) {
				n++
			}
		}
		if eeg {
			for _, x := range bins {
				n += x
			}
		}
		return n
	}
	if !a.EEG || b.EEG || a.Fits[0].K-b.Fits[0].K != 4 || a.Fits[0].N != nObs(data.Participants[0], true) || b.Fits[0].N != nObs(data.Participants[1], false) {
		t.Fatalf("with EEG k=%d n=%d, without k=%d n=%d", a.Fits[0].K, a.Fits[0].N, b.Fits[0].K, b.Fits[0].N)
	}
	if len(cf.Notes) != 3 || !strings.HasPrefix(cf.Notes[2], "1 of 2 participants have no EEG") {
		t.Errorf("notes %q", cf.Notes)
	}
}

// TestFitBlocksAssemble: blocks of participants fitted apart, stored as
// JSON and assembled give the fit.json of one FitCollected.
func TestFitBlocksAssemble(t *testing.T) {
	s := mustStudy(t, collectedStudy)
	c, err := CompileDesign(t.Context(), s, "two-waits", 2)
	if err != nil {
		t.Fatal(err)
	}
	files, _ := Export(s, "two-waits", "rising-watch", 5)
	data, err := ParseCollected(&c.Designs[0], DataFile{"trials.csv", files[0].Data}, &DataFile{"eeg.csv", files[2].Data}, nil)
	if err != nil {
		t.Fatal(err)
	}
	whole, err := c.FitCollected(t.Context(), data, FitOptions{Workers: 2})
	if err != nil {
		t.Fatal(err)
	}
	whole.Timing = CollectedFitTiming{}
	want, _ := whole.JSON()
	// Fitted in any order and through JSON, as a queue would store them.
	blocks := map[int][]ParticipantFit{}
	for _, b := range [][2]int{{3, 5}, {0, 1}, {1, 3}} {
		block, err := c.FitBlock(t.Context(), data, b[0], b[1], 1)
		if err != nil {
			t.Fatal(err)
		}
		js, err := json.Marshal(block)
		if err != nil {
			t.Fatal(err)
		}
		var back []ParticipantFit
		if err := json.Unmarshal(js, &back); err != nil {
			t.Fatal(err)
		}
		blocks[b[0]] = back
	}
	parts := append(append(blocks[0], blocks[1]...), blocks[3]...)
	got, err := c.AssembleFit(data, parts, nil)
	if err != nil {
		t.Fatal(err)
	}
	gotJS, _ := got.JSON()
	if string(gotJS) != string(want) {
		t.Error("assembled blocks differ from one fit")
	}
	if _, err := c.AssembleFit(data, parts[:4], nil); err == nil || err.Error() != "recovery: AssembleFit: 4 fitted participants, the data have 5" {
		t.Errorf("a missing block: %v", err)
	}
	if _, err := c.FitBlock(t.Context(), data, 4, 9, 1); err == nil || err.Error() != "recovery: FitBlock: block [4, 9) of 5 participants" {
		t.Errorf("a block outside: %v", err)
	}
}
