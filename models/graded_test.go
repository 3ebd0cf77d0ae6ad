package models

import (
	"encoding/json"
	"fmt"
	"math"
	"os"
	"strings"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/stat/distuv"
)

// shiftedPrecision is one trial's precision course of model.md §3b:
// γ(t) + δ clipped to [lo, hi]. The tests run the deterministic agent and
// the oracle on it.
type shiftedPrecision struct {
	p         Precision
	d, lo, hi float64
}

func (s shiftedPrecision) At(t float64) float64 { return math.Min(s.hi, math.Max(s.lo, s.p.At(t)+s.d)) }

func gradedListener(t testing.TB, d Design, sd float64) *Listener {
	t.Helper()
	d.Agent.PrecisionSD = sd
	l, err := NewListener(&d)
	if err != nil {
		t.Fatal(err)
	}
	return l
}

func demoDesign(t testing.TB) Design {
	t.Helper()
	data, err := os.ReadFile("../testdata/studies/radio-watch.json")
	if err != nil {
		t.Fatal(err)
	}
	s, err := LoadStudy(data)
	if err != nil {
		t.Fatal(err)
	}
	if s.Designs[0].Name != "lamp-behaviour" {
		t.Fatalf("demo's first design is %q, want lamp-behaviour", s.Designs[0].Name)
	}
	return s.Designs[0]
}

// TestGaussLegendreNodes checks the 6-point rule mapped to [0, 1] against
// the tabulated nodes and weights on [−1, 1] (Abramowitz & Stegun 1964,
// Handbook of Mathematical Functions, Table 25.4; values from memory).
func TestGaussLegendreNodes(t *testing.T) {
	x := []float64{-0.932469514203152, -0.661209386466265, -0.238619186083197, 0.238619186083197, 0.661209386466265, 0.932469514203152}
	w := []float64{0.171324492379170, 0.360761573048139, 0.467913934572691, 0.467913934572691, 0.360761573048139, 0.171324492379170}
	if len(glNodes) != 6 {
		t.Fatalf("%d nodes, want 6", len(glNodes))
	}
	for i := range x {
		if got, want := glNodes[i], (x[i]+1)/2; math.Abs(got-want) > 1e-13 {
			t.Errorf("node %d = %.15f, want %.15f", i, got, want)
		}
		if got, want := glWeights[i], w[i]/2; math.Abs(got-want) > 1e-13 {
			t.Errorf("weight %d = %.15f, want %.15f", i, got, want)
		}
	}
	if len(scanU) != 18 || scanU[0] != 1e-6 || scanU[1] != 1.0/32 || scanU[16] != 31.0/32 || scanU[17] != 1-1e-6 {
		t.Errorf("scan points %v, want 1e-6, (j−0.5)/16 for j = 1..16, 1−1e-6", scanU)
	}
	// δ = σ Φ⁻¹(u): gonum's distuv.UnitNormal as the reference library.
	l := &Listener{sigma: 0.2}
	for _, u := range []float64{1e-9, 1e-6, 0.03125, 0.5, 0.9, 1 - 1e-6} {
		if got, want := l.shift(u), 0.2*distuv.UnitNormal.Quantile(u); math.Abs(got-want) > 1e-9 {
			t.Errorf("shift(%g) = %.12g, want %.12g", u, got, want)
		}
	}
}

// TestGradedTinySDIsDeterministic: with precision_sd = 1e-9 every
// prediction equals the deterministic agent's to 1e-6 (model.md §3b: σ = 0
// is the model of §3), on every oracle design and precision course.
func TestGradedTinySDIsDeterministic(t *testing.T) {
	for _, tc := range oracleCases() {
		t.Run(tc.name, func(t *testing.T) {
			d := tc.design()
			precs := tc.precs
			if precs == nil {
				precs = defaultPrecisions(&d)
			}
			det, gr := gradedListener(t, d, 0), gradedListener(t, d, 1e-9)
			for _, p := range precs {
				a, b := det.NewPrediction(), gr.NewPrediction()
				det.Predict(p, a, nil)
				gr.Predict(p, b, nil)
				if bad := predictionDiff(a, b, 1e-6); bad != "" {
					t.Errorf("%T%+v: %s", p, p, bad)
				}
			}
		})
	}
}

