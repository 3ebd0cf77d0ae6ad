package recovery

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/mat"

	"discrimen/models"
)

// TestNelderMeadRosenbrock: the fits' search reaches the minimum (1, 1) of
// Rosenbrock's function (Rosenbrock 1960, Computer Journal 3:175) from the
// classic start (−1.2, 1).
func TestNelderMeadRosenbrock(t *testing.T) {
	f := func(x []float64) float64 {
		a, b := 1-x[0], x[1]-x[0]*x[0]
		return a*a + 100*b*b
	}
	set := searchSettings(2)
	set.MaxEvals, set.Absolute, set.Relative, set.Stall, set.Spread = 5000, 1e-14, 0, 200, 0
	res := nelderMead(f, []float64{-1.2, 1}, set)
	if !res.Converged {
		t.Errorf("status %q after %d evaluations, want converged", res.Status, res.Evals)
	}
	for i, want := range []float64{1, 1} {
		if !scalar.EqualWithinAbs(res.X[i], want, 1e-4) {
			t.Errorf("x[%d] = %.8f, want %g (status %q)", i, res.X[i], want, res.Status)
		}
	}
}

// testSummary builds a dataset's summary from a design and a prediction
// with a seeded source.
func testSummary(t *testing.T, js string, free []float64, m Measurement) (*models.Design, *sufficientStats, *Dataset, *models.Prediction) {
	t.Helper()
	s := mustStudy(t, js)
	d := &s.Designs[0]
	l, err := models.NewListener(d)
	if err != nil {
		t.Fatal(err)
	}
	h := s.Hypotheses[0]
	prec, err := models.NewPrecision(h, d, free)
	if err != nil {
		t.Fatal(err)
	}
	pr := l.NewPrediction()
	l.Predict(prec, pr, nil)
	ds := Simulate(rand.New(rand.NewPCG(1, 2)), d, h, 0, Truth{Free: free, Measurement: m}, pr)
	return d, summarise(d, ds), ds, pr
}

const oneHypStudy = `{"name": "t", "seed": 1,
  "designs": [{"name": "d", "cti_ms": [300, 600, 900], "trials_per_cti": 60, "participants": 2, "measures": ["rt", "accuracy", "eeg"]}],
  "hypotheses": [{"name": "ramp", "family": "linear", "params": {"slope": {"min": 0.5, "max": 3}}},
                 {"name": "flat", "family": "constant", "params": {"level": {"value": 1}}}],
  "replication": {"group_sizes": [2], "replicates": 2}}`

// TestProfiledLikelihoodMatchesDirect checks the closed-form profiling of
// the likelihood against a direct evaluation at the profiled estimates:
// RT terms as a sum of Gaussian log densities over the trial table, EEG
// terms as the multivariate normal log density with the stationary AR(1)
// covariance Σ_ab = σ² ρ^|a−b| (Hamilton 1994, Time Series Analysis §5.2),
// through a Cholesky factorisation.
func TestProfiledLikelihoodMatchesDirect(t *testing.T) {
	m := Measurement{RTBase: 250, RTScale: 1.1, RTSD: 50, Lapse: 0.03, EEGOffset: 0.3, EEGGain: 2, EEGSD: 0.4, EEGAR: 0.35}
	d, sum, ds, pr := testSummary(t, oneHypStudy, []float64{1.2}, m)
	lay := newLayout(pr)
	vec := make([]float64, lay.size())
	lay.flatten(pr, vec)
	for _, ar := range []float64{0, 0.35, -0.4} {
		var est Measurement
		got := logLik(sum, lay, vec, 0.03, ar, &est)

		want := 0.0
		// RT: Gaussian density of every recorded RT.
		for _, tr := range ds.Trials {
			if math.IsNaN(tr.RTms) {
				continue
			}
			rt := pr.Valid.RTms[tr.CTI]
			if !tr.Valid {
				rt = pr.Invalid.RTms[tr.CTI]
			}
			z := (tr.RTms - est.RTBase - est.RTScale*rt) / est.RTSD
			want += -0.5*math.Log(2*math.Pi) - math.Log(est.RTSD) - 0.5*z*z
		}
		// Accuracy: categorical report probabilities with lapse.
		V := float64(d.Items)
		for _, tr := range ds.Trials {
			cls := pr.Valid
			if !tr.Valid {
				cls = pr.Invalid
			}
			pT := (1-0.03)*cls.Accuracy[tr.CTI] + 0.03/V
			pC := 0.0
			if !tr.Valid {
				pC = (1-0.03)*cls.Misdirected[tr.CTI] + 0.03/V
			}
			switch tr.Report {
			case ReportTarget:
				want += math.Log(pT)
			case ReportCued:
				want += math.Log(pC)
			default:
				want += math.Log(1 - pT - pC)
			}
		}
		// EEG: multivariate normal per CTI series.
		for c, y := range ds.EEG {
			n := len(y)
			cov := mat.NewSymDense(n, nil)
			for a := 0; a < n; a++ {
				for b := a; b < n; b++ {
					cov.SetSym(a, b, est.EEGSD*est.EEGSD*math.Pow(ar, float64(b-a)))
				}
			}
			var ch mat.Cholesky
			if !ch.Factorize(cov) {
				t.Fatal("AR(1) covariance not positive definite")
			}
			r := mat.NewVecDense(n, nil)
			for b := range y {
				r.SetVec(b, y[b]-est.EEGOffset-est.EEGGain*pr.Neural[c][b])
			}
			var sol mat.VecDense
			if err := ch.SolveVecTo(&sol, r); err != nil {
				t.Fatal(err)
			}
			want += -0.5*float64(n)*math.Log(2*math.Pi) - 0.5*ch.LogDet() - 0.5*mat.Dot(r, &sol)
		}
		if !scalar.EqualWithinAbsOrRel(-got, want, 1e-8, 1e-10) {
			t.Errorf("ar %g: profiled ln L = %.10f, direct = %.10f", ar, -got, want)
		}
	}
}

