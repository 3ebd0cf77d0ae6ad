package recovery

import (
	"context"
	"encoding/json"
	"math"
	"math/rand/v2"
	"reflect"
	"strings"
	"testing"
	"time"

	"gonum.org/v1/gonum/floats/scalar"

	"discrimen/models"
)

// rankedDesign builds a design report with the given BIC normalised MI,
// confusion diagonal (its mean is the recovery rate), parameter r values
// and cost.
func rankedDesign(name string, nmi float64, diag []float64, rs []float64, minutes float64, trials int) DesignReport {
	conf := make([][]NullFloat, len(diag))
	var rate float64
	for i, d := range diag {
		conf[i] = make([]NullFloat, len(diag))
		for j := range conf[i] {
			conf[i][j] = NullFloat((1 - d) / float64(len(diag)-1))
		}
		conf[i][i] = NullFloat(d)
		rate += d / float64(len(diag))
	}
	var pr []ParamRecoveryReport
	for _, r := range rs {
		pr = append(pr, ParamRecoveryReport{R: NullFloat(r)})
	}
	return DesignReport{Name: name, MinutesPerParticipant: minutes, TrialsPerParticipant: trials, ParamRecovery: pr,
		Criteria: map[Criterion]CriterionReport{"bic": {Confusion: conf, NormalizedMI: NullFloat(nmi), RecoveryRate: NullFloat(rate)}}}
}

var byInformation = models.Ranking{Objective: models.ObjectiveInformation}

// TestRankDesigns: under the information objective the order follows
// normalised MI, then (within 0.01) the worst diagonal, then mean
// parameter r (NaN skipped), then fewer minutes, whatever the order the
// designs are listed in (model.md §8).
func TestRankDesigns(t *testing.T) {
	nan := math.NaN()
	for _, c := range []struct {
		name    string
		designs []DesignReport
		want    []string
		verdict []string
	}{
		{"MI decides", []DesignReport{
			rankedDesign("behaviour", 0.55, []float64{0.4, 0.9}, []float64{0.8}, 13.3, 160),
			rankedDesign("behaviour-eeg", 0.71, []float64{0.62, 0.9}, []float64{0.85}, 13.3, 160),
		}, []string{"behaviour-eeg", "behaviour"}, []string{
			"Designs are ranked by normalised mutual information under BIC.",
			"Prefer behaviour-eeg over behaviour: it carries more information",
			"Normalised MI 0.71 vs 0.55; worst-case recovery 0.62 vs 0.40, BIC recovery rate 0.76 vs 0.65, mean parameter r 0.85 vs 0.80, at the same 13.3 minutes per participant.",
		}},
		{"MI tie, worst diagonal decides", []DesignReport{
			rankedDesign("a", 0.705, []float64{0.40, 0.95}, []float64{0.9}, 10, 100),
			rankedDesign("b", 0.700, []float64{0.62, 0.80}, []float64{0.5}, 12, 120),
		}, []string{"b", "a"}, []string{"normalised MI ties within 0.01, and its worst-recovered", "at 12.0 vs 10.0 minutes (120 vs 100 trials) per participant"}},
		{"MI and diagonal tie, parameter r decides", []DesignReport{
			rankedDesign("a", 0.70, []float64{0.6, 0.9}, []float64{0.5, nan}, 10, 100),
			rankedDesign("b", 0.70, []float64{0.6, 0.9}, []float64{0.7, nan, 0.9}, 12, 120),
		}, []string{"b", "a"}, []string{"worst-case recovery ties within 0.01, and its parameters are recovered better", "mean parameter r 0.80 vs 0.50"}},
		{"all tie, fewer minutes", []DesignReport{
			rankedDesign("long", 0.70, []float64{0.6, 0.9}, []float64{0.8}, 20, 200),
			rankedDesign("short", 0.705, []float64{0.6, 0.9}, []float64{0.8}, 10, 100),
		}, []string{"short", "long"}, []string{"mean parameter r ties within 0.01, and it takes less testing time"}},
		{"NaN MI last, three designs", []DesignReport{
			rankedDesign("broken", nan, []float64{nan, nan}, nil, 5, 50),
			rankedDesign("mid", 0.5, []float64{0.5, 0.5}, []float64{0.5}, 5, 50),
			rankedDesign("top", 0.9, []float64{0.9, 0.9}, []float64{0.9}, 5, 50),
		}, []string{"top", "mid", "broken"}, []string{"Prefer top over mid, the runner-up of 3 designs"}},
		{"one design", []DesignReport{rankedDesign("only", 0.6, []float64{0.5, 0.7}, []float64{0.7}, 13.3, 160)},
			[]string{"only"}, []string{"Only one design, only: normalised MI 0.60, worst-case recovery 0.50, BIC recovery rate 0.60, mean parameter r 0.70, at 13.3 minutes (160 trials) per participant."}},
	} {
		t.Run(c.name, func(t *testing.T) {
			rep := &Report{Designs: c.designs}
			rankDesigns(rep, byInformation, nil)
			var got []string
			for i, r := range rep.Ranking {
				got = append(got, r.Design)
				if r.Rank != i+1 {
					t.Errorf("row %d has rank %d", i, r.Rank)
				}
			}
			if !reflect.DeepEqual(got, c.want) || rep.Preferred != c.want[0] {
				t.Errorf("order %v, preferred %q; want %v", got, rep.Preferred, c.want)
			}
			for _, w := range c.verdict {
				if !strings.Contains(rep.Verdict, w) {
					t.Errorf("verdict %q lacks %q", rep.Verdict, w)
				}
			}
			// The listed order must not matter.
			rev := &Report{}
			for i := len(c.designs) - 1; i >= 0; i-- {
				rev.Designs = append(rev.Designs, c.designs[i])
			}
			rankDesigns(rev, byInformation, nil)
			a, _ := json.Marshal(rep.Ranking)
			b, _ := json.Marshal(rev.Ranking)
			if string(a) != string(b) {
				t.Errorf("reversed input ranks %+v, want %+v", rev.Ranking, rep.Ranking)
			}
		})
	}
	rep := &Report{Designs: []DesignReport{rankedDesign("x", 0.6, []float64{0.5, 0.7}, []float64{0.7, nan}, 12, 160)}}
	rankDesigns(rep, byInformation, nil)
	r := rep.Ranking[0]
	if r.WorstDiagonal != 0.5 || r.ParameterR != 0.7 || r.TrialsPerParticipant != 160 || !scalar.EqualWithinAbs(float64(r.NormalizedMIPerMinute), 0.05, 1e-12) {
		t.Errorf("row %+v: want worst diagonal 0.5, parameter r 0.7 (NaN skipped), 160 trials, 0.05 MI per minute", r)
	}
}