// predictionDiff names the first readout of a and b that differs by more
// than tol (absolute or relative), or returns "".
func predictionDiff(a, b *Prediction, tol float64) string {
	for k, pair := range [][2]ClassPrediction{{a.Valid, b.Valid}, {a.Invalid, b.Invalid}} {
		cls := []string{"valid", "invalid"}[k]
		for c := range a.CTIms {
			for _, q := range []struct {
				name string
				x, y float64
			}{
				{"RT", pair[0].RTms[c], pair[1].RTms[c]},
				{"accuracy", pair[0].Accuracy[c], pair[1].Accuracy[c]},
				{"misdirected", pair[0].Misdirected[c], pair[1].Misdirected[c]},
				{"censored", pair[0].Censored[c], pair[1].Censored[c]},
			} {
				if !scalar.EqualWithinAbsOrRel(q.x, q.y, tol, tol) {
					return fmt.Sprintf("%s %s at CTI %d: %.12g vs %.12g", cls, q.name, a.CTIms[c], q.x, q.y)
				}
			}
		}
	}
	for c := range a.Neural {
		for bb := range a.Neural[c] {
			if !scalar.EqualWithinAbsOrRel(a.Neural[c][bb], b.Neural[c][bb], tol, tol) {
				return fmt.Sprintf("neural bin %d at CTI %d: %.12g vs %.12g", bb, a.CTIms[c], a.Neural[c][bb], b.Neural[c][bb])
			}
		}
	}
	return ""
}

// earlyLift is the demo's early-lift hypothesis (saturating, default
// bounds) at tau.
func earlyLift(tau float64) Precision { return Saturating{Low: 0.1, High: 2, Tau: tau} }

// TestGradedAgainstMidpointRule compares the graded accuracy of an invalid
// trial whose outcome changes with δ against a dense midpoint rule in u
// (400 cells, no pieces) over trials of the deterministic agent: a rule
// that ignores the change is off by at most one cell's share at the change,
// so the two agree within 2/400 (model.md §3b).
func TestGradedAgainstMidpointRule(t *testing.T) {
	d := demoDesign(t)
	const sd, cells = 0.15, 400
	gr, det := gradedListener(t, d, sd), gradedListener(t, d, 0)
	for _, tau := range []float64{0.17, 0.18, 0.3} {
		p := earlyLift(tau)
		pr := gr.NewPrediction()
		ws := gr.NewWorkspace()
		gr.Predict(p, pr, ws)
		if len(ws.graded.changes[1]) == 0 {
			t.Fatalf("tau %g: the invalid trial at CTI %d has no change of outcome; the test needs one", tau, d.CTIms[0])
		}
		mid := det.NewPrediction()
		dws := det.NewWorkspace()
		acc := make([]float64, len(d.CTIms))
		for k := range cells {
			u := (float64(k) + 0.5) / cells
			det.Predict(shiftedPrecision{p, sd * distuv.UnitNormal.Quantile(u), d.Agent.GainMin, d.Agent.GainMax}, mid, dws)
			for c := range acc {
				acc[c] += mid.Invalid.Accuracy[c] / cells
			}
		}
		for c := range acc {
			if diff := math.Abs(acc[c] - pr.Invalid.Accuracy[c]); diff > 2.0/cells {
				t.Errorf("tau %g CTI %d: invalid accuracy %.5f graded, %.5f by the midpoint rule: differ by %.5f > 2/400", tau, d.CTIms[c], pr.Invalid.Accuracy[c], acc[c], diff)
			}
		}
		t.Logf("tau %g: invalid accuracy at CTI %d %.5f graded, %.5f midpoint", tau, d.CTIms[0], pr.Invalid.Accuracy[0], acc[0])
	}
}

// TestGradedSmooth: where the deterministic agent jumps (issue 15's example:
// on the demo's lamp-behaviour design, early-lift with tau 0.17 predicts
// invalid accuracy 0.057 at CTI 300, with tau 0.18 0.90), the graded agent
// at precision_sd 0.15 has a slope: the difference quotient of invalid
// accuracy is the same at steps 0.002 and 0.0005 in tau within 10%.
func TestGradedSmooth(t *testing.T) {
	d := demoDesign(t)
	if d.CTIms[0] != 300 {
		t.Fatalf("demo's first CTI is %d, want 300", d.CTIms[0])
	}
	det, gr := gradedListener(t, d, 0), gradedListener(t, d, 0.15)
	invAcc := func(l *Listener, tau float64) float64 {
		pr := l.NewPrediction()
		l.Predict(earlyLift(tau), pr, nil)
		return pr.Invalid.Accuracy[0]
	}
	lo, hi := 0.17, 0.18
	alo, ahi := invAcc(det, lo), invAcc(det, hi)
	if math.Abs(alo-0.057) > 0.001 || math.Abs(ahi-0.90) > 0.001 {
		t.Fatalf("deterministic invalid accuracy at CTI 300: %.4f at tau 0.17, %.4f at 0.18; issue 15 quotes 0.057 and 0.90", alo, ahi)
	}
	// The deterministic jump, to 1e-7 in tau.
	for hi-lo > 1e-7 {
		m := 0.5 * (lo + hi)
		if invAcc(det, m) < 0.5 {
			lo = m
		} else {
			hi = m
		}
	}
	jump := 0.5 * (lo + hi)
	if a, b := invAcc(det, jump-1e-6), invAcc(det, jump+1e-6); b-a < 0.5 {
		t.Fatalf("no deterministic jump at tau %.7f: %.4f → %.4f", jump, a, b)
	}
	quot := func(h float64) float64 { return (invAcc(gr, jump+h) - invAcc(gr, jump-h)) / (2 * h) }
	q1, q2 := quot(0.002), quot(0.0005)
	t.Logf("deterministic jump at tau %.7f; graded difference quotients %.4f (step 0.002) and %.4f (step 0.0005) per unit tau", jump, q1, q2)
	if !(q1 > 0) || math.Abs(q1-q2) > 0.1*math.Abs(q2) {
		t.Errorf("difference quotients %.4f and %.4f differ by more than 10%%: not a slope", q1, q2)
	}
}

