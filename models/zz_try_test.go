package models

import (
	"os"
	"testing"
	"time"
)

func TestZZTry(t *testing.T) {
	data, err := os.ReadFile("../testdata/studies/radio-watch.json")
	if err != nil {
		t.Fatal(err)
	}
	s, err := LoadStudy(data)
	if err != nil {
		t.Fatal(err)
	}
	d := s.Designs[0]
	for _, sd := range []float64{0, 1e-9, 0.15, 0.2} {
		d.Agent.PrecisionSD = sd
		l, _ := NewListener(&d)
		ws := l.NewWorkspace()
		for _, tau := range []float64{0.17, 0.18} {
			pr := l.NewPrediction()
			st := time.Now()
			l.Predict(Saturating{Low: 0.1, High: 2, Tau: tau}, pr, ws)
			el := time.Since(st)
			ch := 0
			if ws.graded != nil {
				for _, c := range ws.graded.changes {
					ch += len(c)
				}
			}
			t.Logf("sd %g tau %g: %v changes %d valid acc %.4f inv acc %.4f mis %.4f rt %.1f %.1f cens %v %v", sd, tau, el, ch, pr.Valid.Accuracy, pr.Invalid.Accuracy, pr.Invalid.Misdirected, pr.Valid.RTms, pr.Invalid.RTms, pr.Valid.Censored, pr.Invalid.Censored)
		}
	}
}

func TestZZCount(t *testing.T) {
	data, _ := os.ReadFile("../testdata/studies/radio-watch.json")
	s, _ := LoadStudy(data)
	d := s.Designs[0]
	d.Agent.PrecisionSD = 0.2
	l, _ := NewListener(&d)
	ws := l.NewWorkspace()
	for _, h := range s.Hypotheses {
		p, _ := NewPrecision(h, &d, h.ReferenceValues())
		pr := l.NewPrediction()
		l.Predict(p, pr, ws)
		t.Logf("%s: changes %v", h.Name, ws.graded.changes)
	}
}