// TestRankingObjectives: each objective orders the same synthetic designs
// as documented on rankDesigns. short and long both reach the default
// target 0.8; long carries more information for twice the minutes; wide
// recovers its worst hypothesis best.
func TestRankingObjectives(t *testing.T) {
	short := rankedDesign("short", 0.60, []float64{0.80, 0.90}, []float64{0.8}, 8.7, 160)  // rate 0.85
	long := rankedDesign("long", 0.65, []float64{0.82, 0.98}, []float64{0.8}, 17.3, 320)   // rate 0.90
	wide := rankedDesign("wide", 0.50, []float64{0.84, 0.86}, []float64{0.8}, 13.0, 240)   // rate 0.85
	weak := rankedDesign("weak", 0.40, []float64{0.50, 0.90}, []float64{0.8}, 5.0, 100)    // rate 0.70
	weaker := rankedDesign("weaker", 0.45, []float64{0.55, 0.70}, []float64{0.8}, 4.0, 80) // rate 0.625
	for _, c := range []struct {
		name    string
		obj     models.Ranking
		designs []DesignReport
		want    []string
		figure  string
		verdict []string
	}{
		{"cheapest_reaching picks the 8.7-minute design over the 17.3-minute one", models.Ranking{}, // defaults: cheapest_reaching, 0.8
			[]DesignReport{long, short}, []string{"short", "long"}, "recovery_rate",
			[]string{"Prefer short over long: both reach the target BIC recovery rate of 0.80, and it takes less testing time.", "at 8.7 vs 17.3 minutes (160 vs 320 trials)"}},
		{"cheapest_reaching: reaching designs first, cheapest first; the others by MI", models.Ranking{Objective: models.ObjectiveCheapestReaching, Target: 0.8},
			[]DesignReport{weak, long, weaker, wide, short}, []string{"short", "wide", "long", "weaker", "weak"}, "recovery_rate", nil},
		{"cheapest_reaching with a higher target: only long reaches", models.Ranking{Objective: models.ObjectiveCheapestReaching, Target: 0.88},
			[]DesignReport{short, long}, []string{"long", "short"}, "recovery_rate",
			[]string{"its BIC recovery rate reaches the target of 0.88 and the other's does not"}},
		{"cheapest_reaching, none reaches: the most informative", models.Ranking{Objective: models.ObjectiveCheapestReaching, Target: 0.95},
			[]DesignReport{short, long, weak}, []string{"long", "short", "weak"}, "recovery_rate",
			[]string{"No design reaches the target BIC recovery rate of 0.95 (the highest is long's 0.90), so they are ranked by normalised MI.", "it carries more information"}},
		{"none reaches, the highest rounds to the target: three decimals", models.Ranking{Objective: models.ObjectiveCheapestReaching, Target: 0.904},
			[]DesignReport{short, long, weak}, []string{"long", "short", "weak"}, "recovery_rate",
			[]string{"No design reaches the target BIC recovery rate of 0.90 (the highest is long's 0.900), so they"}},
		{"information picks the higher MI", byInformation,
			[]DesignReport{short, long, wide}, []string{"long", "short", "wide"}, "normalized_mi", []string{"Prefer long over short, the runner-up of 3 designs"}},
		{"information_per_minute", models.Ranking{Objective: models.ObjectiveInformationPerMinute},
			[]DesignReport{long, short, weaker}, []string{"weaker", "short", "long"}, "normalized_mi_per_minute",
			[]string{"it carries more information per minute of testing", "Normalised MI per minute 0.113 vs 0.069"}},
		{"worst_recovery", models.Ranking{Objective: models.ObjectiveWorstRecovery},
			[]DesignReport{short, long, wide}, []string{"wide", "long", "short"}, "worst_diagonal", []string{"its worst-recovered hypothesis is recovered more often"}},
	} {
		t.Run(c.name, func(t *testing.T) {
			rep := &Report{Designs: c.designs}
			rankDesigns(rep, c.obj, nil)
			var got []string
			for _, r := range rep.Ranking {
				got = append(got, r.Design)
			}
			if !reflect.DeepEqual(got, c.want) || rep.Preferred != c.want[0] {
				t.Errorf("order %v, preferred %q; want %v", got, rep.Preferred, c.want)
			}
			if rep.RankedBy == nil || rep.RankedBy.Figure != c.figure || rep.RankedBy.BootstrapRounds != 0 {
				t.Fatalf("ranked by %+v, want figure %s, no bootstrap", rep.RankedBy, c.figure)
			}
			for _, r := range rep.Ranking {
				if r.Figure != rowFigure(&r, objectiveFigure(rep.RankedBy.Objective)) {
					t.Errorf("%s: figure %v is not its %s", r.Design, r.Figure, c.figure)
				}
				if want := rep.Ranking[0].Figure - r.Figure; !(r.DifferenceToFirst == want) && !math.IsNaN(float64(want)) {
					t.Errorf("%s: difference to first %v, want %v", r.Design, r.DifferenceToFirst, want)
				}
				if (r.ReachesTarget != nil) != (rep.RankedBy.Objective == models.ObjectiveCheapestReaching) {
					t.Errorf("%s: reaches_target %v under %s", r.Design, r.ReachesTarget, rep.RankedBy.Objective)
				}
			}
			for _, w := range c.verdict {
				if !strings.Contains(rep.Verdict, w) {
					t.Errorf("verdict %q lacks %q", rep.Verdict, w)
				}
			}
		})
	}
}