// TestProfiledEstimatesRecoverTruth: at the true parameters with many
// trials the profiled linear terms land near their true values.
func TestProfiledEstimatesRecoverTruth(t *testing.T) {
	m := Measurement{RTBase: 250, RTScale: 1.1, RTSD: 20, Lapse: 0.0, EEGOffset: 0.3, EEGGain: 2, EEGSD: 0.05, EEGAR: 0.2}
	_, sum, _, pr := testSummary(t, oneHypStudy, []float64{1.2}, m)
	lay := newLayout(pr)
	vec := make([]float64, lay.size())
	lay.flatten(pr, vec)
	var est Measurement
	logLik(sum, lay, vec, 0, 0.2, &est)
	checks := []struct {
		name      string
		got, want float64
		tol       float64
	}{
		{"rt_base", est.RTBase, 250, 10},
		{"rt_scale", est.RTScale, 1.1, 0.08},
		{"rt_sd", est.RTSD, 20, 2},
		{"eeg_offset", est.EEGOffset, 0.3, 0.05},
		{"eeg_gain", est.EEGGain, 2, 0.1},
		{"eeg_sd", est.EEGSD, 0.05, 0.02},
	}
	for _, c := range checks {
		if math.Abs(c.got-c.want) > c.tol {
			t.Errorf("%s = %.4f, want %.4f ± %g", c.name, c.got, c.want, c.tol)
		}
	}
}

// TestFailedFitIsCounted: a candidate whose likelihood is nowhere finite
// gives a failed fit with its cause, and the report counts it rather than
// dropping it; a failed fit never wins.
func TestFailedFitIsCounted(t *testing.T) {
	m := Measurement{RTBase: 250, RTScale: 1, RTSD: 50, Lapse: 0.02, EEGOffset: 0, EEGGain: 2, EEGSD: 0.4, EEGAR: 0.2}
	_, sum, _, pr := testSummary(t, oneHypStudy, []float64{1.2}, m)
	s := mustStudy(t, oneHypStudy)
	d := &s.Designs[0]
	l, _ := models.NewListener(d)
	c := &PredictionGrid{Hypothesis: s.Hypotheses[1], design: d, listener: l, lay: newLayout(pr), points: 1}
	c.values = make([]float64, c.lay.size())
	for i := range c.values {
		c.values[i] = math.NaN()
	}
	// Without free parameters of its own the candidate still searches lapse
	// and eeg_ar; NaN predictions make every evaluation non-finite.
	fit := newFitter(c).fit(sum)
	if !fit.Failed || fit.Error == "" {
		t.Fatalf("fit = %+v, want a failed fit with its cause", fit)
	}
	if !math.IsNaN(fit.BIC) {
		t.Errorf("failed fit BIC = %g, want NaN", fit.BIC)
	}
	sh, failed := WinShares([]float64{fit.BIC, 100}, TieTolerance)
	if failed || sh[0] != 0 || sh[1] != 1 {
		t.Errorf("shares %v (failed %v): a failed fit must not win", sh, failed)
	}
}

// TestAssembleCountsFailures: a failed fit in a shard result shows up in
// fit_failures and the dataset is still counted under the other
// candidates; a shard delivered twice is counted once.
func TestAssembleCountsFailures(t *testing.T) {
	s := mustStudy(t, smallStudy)
	c, err := Compile(context.Background(), s, 2)
	if err != nil {
		t.Fatal(err)
	}
	var results []*ShardResult
	for _, spec := range c.Plan(3) {
		r, err := c.RunShard(context.Background(), spec, nil)
		if err != nil {
			t.Fatal(err)
		}
		results = append(results, r)
	}
	f := &results[0].Participants[0].Fits[2]
	f.Failed, f.Error = true, "injected"
	f.BIC, f.AIC, f.AICc, f.LogL = math.NaN(), math.NaN(), math.NaN(), math.NaN()
	dup := *results[1]
	rep, err := c.Assemble(append(results, &dup))
	if err != nil {
		t.Fatal(err)
	}
	ff := rep.Designs[0].FitFailures
	if ff.Failed != 1 || ff.Total != 3*6*3 {
		t.Errorf("fit_failures = %+v, want 1 failed of 54", ff)
	}
	cr := rep.Designs[0].Criteria["bic"]
	if n := cr.Datasets[0]; n != 6 {
		t.Errorf("generator 0 has %d datasets with a winner, want 6", n)
	}
	// A missing shard is an error naming the count.
	if _, err := c.Assemble(results[1:]); err == nil {
		t.Error("Assemble with a missing shard: want an error")
	}
}

