package models

import "testing"

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
