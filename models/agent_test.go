package models

import (
	"math"
	"os"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"
)

// TestSoftStepBayesFixedPoint: a single factor with one observation,
// updated by the gradient step with target = ln prior + ln likelihood,
// converges to the exact posterior prior·lik/Σ prior·lik (Bayes' rule, any
// probability textbook).
func TestSoftStepBayesFixedPoint(t *testing.T) {
	prior := []float64{0.5, 0.3, 0.2}
	lik := []float64{0.1, 0.6, 0.3}
	z := 0.0
	for i := range prior {
		z += prior[i] * lik[i]
	}
	v := make([]float64, 3)
	s := make([]float64, 3)
	target := make([]float64, 3)
	for i := range v {
		v[i] = math.Log(prior[i])
		target[i] = math.Log(prior[i]) + math.Log(lik[i])
	}
	for range 200 {
		softStep(v, s, target, 1.0/4)
	}
	for i := range s {
		want := prior[i] * lik[i] / z
		if !scalar.EqualWithinAbsOrRel(s[i], want, 1e-12, 1e-12) {
			t.Errorf("s[%d] = %.15g, want posterior %.15g", i, s[i], want)
		}
	}
	// One step moves exactly 1/κ of the way in log space before renormalising.
	v2 := []float64{math.Log(1.0 / 3), math.Log(1.0 / 3), math.Log(1.0 / 3)}
	softStep(v2, s, []float64{0, math.Log(4), 0}, 1.0/4)
	// v ← v + (ln(1,4,1)/6 − v)/4; the ratio s1/s0 = (4)^(1/4).
	if r := s[1] / s[0]; !scalar.EqualWithinAbsOrRel(r, math.Pow(4, 0.25), 1e-12, 1e-12) {
		t.Errorf("one step: s1/s0 = %.15g, want 4^(1/4) = %.15g", r, math.Pow(4, 0.25))
	}
}