// gradedOracleCases are designs and precisions whose graded predictions
// have changes of outcome, censored shares strictly between 0 and 1, a cue
// shorter than the CTI, and unequal CTI weights.
func gradedOracleCases(t *testing.T) []struct {
	name string
	d    Design
	p    Precision
	sd   float64
} {
	mk := func(edit func(*Design)) Design {
		var d Design
		edit(&d)
		d.FillDefaults()
		return d
	}
	return []struct {
		name string
		d    Design
		p    Precision
		sd   float64
	}{
		{"demo-early-lift-0.17", demoDesign(t), earlyLift(0.17), 0.15},
		{"default-constant-0.3", mk(func(*Design) {}), Constant{Level: 0.3}, 0.2},
		{"window200-constant-0.6", mk(func(d *Design) { d.ResponseWindowMs = 200 }), Constant{Level: 0.6}, 0.3},
		{"cue150-logistic", mk(func(d *Design) { d.CueMs = 150 }), Logistic{Low: 0.1, High: 2, Midpoint: 0.6, Width: 0.1}, 0.2},
	}
}

// TestGradedMatchesOracleAtNodes runs the trial-by-trial oracle of
// oracle_test.go (written from model.md §3 alone) at every Gauss–Legendre
// node the graded computation uses, on the shifted and clipped precision
// course of that node, and checks each node's readouts and the weighted
// sums (model.md §3b step 4) against the graded predictions.
func TestGradedMatchesOracleAtNodes(t *testing.T) {
	sawShare, sawChange := false, false
	for _, tc := range gradedOracleCases(t) {
		t.Run(tc.name, func(t *testing.T) {
			d := tc.d
			d.Agent.PrecisionSD = tc.sd
			l := gradedListener(t, tc.d, tc.sd)
			ws := l.NewWorkspace()
			pr := l.NewPrediction()
			type node struct {
				i    int
				u, w float64
				r    trialResult
			}
			var nodes []node
			l.gradedScratch(ws).trace = func(i int, u, w float64, r trialResult) { nodes = append(nodes, node{i, u, w, r}) }
			l.Predict(tc.p, pr, ws)
			n := len(d.CTIms)
			acc, mis, cens, rtw, wsum := make([]float64, 2*n), make([]float64, 2*n), make([]float64, 2*n), make([]float64, 2*n), make([]float64, 2*n)
			neural := make([][]float64, n)
			for c := range neural {
				neural[c] = make([]float64, len(pr.Neural[c]))
			}
			bad := 0
			for _, nd := range nodes {
				c, invalid := nd.i/2, nd.i%2 == 1
				sp := shiftedPrecision{tc.p, l.shift(nd.u), d.Agent.GainMin, d.Agent.GainMax}
				rt, a, m, ce, ne := oracleTrial(&d, sp, d.CTIms[c], invalid)
				if (!scalar.EqualWithinAbsOrRel(rt, nd.r.rt, 1e-9, 1e-9) || !scalar.EqualWithinAbsOrRel(a, nd.r.acc, 1e-9, 1e-9) ||
					!scalar.EqualWithinAbsOrRel(m, nd.r.mis, 1e-9, 1e-9) || ce != nd.r.censored) && bad < 5 {
					bad++
					t.Errorf("node u = %.10g CTI %d invalid %v: oracle rt %.9g acc %.9g mis %.9g censored %v, branched %.9g %.9g %.9g %v",
						nd.u, d.CTIms[c], invalid, rt, a, m, ce, nd.r.rt, nd.r.acc, nd.r.mis, nd.r.censored)
				}
				acc[nd.i] += nd.w * a
				mis[nd.i] += nd.w * m
				rtw[nd.i] += nd.w * a * rt
				wsum[nd.i] += nd.w
				if ce {
					cens[nd.i] += nd.w
				}
				if !invalid {
					for b := range neural[c] {
						neural[c][b] += nd.w * ne[b]
					}
				}
			}
			for i := range wsum {
				c, cls := i/2, &pr.Valid
				if i%2 == 1 {
					cls = &pr.Invalid
				}
				if math.Abs(wsum[i]-1) > 1e-12 {
					t.Errorf("CTI %d class %d: node weights sum to %.15g, want 1", d.CTIms[c], i%2, wsum[i])
				}
				sawChange = sawChange || len(ws.graded.changes[i]) > 0
				sawShare = sawShare || (cls.Censored[c] > 1e-3 && cls.Censored[c] < 1-1e-3)
				check := func(q string, got, want float64) {
					if !scalar.EqualWithinAbsOrRel(got, want, 1e-9, 1e-9) {
						t.Errorf("CTI %d class %d: %s %.12g graded, %.12g from the oracle at the nodes", d.CTIms[c], i%2, q, got, want)
					}
				}
				check("accuracy", cls.Accuracy[c], acc[i])
				check("misdirected", cls.Misdirected[c], mis[i])
				check("censored share", cls.Censored[c], cens[i])
				check("RT of correct reports", cls.RTms[c], rtw[i]/acc[i])
				if i%2 == 0 {
					for b := range neural[c] {
						check(fmt.Sprintf("neural bin %d", b), pr.Neural[c][b], neural[c][b])
					}
				}
			}
		})
	}
	if !sawChange || !sawShare {
		t.Errorf("the cases no longer cover a change of outcome (%v) and a censored share strictly inside (0, 1) (%v)", sawChange, sawShare)
	}
}