// syntheticSample draws n participants per generator of a design whose
// BIC winner is the generator with probability diag[g] and otherwise one
// of the other candidates at random; each generator has one parameter
// whose estimate is truth + N(0, noise²).
func syntheticSample(seed uint64, diag []float64, n int, noise, minutes float64) rankSample {
	rng := rand.New(rand.NewPCG(seed, 1))
	H := len(diag)
	s := rankSample{Minutes: minutes, Shares: make([][][]float64, H), Truth: make([][][]float64, H), Estimate: make([][][]float64, H)}
	for g := range H {
		for range n {
			sh := make([]float64, H)
			w := g
			if rng.Float64() >= diag[g] {
				w = (g + 1 + rng.IntN(H-1)) % H
			}
			sh[w] = 1
			truth := rng.Float64()
			s.Shares[g] = append(s.Shares[g], sh)
			s.Truth[g] = append(s.Truth[g], []float64{truth})
			s.Estimate[g] = append(s.Estimate[g], []float64{truth + noise*rng.NormFloat64()})
		}
	}
	return s
}

func allIndices(s *rankSample) [][]int {
	idx := make([][]int, len(s.Shares))
	for g := range idx {
		for i := range s.Shares[g] {
			idx[g] = append(idx[g], i)
		}
	}
	return idx
}

