package recovery

import (
	"context"
	"math"
	"testing"

	"discrimen/models"
)

// A low-noise study with an identifiable parameter per hypothesis (many
// trials, both behavioural measures, invented harbour-watch scenario).
const lowNoiseStudy = `{
  "name": "harbour watch, low noise (invented)", "seed": 11,
  "designs": [{"name": "long-session", "cti_ms": [300, 600, 900, 1200], "trials_per_cti": 200, "participants": 60,
               "measures": ["rt", "accuracy"]}],
  "hypotheses": [
    {"name": "ramp", "family": "linear", "params": {"slope": {"min": 0.2, "max": 3}}},
    {"name": "lift", "family": "saturating", "params": {"tau": {"min": 0.05, "max": 1.5}}}
  ],
  "replication": {"group_sizes": [10, 30], "replicates": 20}
}`

// TestProfileCoverage: 95% profile-likelihood intervals (Venzon &
// Moolgavkar 1988; Pawitan 2001) cover the true value in 0.90-0.99 of the
// participants of a low-noise study, counted over every participant.
func TestProfileCoverage(t *testing.T) {
	if testing.Short() {
		t.Skip("runs a 60-participant study")
	}
	r, err := Run(context.Background(), mustStudy(t, lowNoiseStudy), Options{})
	if err != nil {
		t.Fatal(err)
	}
	for _, pr := range r.Designs[0].ParamRecovery {
		c := float64(pr.Coverage)
		t.Logf("%s.%s: coverage %.3f over %d, r %.3f", pr.Hypothesis, pr.Parameter, c, pr.N, float64(pr.R))
		if !(c >= 0.90 && c <= 0.99) {
			t.Errorf("%s.%s: coverage %.3f, want 0.90-0.99", pr.Hypothesis, pr.Parameter, c)
		}
	}
	for _, rp := range r.Designs[0].Recovery {
		if len(rp.Intervals) != len(rp.Truth) {
			t.Fatalf("%s: %d intervals for %d participants", rp.Parameter, len(rp.Intervals), len(rp.Truth))
		}
		for i, iv := range rp.Intervals {
			est := float64(rp.Estimate[i])
			if !iv.Contains(est) {
				t.Errorf("%s participant %d: estimate %v outside its interval %+v", rp.Parameter, i, est, iv)
			}
			if len(iv.Pieces) == 0 || float64(iv.Low) > float64(iv.High) {
				t.Errorf("%s participant %d: malformed interval %+v", rp.Parameter, i, iv)
			}
		}
	}
}

// TestProfileTwins: two hypotheses identical but for their names give the
// same interval on the same data.
func TestProfileTwins(t *testing.T) {
	s := mustStudy(t, `{"name": "twins (invented)", "seed": 5,
	  "designs": [{"name": "d", "cti_ms": [300, 600, 900], "trials_per_cti": 60, "participants": 4, "measures": ["rt", "accuracy", "eeg"]}],
	  "hypotheses": [
	    {"name": "ramp-a", "family": "linear", "params": {"slope": {"min": 0.2, "max": 3}}},
	    {"name": "ramp-b", "family": "linear", "params": {"slope": {"min": 0.2, "max": 3}}}
	  ],
	  "replication": {"group_sizes": [2], "replicates": 5}}`)
	c, err := Compile(context.Background(), s, 2)
	if err != nil {
		t.Fatal(err)
	}
	res, err := c.RunShard(context.Background(), ShardSpec{Design: 0, Generator: 0, From: 0, To: 4}, nil)
	if err != nil {
		t.Fatal(err)
	}
	d := &c.Designs[0]
	for _, p := range res.Participants {
		a := p.Fits[0]
		fa, fb := newFitter(c.grids[0][0]), newFitter(c.grids[0][1])
		sum := summarise(d, Simulate(datasetRand(s.Seed, d.Name, "ramp-a", p.Participant, "trials"), d, s.Hypotheses[0], p.Participant, p.Truth, predAt(t, c, 0, p.Truth.Free)))
		sp := newSpace(fa.grid, sum)
		ia := fa.profileIntervals(sum, sp, thetaOf(sp, &a), -a.LogL)
		ib := fb.profileIntervals(sum, sp, thetaOf(sp, &a), -a.LogL)
		if len(ia) != 1 || len(ib) != 1 {
			t.Fatalf("intervals %v %v", ia, ib)
		}
		if math.Abs(float64(ia[0].Low-ib[0].Low)) > 1e-12 || math.Abs(float64(ia[0].High-ib[0].High)) > 1e-12 {
			t.Errorf("participant %d: twins' intervals differ: %+v vs %+v", p.Participant, ia[0], ib[0])
		}
		if !ia[0].Contains(a.Params[0]) || a.Intervals == nil {
			t.Errorf("participant %d: self-fit interval %+v does not hold the estimate %v", p.Participant, a.Intervals, a.Params[0])
		}
	}
}

// predAt is the exact prediction of hypothesis h at free, design 0.
func predAt(t *testing.T, c *Compiled, h int, free []float64) *models.Prediction {
	t.Helper()
	l := c.listeners[0]
	pr := l.NewPrediction()
	prec, err := models.NewPrecision(c.Study.Hypotheses[h], &c.Designs[0], free)
	if err != nil {
		t.Fatal(err)
	}
	l.Predict(prec, pr, nil)
	return pr
}