// TestBoxLS2 checks the bounded least squares against a brute-force search
// over a fine grid of (b, s) ≥ 0 on cases whose unconstrained optimum lies
// inside, beyond b = 0 and beyond s = 0.
func TestBoxLS2(t *testing.T) {
	cases := []struct {
		name string
		x, y []float64
	}{
		{"interior", []float64{1, 2, 3, 4}, []float64{3.1, 4.9, 7.2, 8.8}},
		{"negative intercept", []float64{1, 2, 3, 4}, []float64{0.5, 3.1, 5.4, 8.2}},
		{"negative slope", []float64{1, 2, 3, 4}, []float64{5, 4.2, 3.1, 2.2}},
	}
	for _, c := range cases {
		var s11, s12, s22, s1y, s2y, syy float64
		for i := range c.x {
			s11++
			s12 += c.x[i]
			s22 += c.x[i] * c.x[i]
			s1y += c.y[i]
			s2y += c.x[i] * c.y[i]
			syy += c.y[i] * c.y[i]
		}
		b, s, red := boxLS2(s11, s12, s22, s1y, s2y)
		bestRSS := math.Inf(1)
		for bi := 0; bi <= 2000; bi++ {
			for si := 0; si <= 1000; si++ {
				bb, ss := float64(bi)*0.005, float64(si)*0.005
				rss := 0.0
				for i := range c.x {
					r := c.y[i] - bb - ss*c.x[i]
					rss += r * r
				}
				bestRSS = math.Min(bestRSS, rss)
			}
		}
		if b < 0 || s < 0 {
			t.Errorf("%s: b = %g, s = %g outside the box", c.name, b, s)
		}
		if got := syy - red; got > bestRSS+1e-9 || got < bestRSS-0.01 {
			t.Errorf("%s: RSS %.6f, brute force %.6f", c.name, got, bestRSS)
		}
	}
}

// TestNelderMeadLimits: a quadratic bowl in 1 and 3 dimensions converges
// to its centre; an evaluation limit is reported as such; a function that
// is nowhere finite says so.
func TestNelderMeadLimits(t *testing.T) {
	bowl := func(x []float64) float64 {
		s := 0.0
		for i, v := range x {
			d := v - float64(i+1)
			s += d * d
		}
		return s
	}
	for _, n := range []int{1, 3} {
		res := nelderMead(bowl, make([]float64, n), searchSettings(n))
		for i, v := range res.X {
			if !res.Converged || math.Abs(v-float64(i+1)) > 1e-2 {
				t.Errorf("n = %d: x = %v (%s), want (1, 2, 3)[:n]", n, res.X, res.Status)
				break
			}
		}
	}
	set := searchSettings(3)
	set.MaxEvals = 10
	if res := nelderMead(bowl, make([]float64, 3), set); res.Converged || res.Status != "evaluation limit" || res.Evals < 10 {
		t.Errorf("limited run: %+v, want the evaluation limit", res)
	}
	nan := func([]float64) float64 { return math.NaN() }
	if res := nelderMead(nan, []float64{0}, searchSettings(1)); res.Converged || res.Status != "no finite value" {
		t.Errorf("NaN function: %+v, want no finite value", res)
	}
}

// TestNonnegLS2FlatRegressor: a slope regressor flat but for rounding
// (±1e-16, as a constant hypothesis's neural signal) gets no slope, so it
// cannot be scaled up to fit the data's noise; one of 1e-3 gain units
// does get its slope.
func TestNonnegLS2FlatRegressor(t *testing.T) {
	sums := func(x, y []float64) (s11, s12, s22, s1y, s2y float64) {
		for i := range x {
			s11++
			s12 += x[i]
			s22 += x[i] * x[i]
			s1y += y[i]
			s2y += x[i] * y[i]
		}
		return
	}
	y := []float64{0.3, -0.2, 0.5, 0.1, -0.4, 0.2}
	noise := []float64{1e-16, -5e-17, 1.1e-16, 0, -1e-16, 5.6e-17}
	if b, s, _ := nonnegLS2(sums(noise, y)); s != 0 || math.Abs(b-0.5/6) > 1e-12 {
		t.Errorf("rounding-level regressor: b = %v, s = %v; want the mean and s = 0", b, s)
	}
	signal := []float64{0, 1e-3, 2e-3, 1e-3, 0, 3e-3}
	if _, s, _ := nonnegLS2(sums(signal, []float64{0, 2, 4, 2, 0, 6})); math.Abs(s-2000) > 1e-6 {
		t.Errorf("1e-3 regressor: s = %v, want 2000", s)
	}
}
