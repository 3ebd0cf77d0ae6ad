package recovery

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"strings"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"

	"discrimen/models"
)

// demoNames are the hypotheses of the demo study (radio-watch.json).
var demoNames = []string{"steady-watch", "linear-ramp", "late-surge", "early-lift", "lamp-switch", "timed-expectation"}

// countsReport builds a BIC criterion report from a matrix of counts
// (row i: generator i's datasets won by each candidate), with the
// Wilson intervals the report would carry.
func countsReport(counts [][]float64) CriterionReport {
	H := len(counts)
	winners := make([][][]float64, H)
	for i, row := range counts {
		for j, c := range row {
			for range int(c) {
				sh := make([]float64, H)
				sh[j] = 1
				winners[i] = append(winners[i], sh)
			}
		}
	}
	cf := NewConfusion(winners)
	return CriterionReport{Confusion: numMatrix(cf.P), Counts: numMatrix(cf.Counts), CILow: numMatrix(cf.CILow), CIHigh: numMatrix(cf.CIHigh),
		Inversion: numMatrix(cf.Inversion), RecoveryRate: NullFloat(cf.RecoveryRate), MIBits: NullFloat(cf.MIBits), NormalizedMI: NullFloat(cf.NormalizedMI),
		Datasets: cf.N, Failures: cf.Failures}
}

// verdictCounts: 100 datasets per generator of the demo's hypotheses.
// Pairs: late-surge/early-lift and lamp-switch/timed-expectation confused
// (not told apart); steady-watch/linear-ramp one way only; linear-ramp/
// lamp-switch unsettled (8 of 100: interval 4–15%); the other 11 clean.
var verdictCounts = [][]float64{
	{100, 0, 0, 0, 0, 0},
	{34, 58, 0, 0, 8, 0},
	{0, 0, 66, 34, 0, 0},
	{2, 0, 12, 86, 0, 0},
	{0, 0, 0, 0, 70, 30},
	{0, 0, 0, 0, 25, 75},
}

// checkEveryPair asserts that the verdict names each of the H(H−1)/2
// pairs exactly once, in one line holding both directions spelled out
// with their shares, and returns the line of each pair.
func checkEveryPair(t *testing.T, names []string, cr CriterionReport, v []string) map[[2]int]string {
	t.Helper()
	lines := map[[2]int]string{}
	for a := range names {
		for b := a + 1; b < len(names); b++ {
			ab := fmt.Sprintf("%s's data won by %s in %s", names[a], names[b], pct(float64(cr.Confusion[a][b])))
			ba := fmt.Sprintf("%s's data won by %s in %s", names[b], names[a], pct(float64(cr.Confusion[b][a])))
			n := 0
			for _, l := range v {
				n += strings.Count(l, ab)
				if strings.Contains(l, ab) {
					if !strings.Contains(l, ba) {
						t.Errorf("line %q has %q but not the other direction %q", l, ab, ba)
					}
					if !strings.Contains(l, "under BIC") {
						t.Errorf("line %q does not name the criterion", l)
					}
					lines[[2]int{a, b}] = l
				}
			}
			if n != 1 {
				t.Errorf("pair %s, %s: %q appears %d times, want once", names[a], names[b], ab, n)
			}
		}
	}
	if len(lines) != len(names)*(len(names)-1)/2 {
		t.Errorf("%d pairs named, want %d", len(lines), len(names)*(len(names)-1)/2)
	}
	return lines
}

