package recovery

import (
	"math"
	"strconv"
	"testing"
)

// exportFiles returns the exported files by name.
func exportFiles(t testing.TB, js, design, gen string, n int) map[string][]byte {
	t.Helper()
	files, err := Export(mustStudy(t, js), design, gen, n)
	if err != nil {
		t.Fatal(err)
	}
	out := map[string][]byte{}
	for _, f := range files {
		out[f.Name] = f.Data
	}
	return out
}

// TestExportIsTheRunsParticipants parses the exported files back and
// compares them, bit for bit, with the datasets RunShard makes.
func TestExportIsTheRunsParticipants(t *testing.T) {
	s := mustStudy(t, collectedStudy)
	files := exportFiles(t, collectedStudy, "two-waits", "rising-watch", 4)
	for _, name := range []string{"trials.csv", "trials.json", "eeg.csv", "eeg.json", "truth.csv", "truth.json"} {
		if len(files[name]) == 0 {
			t.Fatalf("no %s", name)
		}
	}
	d := collectedDesign(t)
	c, err := ParseCollected(d, DataFile{"trials.csv", files["trials.csv"]}, &DataFile{"eeg.csv", files["eeg.csv"]}, nil)
	if err != nil {
		t.Fatal(err)
	}
	if len(c.Participants) != 4 {
		t.Fatalf("%d participants", len(c.Participants))
	}
	comp, err := CompileDesign(t.Context(), s, "two-waits", 1)
	if err != nil {
		t.Fatal(err)
	}
	l := comp.listeners[0]
	for p, got := range c.Participants {
		want, err := synthetic(s.Seed, d, s.Hypotheses[1], p, l, l.NewPrediction(), l.NewWorkspace())
		if err != nil {
			t.Fatal(err)
		}
		if got.Label != strconv.Itoa(p) || len(got.Trials) != len(want.Trials) {
			t.Fatalf("participant %d: label %q, %d trials, want %d", p, got.Label, len(got.Trials), len(want.Trials))
		}
		for i, tr := range got.Trials {
			w := want.Trials[i]
			if tr.CTI != w.CTI || tr.Valid != w.Valid || tr.Report != w.Report || !(tr.RTms == w.RTms || math.IsNaN(tr.RTms) && math.IsNaN(w.RTms)) {
				t.Fatalf("participant %d trial %d: %+v, want %+v", p, i, tr, w)
			}
		}
		for ci := range want.EEG {
			for b, v := range want.EEG[ci] {
				if got.EEG[ci][b] != v {
					t.Fatalf("participant %d eeg %d/%d: %v, want %v", p, ci, b, got.EEG[ci][b], v)
				}
			}
		}
	}
}

func TestExportRefusesUnknownNames(t *testing.T) {
	s := mustStudy(t, collectedStudy)
	for _, tc := range []struct{ design, gen, want string }{
		{"three-waits", "rising-watch", `the study has no design "three-waits" (its designs: two-waits)`},
		{"two-waits", "falling", `the study has no hypothesis "falling" (its hypotheses: steady-lamp, rising-watch)`},
	} {
		if _, err := Export(s, tc.design, tc.gen, 2); err == nil || err.Error() != tc.want {
			t.Errorf("got %v, want %s", err, tc.want)
		}
	}
	if _, err := Export(s, "two-waits", "rising-watch", 0); err == nil || err.Error() != "participants must be in 1..100000, got 0" {
		t.Errorf("got %v", err)
	}
}
