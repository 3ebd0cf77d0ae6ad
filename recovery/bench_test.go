package recovery

import (
	"context"
	"testing"

	"discrimen/models"
)

// BenchmarkDemoStudy runs the whole demo study (six hypotheses, 100
// participants each, two designs: 7,200 fits) in this process, and reports
// how many self-fits ended below the truth's ln L (below-truth, of
// truth-checked): the full-demo check that the test over every testdata
// study at 10 participants cannot afford.
//
//	go test ./recovery -run XXX -bench DemoStudy -benchtime 1x
func BenchmarkDemoStudy(b *testing.B) {
	s := loadStudy(b, "../testdata/studies/radio-watch.json")
	for b.Loop() {
		r, err := Run(context.Background(), s, Options{})
		if err != nil {
			b.Fatal(err)
		}
		b.ReportMetric(float64(r.Timing.Fits)/r.Timing.TotalSeconds, "fits/s")
		b.ReportMetric(r.Timing.GridSeconds, "grid-s")
		below, checked := 0, 0
		for _, d := range r.Designs {
			below += d.FitFailures.BelowTruth
			checked += d.FitFailures.TruthChecked
		}
		b.ReportMetric(float64(below), "below-truth")
		b.ReportMetric(float64(checked), "truth-checked")
	}
}

// BenchmarkFit fits one candidate to one demo dataset, searching on the
// prediction grid ("grid") or on exact predictions at every evaluation
// ("exact"); both end with the exact likelihood and, for the self-fit
// measured here, the grid-Hessian SEs computed after it in RunShard.
//
//	go test ./recovery -run XXX -bench Fit -benchtime 20x
func BenchmarkFit(b *testing.B) {
	s := loadStudy(b, "../testdata/studies/radio-watch.json")
	s.Designs = s.Designs[1:]
	c, err := Compile(context.Background(), s, 0)
	if err != nil {
		b.Fatal(err)
	}
	const g = 3 // early-lift: one free parameter, plus lapse and eeg_ar
	d := &c.Designs[0]
	h := s.Hypotheses[g]
	truth := drawTruth(truthRand(s.Seed, h.Name, 0), h, d)
	l := c.listeners[0]
	pr := l.NewPrediction()
	prec, _ := models.NewPrecision(h, d, truth.Free)
	l.Predict(prec, pr, nil)
	sum := summarise(d, Simulate(datasetRand(s.Seed, d.Name, h.Name, 0, "trials"), d, h, 0, truth, pr))
	exact := *c.grids[0][g]
	exact.points = 0
	for _, bc := range []struct {
		name string
		grid *PredictionGrid
	}{{"grid", c.grids[0][g]}, {"exact", &exact}} {
		b.Run(bc.name, func(b *testing.B) {
			f := newFitter(bc.grid)
			evals := 0
			for b.Loop() {
				fit := f.fit(sum)
				sp := newSpace(f.grid, sum)
				fit.SE, fit.SEReliable, fit.SENote = f.standardErrors(sum, sp, thetaOf(sp, &fit))
				evals += fit.Evaluations
			}
			b.ReportMetric(float64(evals)/float64(b.N), "evals/fit")
		})
	}
}