func demoStudy(t testing.TB) *Study {
	t.Helper()
	data, err := os.ReadFile("../testdata/studies/radio-watch.json")
	if err != nil {
		t.Fatal(err)
	}
	s, err := DecodeStudy(data)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

var monotone = map[string]bool{"linear": true, "exponential": true, "saturating": true, "logistic": true}

// TestDemoQualitativeFacts checks, at each demo hypothesis's reference
// values: valid faster than invalid and at least as accurate at every CTI
// (Posner 1980, QJEP 32:3); valid RT non-increasing in CTI for the
// monotone families (foreperiod effect, Niemi & Näätänen 1981); RTs in
// [30, 900] ms without censoring; a flat neural line for constant
// precision and a rising one for the monotone families (preparatory ramps:
// common practice in EEG work).
func TestDemoQualitativeFacts(t *testing.T) {
	s := demoStudy(t)
	for di := range s.Designs {
		d := &s.Designs[di]
		preds, err := PredictDesign(s, d, nil)
		if err != nil {
			t.Fatal(err)
		}
		for _, p := range preds {
			for c := range p.CTIms {
				v, iv := p.Valid.RTms[c], p.Invalid.RTms[c]
				if !(v < iv) {
					t.Errorf("%s/%s CTI %d: valid RT %.1f not faster than invalid %.1f", d.Name, p.Name, p.CTIms[c], v, iv)
				}
				if p.Valid.Accuracy[c] < p.Invalid.Accuracy[c]-1e-12 {
					t.Errorf("%s/%s CTI %d: valid accuracy %.3f below invalid %.3f", d.Name, p.Name, p.CTIms[c], p.Valid.Accuracy[c], p.Invalid.Accuracy[c])
				}
				for _, rt := range []float64{v, iv} {
					if rt < 30 || rt > 900 {
						t.Errorf("%s/%s CTI %d: RT %.1f ms outside [30, 900]", d.Name, p.Name, p.CTIms[c], rt)
					}
				}
				if p.Censored.Valid[c] != 0 || p.Censored.Invalid[c] != 0 {
					t.Errorf("%s/%s CTI %d: censored at reference values", d.Name, p.Name, p.CTIms[c])
				}
				if c > 0 && monotone[p.Family] && p.Valid.RTms[c] > p.Valid.RTms[c-1]+1e-9 {
					t.Errorf("%s/%s: valid RT rises from %.2f to %.2f between CTIs %d and %d", d.Name, p.Name, p.Valid.RTms[c-1], p.Valid.RTms[c], p.CTIms[c-1], p.CTIms[c])
				}
			}
			last := p.Neural.ByCTI[len(p.CTIms)-1]
			switch {
			case p.Family == "constant":
				for b, x := range last {
					if math.Abs(x) > 1e-9 {
						t.Errorf("%s: constant neural bin %d = %g, want 0", p.Name, b, x)
					}
				}
			case monotone[p.Family]:
				for b := 1; b < len(last); b++ {
					if last[b] < last[b-1]-1e-12 {
						t.Errorf("%s: neural signal falls at bin %d (%.4f → %.4f)", p.Name, b, last[b-1], last[b])
					}
				}
				if last[len(last)-1]-last[0] < 0.1 {
					t.Errorf("%s: neural signal rises only %.4f", p.Name, last[len(last)-1]-last[0])
				}
			}
		}
	}
}

// TestRTContinuousInParameters guards against a staircase and against
// jumps: sweeping each demo hypothesis's free parameter over its range in
// 400 steps, no step's change in valid RT exceeds 1 ms plus five times the
// larger of its neighbours' (a discontinuity stands out from a steep but
// smooth stretch), and the RT takes a new value at nearly every step.
func TestRTContinuousInParameters(t *testing.T) {
	if testing.Short() {
		t.Skip("sweep of every parameter")
	}
	s := demoStudy(t)
	d := &s.Designs[0]
	l, err := NewListener(d)
	if err != nil {
		t.Fatal(err)
	}
	ws, pr := l.NewWorkspace(), l.NewPrediction()
	const steps = 400
	for _, h := range s.Hypotheses {
		names := h.FreeParams()
		for pi, name := range names {
			p := h.Params[name]
			ref := h.ReferenceValues()
			rts := make([][]float64, len(d.CTIms))
			xs := make([]float64, steps+1)
			for i := 0; i <= steps; i++ {
				x := append([]float64(nil), ref...)
				x[pi] = *p.Min + (*p.Max-*p.Min)*float64(i)/steps
				xs[i] = x[pi]
				prec, err := NewPrecision(h, d, x)
				if err != nil {
					t.Fatal(err)
				}
				l.Predict(prec, pr, ws)
				for c, rt := range pr.Valid.RTms {
					rts[c] = append(rts[c], rt)
				}
			}
			same := 0
			for c, r := range rts {
				for i := 1; i <= steps; i++ {
					jump := math.Abs(r[i] - r[i-1])
					if jump == 0 {
						same++
					}
					nb := 0.0
					if i > 1 {
						nb = math.Max(nb, math.Abs(r[i-1]-r[i-2]))
					}
					if i < steps {
						nb = math.Max(nb, math.Abs(r[i+1]-r[i]))
					}
					if jump > 1+5*nb {
						t.Errorf("%s.%s: valid RT at CTI %d jumps %.2f → %.2f ms at %s = %.4g (neighbours change %.2f)", h.Name, name, d.CTIms[c], r[i-1], r[i], name, xs[i], nb)
					}
				}
			}
			if frac := float64(same) / float64(steps*len(d.CTIms)); frac > 0.2 {
				t.Errorf("%s.%s: %.0f%% of steps leave the RT unchanged (staircase)", h.Name, name, 100*frac)
			}
		}
	}
}

// TestPredictRepeats: the same call gives the same bits, with a fresh or a
// reused workspace.
func TestPredictRepeats(t *testing.T) {
	s := demoStudy(t)
	d := &s.Designs[1]
	l, _ := NewListener(d)
	h := s.Hypotheses[5]
	prec, _ := NewPrecision(h, d, h.ReferenceValues())
	a, b := l.NewPrediction(), l.NewPrediction()
	ws := l.NewWorkspace()
	l.Predict(Constant{Level: 1.7}, b, ws) // dirty the workspace first
	l.Predict(prec, a, nil)
	l.Predict(prec, b, ws)
	for c := range a.CTIms {
		if a.Valid.RTms[c] != b.Valid.RTms[c] || a.Invalid.Accuracy[c] != b.Invalid.Accuracy[c] {
			t.Fatalf("CTI %d: predictions differ between workspaces", c)
		}
		for i := range a.Neural[c] {
			if a.Neural[c][i] != b.Neural[c][i] {
				t.Fatalf("CTI %d bin %d: neural differs", c, i)
			}
		}
	}
}