// TestVerdictNamesEveryPair: the 15 pairs of the demo's hypotheses each
// appear once with both directions, in the group the rule puts them.
func TestVerdictNamesEveryPair(t *testing.T) {
	cr := countsReport(verdictCounts)
	dr := DesignReport{Name: "lamp-behaviour", Participants: 100, TrialsPerParticipant: 160, Criteria: map[Criterion]CriterionReport{BICCriterion: cr}}
	v := verdict(demoNames, dr)
	t.Log(strings.Join(v, "\n"))
	lines := checkEveryPair(t, demoNames, cr, v)
	for pair, want := range map[[2]int]string{
		{2, 3}: "Not told apart: under BIC, late-surge's data won by early-lift in 34% (95% interval 25–44%); early-lift's data won by late-surge in 12% (7–20%).",
		{4, 5}: "Not told apart: under BIC, lamp-switch's data won by timed-expectation in 30%",
		{0, 1}: "Told apart one way only: under BIC, steady-watch's data won by linear-ramp in 0% (95% interval 0–4%); linear-ramp's data won by steady-watch in 34%",
		{1, 4}: "Not settled: under BIC, linear-ramp's data won by lamp-switch in 8% (95% interval 4–15%)",
		{0, 3}: "Told apart, under BIC: ",
		{0, 2}: "Told apart, under BIC: ",
	} {
		if !strings.HasPrefix(lines[pair], want) {
			t.Errorf("pair %v: line %q, want it to start %q", pair, lines[pair], want)
		}
	}
	if !strings.Contains(lines[[2]int{0, 3}], "steady-watch's data won by early-lift in 0% and early-lift's data won by steady-watch in 2%") {
		t.Errorf("told-apart line %q lacks steady-watch/early-lift with directions", lines[[2]int{0, 3}])
	}
	if want := "Of the 15 pairs of hypotheses, under BIC 11 are told apart, 1 only one way and 2 not at all; for 1 the 100 synthetic participants per hypothesis do not settle it."; !strings.HasPrefix(v[1], want) {
		t.Errorf("second line %q, want it to start %q", v[1], want)
	}
	if want := "Under BIC this design recovers the generating hypothesis in 76% of synthetic participants on average (normalised mutual information "; !strings.HasPrefix(v[0], want) {
		t.Errorf("first line %q, want it to start %q", v[0], want)
	}
	// Every line but the two leads and the told-apart one is one pair.
	if len(v) != 2+2+1+1+1 {
		t.Errorf("%d lines, want 7 (no weakness in this report)", len(v))
	}
}

// TestPairRule: the rule on the two directions' 95% intervals.
func TestPairRule(t *testing.T) {
	for _, c := range []struct {
		ab, ba cell
		want   pairClass
	}{
		{cell{0, 0, 0.04}, cell{0.02, 0.005, 0.07}, toldApart},
		{cell{0, 0, 0.04}, cell{0.34, 0.26, 0.44}, oneWayOnly},
		{cell{0.34, 0.26, 0.44}, cell{0, 0, 0.04}, oneWayOnly},
		{cell{0.34, 0.26, 0.44}, cell{0.12, 0.07, 0.2}, notToldApart},
		{cell{0.12, 0.07, 0.2}, cell{0.34, 0.26, 0.44}, notToldApart},
		{cell{0.34, 0.26, 0.44}, cell{0.3, 0.22, 0.4}, notToldApart},
		{cell{0, 0, 0.43}, cell{0, 0, 0.43}, unsettledPair}, // 0 of 5: the simulation cannot say
		{cell{0.08, 0.04, 0.15}, cell{0, 0, 0.04}, unsettledPair},
		{cell{math.NaN(), math.NaN(), math.NaN()}, cell{0, 0, 0.04}, unsettledPair},
		{cell{0.1, 0.1, 0.1}, cell{0.1, 0.1, 0.1}, notToldApart}, // at the threshold: confused
	} {
		if got := classify(c.ab.state(), c.ba.state()); got != c.want {
			t.Errorf("classify(%v, %v) = %d, want %d", c.ab, c.ba, got, c.want)
		}
	}
}