// TestFiguresOfFullSample: figuresOf on every participant gives
// NewConfusion's figures and the mean Pearson r of the parameters.
func TestFiguresOfFullSample(t *testing.T) {
	s := syntheticSample(3, []float64{0.9, 0.6, 0.75}, 40, 0.2, 6)
	f := figuresOf(&s, allIndices(&s))
	cf := NewConfusion(s.Shares)
	want := figureSet{cf.NormalizedMI, math.Min(cf.P[0][0], math.Min(cf.P[1][1], cf.P[2][2])), cf.RecoveryRate, 0, cf.NormalizedMI / 6}
	var rs float64
	for g := range 3 {
		var tr, es, se []float64
		var rel []bool
		for i := range s.Truth[g] {
			tr, es, se, rel = append(tr, s.Truth[g][i][0]), append(es, s.Estimate[g][i][0]), append(se, 0), append(rel, false)
		}
		rs += RecoverParam(tr, es, se, rel).R / 3
	}
	want[figParamR] = rs
	for k := range nFigures {
		if !scalar.EqualWithinAbsOrRel(f[k], want[k], 1e-12, 1e-12) {
			t.Errorf("%s = %v, want %v", figureNames[k], f[k], want[k])
		}
	}
}

// TestRankingBootstrap: the intervals repeat exactly, hold the
// full-sample figure, narrow as 1/√n with more participants, and a
// design compared with itself has a paired difference of exactly 0.
func TestRankingBootstrap(t *testing.T) {
	gens := []string{"steady-watch", "linear-ramp", "late-surge"}
	diag := []float64{0.9, 0.6, 0.75}
	width := func(n int) (float64, Bounds) {
		s := syntheticSample(11, diag, n, 0.2, 8.7)
		bs := bootstrap(bootstrapFigures(5, gens, []rankSample{s}, bootstrapRounds))
		iv := bs.interval(0, figRate)
		return float64(iv.High - iv.Low), iv
	}
	w20, iv20 := width(20)
	w320, iv320 := width(320)
	t.Logf("recovery rate interval: n = 20 %v (width %.3f), n = 320 %v (width %.3f)", iv20, w20, iv320, w320)
	// The binomial SE of a mean of three diagonals scales as 1/√n: 16×
	// the participants gives a quarter of the width, up to Monte Carlo
	// error in the percentiles.
	if r := w320 / w20; r < 0.15 || r > 0.4 {
		t.Errorf("width ratio %.3f for 16× the participants, want about 0.25", r)
	}
	s := syntheticSample(11, diag, 320, 0.2, 8.7)
	point := figuresOf(&s, allIndices(&s))[figRate]
	if point < float64(iv320.Low) || point > float64(iv320.High) {
		t.Errorf("full-sample rate %v outside its interval %v", point, iv320)
	}
	// Repeats exactly.
	_, again := width(320)
	if again != iv320 {
		t.Errorf("second run %v, first %v", again, iv320)
	}
	// Paired: the same sample as two designs differs by exactly 0 in
	// every round; a different seed for the bootstrap gives other rounds.
	two := []rankSample{s, s}
	bs := bootstrap(bootstrapFigures(5, gens, two, 200))
	for f := range nFigures {
		if d := bs.difference(0, 1, f); d.Low != 0 || d.High != 0 {
			t.Errorf("%s: paired difference of a design with itself %v, want [0, 0]", figureNames[f], d)
		}
	}
	other := bootstrap(bootstrapFigures(6, gens, two, 200))
	if reflect.DeepEqual(bs, other) {
		t.Error("bootstrap seeds 5 and 6 give the same rounds")
	}
	start := time.Now()
	bootstrapFigures(5, gens, two, bootstrapRounds)
	t.Logf("%d rounds over 2 designs × 3 generators × 320 participants: %v", bootstrapRounds, time.Since(start))
}

