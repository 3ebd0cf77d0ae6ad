package models

import (
	"os"
	"testing"
	"time"
)

// BenchmarkPredict measures one hypothesis's full prediction set (every
// CTI, both trial classes, the neural signal) on the default design.
func BenchmarkPredict(b *testing.B) {
	d := Design{}
	d.FillDefaults()
	l, err := NewListener(&d)
	if err != nil {
		b.Fatal(err)
	}
	cases := []struct {
		name string
		p    Precision
	}{
		{"constant", Constant{Level: 0.5}},
		{"saturating", Saturating{Low: 0.1, High: 2, Tau: 0.3}},
		{"hazard", NewHazard(0.1, 2, 0.2, 0.2, d.CTIms, d.CTIWeights)},
	}
	for _, c := range cases {
		b.Run(c.name, func(b *testing.B) {
			ws, pr := l.NewWorkspace(), l.NewPrediction()
			b.ReportAllocs()
			for b.Loop() {
				l.Predict(c.p, pr, ws)
			}
		})
	}
}

// BenchmarkPredictGraded measures a prediction set (every CTI, both trial
// classes, the neural signal) of each of the demo's six hypotheses at their
// reference values on the demo's lamp-behaviour design, with
// precision_sd = 0 and 0.2 (model.md §3b), and reports the cost of the
// graded set as a multiple of the deterministic one ("ratio").
func BenchmarkPredictGraded(b *testing.B) {
	s, err := LoadStudy(demoStudyBytes(b))
	if err != nil {
		b.Fatal(err)
	}
	d := s.Designs[0]
	var precs []Precision
	for _, h := range s.Hypotheses {
		p, err := NewPrecision(h, &d, h.ReferenceValues())
		if err != nil {
			b.Fatal(err)
		}
		precs = append(precs, p)
	}
	type set struct {
		l  *Listener
		ws *Workspace
		pr *Prediction
		ns time.Duration
	}
	mk := func(sd float64) *set {
		dd := d
		dd.Agent.PrecisionSD = sd
		l, err := NewListener(&dd)
		if err != nil {
			b.Fatal(err)
		}
		return &set{l: l, ws: l.NewWorkspace(), pr: l.NewPrediction()}
	}
	det, gr := mk(0), mk(0.2)
	n := 0
	for b.Loop() {
		for _, st := range []*set{det, gr} {
			t0 := time.Now()
			for _, p := range precs {
				st.l.Predict(p, st.pr, st.ws)
			}
			st.ns += time.Since(t0)
		}
		n += len(precs)
	}
	b.ReportMetric(float64(det.ns.Nanoseconds())/float64(n), "ns/set-sd0")
	b.ReportMetric(float64(gr.ns.Nanoseconds())/float64(n), "ns/set-sd0.2")
	b.ReportMetric(float64(gr.ns)/float64(det.ns), "ratio")
}

// demoStudyBytes reads the demo study file of testdata.
func demoStudyBytes(b *testing.B) []byte {
	data, err := os.ReadFile("../testdata/studies/radio-watch.json")
	if err != nil {
		b.Fatal(err)
	}
	return data
}
