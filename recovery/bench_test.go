package recovery

import (
	"context"
	"testing"
)

// BenchmarkDemoStudy runs the whole demo study (six hypotheses, 100
// participants each, two designs: 7,200 fits) in this process.
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
	}
}