// TestRankingBootstrapPairedDetectsSmallDifference: two designs that
// share participants and differ in one generator's winners by a few
// datasets have a paired interval of the rate difference that excludes 0,
// while the unpaired intervals of the two rates overlap.
func TestRankingBootstrapPairedDetectsSmallDifference(t *testing.T) {
	gens := []string{"a", "b", "c"}
	s := syntheticSample(2, []float64{0.85, 0.85, 0.85}, 100, 0.2, 8.7)
	better := syntheticSample(2, []float64{0.85, 0.85, 0.85}, 100, 0.2, 17.3)
	// better recovers six more of b's datasets than s does.
	changed := 0
	better.Shares[1] = nil
	for _, sh := range s.Shares[1] {
		c := append([]float64(nil), sh...)
		if c[1] == 0 && changed < 6 {
			c = []float64{0, 1, 0}
			changed++
		}
		better.Shares[1] = append(better.Shares[1], c)
	}
	bs := bootstrap(bootstrapFigures(9, gens, []rankSample{better, s}, bootstrapRounds))
	d := bs.difference(0, 1, figRate)
	ia, ib := bs.interval(0, figRate), bs.interval(1, figRate)
	t.Logf("rates %v and %v, paired difference %v", ia, ib, d)
	if !(d.Low > 0 && d.Low < 0.02 && d.High > 0.02 && d.High < 0.05) {
		t.Errorf("paired difference %v, want above 0 and around 6/100/3 = 0.02", d)
	}
	if !(ia.Low < ib.High) {
		t.Errorf("unpaired intervals %v and %v do not overlap; the test needs a difference only pairing can see", ia, ib)
	}
}

// TestRankingVerdictUncertainty: the ranking verdict reads the bootstrap —
// two designs with the same participants and nearly the same recovery
// cannot be told apart; cheapest_reaching says what the extra minutes buy.
func TestRankingVerdictUncertainty(t *testing.T) {
	gens := []string{"a", "b", "c"}
	s := syntheticSample(2, []float64{0.85, 0.85, 0.85}, 60, 0.2, 8.7)
	l := syntheticSample(2, []float64{0.85, 0.85, 0.85}, 60, 0.2, 17.3)
	// long recovers three more of a's datasets: a lead in MI that the
	// paired bootstrap cannot tell from none (no changed dataset is drawn
	// in about 5% of rounds).
	changed := 0
	for i, sh := range l.Shares[0] {
		if sh[0] == 0 && changed < 3 {
			l.Shares[0][i] = []float64{1, 0, 0}
			changed++
		}
	}
	design := func(name string, smp rankSample, minutes float64, trials int) DesignReport {
		cf := NewConfusion(smp.Shares)
		d := DesignReport{Name: name, MinutesPerParticipant: minutes, TrialsPerParticipant: trials, Participants: 60,
			Criteria: map[Criterion]CriterionReport{BICCriterion: {Confusion: numMatrix(cf.P), NormalizedMI: NullFloat(cf.NormalizedMI), RecoveryRate: NullFloat(cf.RecoveryRate)}}}
		return d
	}
	for _, c := range []struct {
		obj  models.Ranking
		want []string
	}{
		{models.Ranking{Objective: models.ObjectiveInformation}, []string{
			"Prefer long over short: it carries more information",
			"A bootstrap over the synthetic participants (1000 rounds, the same participants resampled for every design) puts long's lead over short in normalised MI at +0.0",
			"the interval includes 0, so the simulation cannot tell long and short apart on this objective, and short takes less testing time (8.7 vs 17.3 minutes per participant).",
		}},
		{models.Ranking{}, []string{
			"Prefer short over long: both reach the target BIC recovery rate of 0.80",
			"shows that the 95% interval of short's BIC recovery rate",
			"the 8.6 more minutes of long change the recovery rate by +0.0",
			"a change the simulation cannot tell from none",
		}},
	} {
		rep := &Report{Seed: 4, Hypotheses: gens, Designs: []DesignReport{design("short", s, 8.7, 160), design("long", l, 17.3, 320)}}
		rankDesigns(rep, c.obj, []rankSample{s, l})
		if rep.RankedBy.BootstrapRounds != bootstrapRounds || !rep.RankedBy.Paired || rep.RankedBy.Level != 0.95 {
			t.Errorf("ranked by %+v", rep.RankedBy)
		}
		for _, w := range c.want {
			if !strings.Contains(rep.Verdict, w) {
				t.Errorf("%s: verdict %q lacks %q", rep.RankedBy.Objective, rep.Verdict, w)
			}
		}
		for _, r := range rep.Ranking {
			if !r.FigureInterval.known() || !r.NormalizedMIInterval.known() || !r.DifferenceInterval.known() {
				t.Errorf("%s: intervals missing in %+v", r.Design, r)
			}
		}
		t.Logf("%s: %s", rep.RankedBy.Objective, rep.Verdict)
	}
}