// TestVerdictWeaknesses: each weakness the report records appears in the
// verdict, read from its field; a design without one has no such line.
func TestVerdictWeaknesses(t *testing.T) {
	base := func() DesignReport {
		return DesignReport{Name: "d", Participants: 100, TrialsPerParticipant: 160,
			Criteria:      map[Criterion]CriterionReport{BICCriterion: countsReport([][]float64{{98, 2}, {1, 99}})},
			ParamRecovery: []ParamRecoveryReport{{Hypothesis: "ramp", Parameter: "slope", N: 100, R: 0.95, Coverage: 0.93, AtBound: 0.02, MedianSE: 0.1, ReliableSEs: 90}},
			Surrogate:     []SurrogateError{{Hypothesis: "ramp", LogLikError: 0.01}},
			FitFailures:   FitFailures{Total: 400, TruthChecked: 200},
		}
	}
	names := []string{"flat", "ramp"}
	clean := verdict(names, base())
	if len(clean) != 3 {
		t.Fatalf("clean design: %d lines, want 3 (two leads, one pair):\n%s", len(clean), strings.Join(clean, "\n"))
	}
	for _, c := range []struct {
		name string
		set  func(*DesignReport)
		want string
	}{
		{"r below 0.8", func(d *DesignReport) { d.ParamRecovery[0].R = 0.45 },
			"Parameter slope of ramp is poorly recovered: r = 0.45 between truth and estimate (want 0.80 or more)."},
		{"r unknown", func(d *DesignReport) { d.ParamRecovery[0].R = NullFloat(math.NaN()); d.ParamRecovery[0].N = 1 },
			"Parameter slope of ramp is poorly recovered: r cannot be computed (1 usable estimate)."},
		{"coverage low", func(d *DesignReport) { d.ParamRecovery[0].Coverage = 0.62 },
			"Parameter slope of ramp is poorly recovered: its 95% profile intervals hold the true value in 62% of the participants (want 85–99%)."},
		{"coverage high", func(d *DesignReport) { d.ParamRecovery[0].Coverage = 1 },
			"its 95% profile intervals hold the true value in 100% of the participants (want 85–99%)."},
		{"coverage unknown", func(d *DesignReport) { d.ParamRecovery[0].Coverage = NullFloat(math.NaN()) },
			"no profile interval, so the coverage of its intervals is unknown"},
		{"at a bound", func(d *DesignReport) { d.ParamRecovery[0].AtBound = 0.14 },
			"Parameter slope of ramp is poorly recovered: 14% of its estimates end at an end of its range (want 10% or fewer)."},
		{"flat", func(d *DesignReport) { d.ParamRecovery[0].Flat = true; d.ParamRecovery[0].MedianSE = 0.8 },
			"its median SE, 0.8, is more than a quarter of its range."},
		{"several at once", func(d *DesignReport) { d.ParamRecovery[0].R = 0.5; d.ParamRecovery[0].AtBound = 0.3 },
			"r = 0.50 between truth and estimate (want 0.80 or more); 30% of its estimates end at an end of its range (want 10% or fewer)."},
		{"grid over tolerance", func(d *DesignReport) { d.Surrogate[0].OverTolerance = true; d.Surrogate[0].LogLikError = 2.34 },
			"The prediction grid of ramp is over tolerance: interpolation moves ln L by up to 2.34 for a typical dataset even after refinement"},
		{"jumps", func(d *DesignReport) { d.Surrogate[0].Jumps = true },
			"The exact predictions of ramp jump (an invalid trial flips"},
		{"below truth", func(d *DesignReport) { d.FitFailures.BelowTruth = 3; d.FitFailures.MaxTruthGap = 1.25 },
			"In 3 of 200 self-fits the search ended below the ln L of the generating parameters (by up to 1.25)"},
		{"failed fits", func(d *DesignReport) { d.FitFailures.Failed = 4 }, "4 of 400 fits failed (no finite likelihood)"},
		{"no winner", func(d *DesignReport) { d.FitFailures.NoWinner = 2 }, "2 datasets had no BIC winner and are left out of the confusion matrix."},
	} {
		t.Run(c.name, func(t *testing.T) {
			d := base()
			c.set(&d)
			v := verdict(names, d)
			if len(v) != len(clean)+1 {
				t.Errorf("%d lines, want %d:\n%s", len(v), len(clean)+1, strings.Join(v, "\n"))
			}
			if !strings.Contains(v[len(v)-1], c.want) {
				t.Errorf("last line %q lacks %q", v[len(v)-1], c.want)
			}
		})
	}
}

