package recovery

import (
	"bytes"
	"context"
	"discrimen/internal/golden"
	"math"
	"os"
	"testing"

	"discrimen/models"
)

func loadStudy(t testing.TB, path string) *models.Study {
	t.Helper()
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	s, err := models.LoadStudy(data)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

func mustStudy(t testing.TB, js string) *models.Study {
	t.Helper()
	s, err := models.LoadStudy([]byte(js))
	if err != nil {
		t.Fatal(err)
	}
	return s
}

// reportBytes is report.json with the timing block zeroed: the only part
// allowed to differ between runs.
func reportBytes(t testing.TB, r *Report) []byte {
	t.Helper()
	r.Timing = Timing{}
	b, err := r.JSON()
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// smallStudy is the study behind the golden files (shared with pages).
const smallStudy = golden.SmallStudy

// TestRunDeterministicAcrossWorkers: same study and seed give the same
// report bytes with 1 and 4 workers and different shard sizes.
func TestRunDeterministicAcrossWorkers(t *testing.T) {
	s := mustStudy(t, smallStudy)
	r1, err := Run(context.Background(), s, Options{Workers: 1, ShardSize: 6})
	if err != nil {
		t.Fatal(err)
	}
	r4, err := Run(context.Background(), mustStudy(t, smallStudy), Options{Workers: 4, ShardSize: 2})
	if err != nil {
		t.Fatal(err)
	}
	a, b := reportBytes(t, r1), reportBytes(t, r4)
	if !bytes.Equal(a, b) {
		t.Fatalf("report.json differs between 1 and 4 workers (%d vs %d bytes)", len(a), len(b))
	}
	c1, _ := r1.FitsCSV()
	c4, _ := r4.FitsCSV()
	if !bytes.Equal(c1, c4) {
		t.Fatal("fits.csv differs between 1 and 4 workers")
	}
	if n := bytes.Count(c1, []byte("\n")); n != 1+3*6*3 {
		t.Errorf("fits.csv has %d lines, want header + 54", n)
	}
}

// TestIdenticalHypothesesShareWins: two hypotheses defined identically are
// confused about 50/50 (ties share the win), never told apart.
func TestIdenticalHypothesesShareWins(t *testing.T) {
	s := mustStudy(t, `{
	  "name": "twins (invented)", "seed": 11,
	  "designs": [{"name": "d", "cti_ms": [300, 900], "trials_per_cti": 20, "participants": 10, "measures": ["rt", "accuracy"]}],
	  "hypotheses": [
	    {"name": "ramp-a", "family": "linear", "params": {"slope": {"min": 0.5, "max": 3}}},
	    {"name": "ramp-b", "family": "linear", "params": {"slope": {"min": 0.5, "max": 3}}}
	  ],
	  "replication": {"group_sizes": [5], "replicates": 10}
	}`)
	r, err := Run(context.Background(), s, Options{})
	if err != nil {
		t.Fatal(err)
	}
	cr := r.Designs[0].Criteria["bic"]
	for i := 0; i < 2; i++ {
		for j := 0; j < 2; j++ {
			if p := float64(cr.Confusion[i][j]); math.Abs(p-0.5) > 1e-12 {
				t.Errorf("confusion[%d][%d] = %g, want 0.5 (tied criteria share the win)", i, j, p)
			}
			if lo, hi := float64(cr.CILow[i][j]), float64(cr.CIHigh[i][j]); !(lo < 0.5 && 0.5 < hi) {
				t.Errorf("interval [%g, %g] does not cover 0.5", lo, hi)
			}
		}
	}
	if mi := float64(cr.MIBits); math.Abs(mi) > 1e-12 {
		t.Errorf("mutual information %g bits, want 0", mi)
	}
}

// TestLowNoiseRecovers: with very small measurement noise, distinct
// hypotheses are recovered with a diagonal ≥ 0.9 and a well-identified
// parameter with r ≥ 0.9.
func TestLowNoiseRecovers(t *testing.T) {
	if testing.Short() {
		t.Skip("runs a study")
	}
	s := mustStudy(t, `{
	  "name": "low noise (invented)", "seed": 3,
	  "designs": [{"name": "quiet", "cti_ms": [300, 600, 900, 1200], "trials_per_cti": 200, "participants": 20,
	    "measures": ["rt", "accuracy", "eeg"],
	    "measurement": {"rt_sd": {"dist": "fixed", "value": 3}, "lapse": {"dist": "fixed", "value": 0.001},
	                    "eeg_sd": {"dist": "fixed", "value": 0.02}, "eeg_ar": {"dist": "fixed", "value": 0.1}}}],
	  "hypotheses": [
	    {"name": "flat", "family": "constant", "params": {"level": {"min": 0.3, "max": 1.5}}},
	    {"name": "ramp", "family": "linear", "params": {"slope": {"min": 0.5, "max": 3}}},
	    {"name": "early", "family": "saturating", "params": {"tau": {"min": 0.05, "max": 0.5}}},
	    {"name": "late", "family": "exponential", "params": {"rate": {"min": 1, "max": 6}}}
	  ],
	  "replication": {"group_sizes": [5, 10], "replicates": 20}
	}`)
	r, err := Run(context.Background(), s, Options{})
	if err != nil {
		t.Fatal(err)
	}
	cr := r.Designs[0].Criteria["bic"]
	for i := range cr.Confusion {
		if p := float64(cr.Confusion[i][i]); p < 0.9 {
			t.Errorf("%s recovered in %.2f of datasets, want ≥ 0.9 (row %v)", r.Hypotheses[i], p, cr.Confusion[i])
		}
	}
	for _, pr := range r.Designs[0].ParamRecovery {
		if pr.Hypothesis == "ramp" && float64(pr.R) < 0.9 {
			t.Errorf("slope of ramp: r = %.3f, want ≥ 0.9", float64(pr.R))
		}
	}
}

// TestDesignsMeetTheSameParticipants: two designs of one study draw the
// same true parameters for participant p of a generator (paired design
// comparison), while their trial data differ.
func TestDesignsMeetTheSameParticipants(t *testing.T) {
	s := mustStudy(t, `{"name": "paired (invented)", "seed": 9,
	  "designs": [{"name": "short", "cti_ms": [300, 600], "participants": 3, "trials_per_cti": 10},
	              {"name": "long", "cti_ms": [300, 600, 900, 1200], "participants": 3, "trials_per_cti": 10}],
	  "hypotheses": [{"name": "ramp", "family": "linear", "params": {"slope": {"min": 0.5, "max": 3}}},
	                 {"name": "flat", "family": "constant", "params": {"level": {"min": 0.3, "max": 1.5}}}],
	  "replication": {"group_sizes": [2], "replicates": 4}}`)
	r, err := Run(context.Background(), s, Options{})
	if err != nil {
		t.Fatal(err)
	}
	for i := range r.Fits[0] {
		a, b := r.Fits[0][i].Truth, r.Fits[1][i].Truth
		if a.Free[0] != b.Free[0] {
			t.Errorf("participant %d: true %g under short, %g under long", i, a.Free[0], b.Free[0])
		}
		if r.Fits[0][i].Fits[0].LogL == r.Fits[1][i].Fits[0].LogL {
			t.Errorf("participant %d: identical likelihood under two designs", i)
		}
	}
}