// TestRankingJSONShape: report.json's ranking block and rows carry the
// objective, target, figure, its interval and the rank.
func TestRankingJSONShape(t *testing.T) {
	rep := &Report{Study: "s", Designs: []DesignReport{rankedDesign("short", 0.6, []float64{0.8, 0.9}, nil, 8.7, 160)}}
	rankDesigns(rep, models.Ranking{}, nil)
	b, err := rep.JSON()
	if err != nil {
		t.Fatal(err)
	}
	var doc struct {
		Ranking map[string]any   `json:"ranking"`
		Rows    []map[string]any `json:"design_ranking"`
	}
	if err := json.Unmarshal(b, &doc); err != nil {
		t.Fatal(err)
	}
	if doc.Ranking["objective"] != "cheapest_reaching" || doc.Ranking["target"] != 0.8 || doc.Ranking["figure"] != "recovery_rate" {
		t.Errorf("ranking block %v", doc.Ranking)
	}
	row := doc.Rows[0]
	for _, key := range []string{"design", "rank", "figure", "figure_interval", "difference_to_first", "difference_interval", "reaches_target",
		"normalized_mi_interval", "worst_diagonal_interval", "recovery_rate_interval", "parameter_r_interval", "normalized_mi_per_minute_interval"} {
		if _, ok := row[key]; !ok {
			t.Errorf("ranking row lacks %q: %v", key, row)
		}
	}
	if fig, _ := row["figure"].(float64); row["rank"] != 1.0 || !scalar.EqualWithinAbs(fig, 0.85, 1e-12) || row["reaches_target"] != true {
		t.Errorf("row %v, want rank 1, figure 0.85, reaching", row)
	}
	iv, ok := row["figure_interval"].(map[string]any)
	if !ok || len(iv) != 2 || iv["low"] != nil || iv["high"] != nil {
		t.Errorf("figure_interval %v, want {low: null, high: null} without a bootstrap", row["figure_interval"])
	}
}

// TestMinutesCountTheDesignITI: minutes = Σ trials_per_cti·(cti +
// response window + iti_ms)/60000 with the design's own iti_ms.
func TestMinutesCountTheDesignITI(t *testing.T) {
	d := models.Design{CTIms: []int{300, 600}, TrialsPerCTI: 10, ResponseWindowMs: 1500, ITIms: 1000}
	if got, want := minutesPerParticipant(&d), 10*(300+1500+1000+600+1500+1000)/60000.0; !scalar.EqualWithinAbsOrRel(got, want, 1e-12, 1e-12) {
		t.Errorf("minutes %v, want %v", got, want)
	}
	base := minutesPerParticipant(&d)
	d.ITIms = 2500 // 20 trials, 1.5 s more each: half a minute more
	if got, want := minutesPerParticipant(&d), (10*(300+1500+2500+600+1500+2500))/60000.0; !scalar.EqualWithinAbsOrRel(got, want, 1e-12, 1e-12) || !scalar.EqualWithinAbs(got-base, 0.5, 1e-12) {
		t.Errorf("minutes with iti_ms 2500: %v (base %v), want %v, half a minute more", got, base, want)
	}
	// The demo's designs: 160 trials, CTIs 300–1200 ms, a 1.5 s window and
	// the default 1 s interval: 8.7 minutes.
	s := mustStudy(t, `{"name": "x (invented)", "seed": 1,
	  "designs": [{"name": "d", "cti_ms": [300, 600, 900, 1200], "trials_per_cti": 40, "response_window_ms": 1500, "participants": 4, "measures": ["rt"]}],
	  "hypotheses": [{"name": "flat", "family": "constant", "params": {"level": {"min": 0.3, "max": 1.5}}},
	                 {"name": "ramp", "family": "linear", "params": {"slope": {"min": 0.5, "max": 3}}}]}`)
	if got := minutesPerParticipant(&s.Designs[0]); s.Designs[0].ITIms != 1000 || !scalar.EqualWithinAbs(got, 520000/60000.0, 1e-12) {
		t.Errorf("default iti_ms %d, minutes %v, want 1000 and 8.67", s.Designs[0].ITIms, got)
	}
}