func TestAtBoundShare(t *testing.T) {
	nan := math.NaN()
	for _, c := range []struct {
		est  []float64
		want float64
	}{
		{[]float64{0, 0.5, 1, 0.9995, 0.0011}, 3.0 / 5}, // 0, 1 and 0.9995 are within 0.001 of an end; 0.0011 is not
		{[]float64{0.2, nan, 0.001, math.Inf(1)}, 0.5},
		{[]float64{nan}, nan},
	} {
		got := AtBoundShare(c.est, 0, 1)
		if !(math.IsNaN(c.want) && math.IsNaN(got)) && !scalar.EqualWithinAbs(got, c.want, 1e-12) {
			t.Errorf("AtBoundShare(%v) = %v, want %v", c.est, got, c.want)
		}
	}
	// The margin scales with the range.
	if got := AtBoundShare([]float64{2.01, 2.2, 11.995}, 2, 12); !scalar.EqualWithinAbs(got, 2.0/3, 1e-12) {
		t.Errorf("on [2, 12]: %v, want 2/3", got)
	}
	defer func() {
		if r := recover(); r == nil || !strings.HasPrefix(fmt.Sprint(r), "recovery: AtBoundShare") {
			t.Errorf("recover() = %v, want a recovery: panic", r)
		}
	}()
	AtBoundShare([]float64{1}, 1, 1)
}

// TestDemoHypothesesVerdict: a cheap run of the demo's six hypotheses
// (one design, 4 participants per generator, 10 trials per CTI) names
// all 15 pairs with both directions, and fills at_bound.
func TestDemoHypothesesVerdict(t *testing.T) {
	if testing.Short() {
		t.Skip("runs a study")
	}
	data, err := os.ReadFile("../testdata/studies/radio-watch.json")
	if err != nil {
		t.Fatal(err)
	}
	var doc map[string]any
	if err := json.Unmarshal(data, &doc); err != nil {
		t.Fatal(err)
	}
	d := doc["designs"].([]any)[0].(map[string]any)
	d["participants"], d["trials_per_cti"] = 4, 10
	doc["designs"] = []any{d}
	delete(doc, "replication") // default group sizes follow the pool
	data, _ = json.Marshal(doc)
	s, err := models.LoadStudy(data)
	if err != nil {
		t.Fatal(err)
	}
	rep, err := Run(context.Background(), s, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if !reflectEqual(rep.Hypotheses, demoNames) {
		t.Fatalf("hypotheses %v, want the demo's %v", rep.Hypotheses, demoNames)
	}
	dr := rep.Designs[0]
	t.Log(strings.Join(dr.Verdict, "\n"))
	checkEveryPair(t, rep.Hypotheses, dr.Criteria[BICCriterion], dr.Verdict)
	if !strings.Contains(dr.Verdict[1], "Of the 15 pairs of hypotheses") {
		t.Errorf("second line %q does not count the 15 pairs", dr.Verdict[1])
	}
	for _, p := range dr.ParamRecovery {
		if v := float64(p.AtBound); math.IsNaN(v) || v < 0 || v > 1 {
			t.Errorf("%s.%s: at_bound %v, want a share", p.Hypothesis, p.Parameter, v)
		}
	}
	if dr.ITIms != 1000 || !scalar.EqualWithinAbs(dr.MinutesPerParticipant, 40*(3000+4*(1500+1000))/60000.0/4, 1e-12) {
		t.Errorf("iti_ms %d, minutes %v", dr.ITIms, dr.MinutesPerParticipant)
	}
}

func reflectEqual(a, b []string) bool { return strings.Join(a, "\x00") == strings.Join(b, "\x00") }