// TestGradedDeterministicBits: the same call on a fresh and on a used
// workspace gives the same bits (the report must not depend on which
// worker computed a prediction).
func TestGradedDeterministicBits(t *testing.T) {
	d := demoDesign(t)
	l := gradedListener(t, d, 0.2)
	a, b := l.NewPrediction(), l.NewPrediction()
	ws := l.NewWorkspace()
	l.Predict(Constant{Level: 1.3}, b, ws)
	l.Predict(earlyLift(0.4), b, ws)
	l.Predict(earlyLift(0.17), a, nil)
	l.Predict(earlyLift(0.17), b, ws)
	if bad := predictionDiff(a, b, 0); bad != "" {
		t.Errorf("fresh and used workspaces differ: %s", bad)
	}
}

// TestCensoredLabel: the deterministic agent's labels are as before; shares
// strictly between 0 and 1 are printed.
func TestCensoredLabel(t *testing.T) {
	cs := CensoredReadouts{Valid: []float64{0, 1, 0, 0.123, 0, 0.002}, Invalid: []float64{0, 1, 1, 0.4, 0.9999, 0}}
	want := []string{"-", "both", "invalid", "valid 0.12, invalid 0.40", "invalid >0.99", "valid <0.01"}
	for c, w := range want {
		if got := cs.Label(c, "-"); got != w {
			t.Errorf("CTI %d: label %q, want %q", c, got, w)
		}
	}
}

// TestPrecisionSDEcho: an echoed study file omits precision_sd at its
// default 0 (so deterministic reports are unchanged) and keeps it above 0;
// the field passes the schema and validation in a study file.
func TestPrecisionSDEcho(t *testing.T) {
	for _, c := range []struct {
		sd   float64
		want bool
	}{{0, false}, {0.2, true}} {
		b, err := json.Marshal(Agent{PrecisionSD: c.sd})
		if err != nil {
			t.Fatal(err)
		}
		if got := strings.Contains(string(b), `"precision_sd"`); got != c.want {
			t.Errorf("precision_sd %g: echoed %s", c.sd, b)
		}
	}
	data, err := os.ReadFile("../testdata/studies/radio-watch-graded.json")
	if err != nil {
		t.Fatal(err)
	}
	s, err := LoadStudy(data)
	if err != nil {
		t.Fatal(err)
	}
	for _, d := range s.Designs {
		if d.Agent.PrecisionSD != 0.2 {
			t.Errorf("%s: precision_sd %g, want 0.2", d.Name, d.Agent.PrecisionSD)
		}
	}
	bad := strings.Replace(string(data), `"precision_sd": 0.2`, `"precision_sd": -0.2`, 1)
	if _, err := LoadStudy([]byte(bad)); err == nil || !strings.Contains(err.Error(), "designs[0].agent.precision_sd") {
		t.Errorf("precision_sd -0.2: error %v, want one naming designs[0].agent.precision_sd", err)
	}
}