// TestRankingRepeatsAcrossWorkers: a two-design study ranks with the
// same rows and verdict on 1 and 3 workers.
func TestRankingRepeatsAcrossWorkers(t *testing.T) {
	if testing.Short() {
		t.Skip("runs a study twice")
	}
	s := mustStudy(t, `{
	  "name": "two lengths (invented)", "seed": 13,
	  "designs": [{"name": "watch", "cti_ms": [300, 900], "participants": 8, "measures": ["rt", "accuracy"], "iti_ms": 1500,
	               "vary": [{"field": "trials_per_cti", "values": [10, 30], "labels": ["short", "long"]}]}],
	  "hypotheses": [
	    {"name": "flat", "family": "constant", "params": {"level": {"min": 0.3, "max": 1.5}}},
	    {"name": "ramp", "family": "linear", "params": {"slope": {"min": 0.5, "max": 3}}}
	  ],
	  "replication": {"group_sizes": [4, 8], "replicates": 20},
	  "ranking": {"objective": "information_per_minute"}
	}`)
	var out [][]byte
	for _, w := range []int{1, 3} {
		rep, err := Run(context.Background(), s, Options{Workers: w})
		if err != nil {
			t.Fatal(err)
		}
		b, _ := json.Marshal(struct {
			R []DesignRank
			M *RankingMethod
			V string
		}{rep.Ranking, rep.RankedBy, rep.Verdict})
		out = append(out, b)
		if rep.RankedBy.Objective != models.ObjectiveInformationPerMinute || rep.RankedBy.BootstrapRounds != bootstrapRounds || !rep.RankedBy.Paired {
			t.Errorf("ranked by %+v", rep.RankedBy)
		}
		for _, d := range rep.Designs {
			if d.ITIms != 1500 {
				t.Errorf("%s: iti_ms %d, want 1500", d.Name, d.ITIms)
			}
		}
		t.Logf("%d workers: %s", w, rep.Verdict)
	}
	if string(out[0]) != string(out[1]) {
		t.Errorf("ranking differs between 1 and 3 workers:\n%s\n%s", out[0], out[1])
	}
}

// BenchmarkRankingBootstrap: the demo's shape, 2 designs × 6 generators ×
// 100 participants, one parameter each, bootstrapRounds rounds.
//
//	go test ./recovery -run XXX -bench RankingBootstrap
func BenchmarkRankingBootstrap(b *testing.B) {
	diag := []float64{0.9, 0.6, 0.75, 0.8, 0.7, 0.65}
	samples := []rankSample{syntheticSample(1, diag, 100, 0.2, 8.7), syntheticSample(2, diag, 100, 0.2, 8.7)}
	for b.Loop() {
		bootstrapFigures(7, demoNames, samples, bootstrapRounds)
	}
}

// TestBootstrapRoundsEnough: with bootstrapRounds rounds, the interval
// ends of the recovery rate and normalised MI move by little between
// bootstrap seeds on a design of the demo's shape (6 generators × 100
// participants): under 0.02 over 8 seeds.
func TestBootstrapRoundsEnough(t *testing.T) {
	diag := []float64{0.9, 0.6, 0.75, 0.8, 0.7, 0.65}
	samples := []rankSample{syntheticSample(1, diag, 100, 0.2, 8.7)}
	for _, f := range []int{figRate, figNMI} {
		lo, hi := []float64{}, []float64{}
		for seed := range uint64(8) {
			iv := bootstrap(bootstrapFigures(seed, demoNames, samples, bootstrapRounds)).interval(0, f)
			lo, hi = append(lo, float64(iv.Low)), append(hi, float64(iv.High))
		}
		spread := func(x []float64) float64 {
			a, b := x[0], x[0]
			for _, v := range x {
				a, b = math.Min(a, v), math.Max(b, v)
			}
			return b - a
		}
		t.Logf("%s: low ends %.4f, high ends %.4f (spread %.4f, %.4f)", figureNames[f], lo, hi, spread(lo), spread(hi))
		if spread(lo) > 0.02 || spread(hi) > 0.02 {
			t.Errorf("%s: interval ends spread %.4f and %.4f over 8 seeds, want under 0.02", figureNames[f], spread(lo), spread(hi))
		}
	}
}
