package recovery

import (
	"math"
	"sort"

	"discrimen/models"
)

// Search ranges of the measurement parameters that are searched rather
// than profiled: lapse in (0, 0.5), eeg_ar in (−0.99, 0.99).
const (
	lapseMax = 0.5
	arMax    = 0.99
	nStarts  = 3
	// startSpacing: the start nodes lie at least this many grid steps
	// apart along some parameter (Chebyshev distance of grid indices).
	startSpacing = 2
	// rescoreWindow: every run whose grid −ln L ends within this of the
	// best run's is re-scored with exact predictions. The refined grids
	// are within gridTolerance of exact −ln L except at jumps, which they
	// locate, so a window of one ln unit keeps every run that can win.
	rescoreWindow = 1
)

// The stopping rules of every Nelder–Mead run (searchSettings).
const (
	searchSimplex     = 0.5  // initial simplex size in the logit-transformed space
	searchEvalsPerDim = 400  // evaluation limit per searched dimension
	searchAbsolute    = 1e-6 // an improvement smaller than this...
	searchRelative    = 1e-9 // ...plus this times |best| does not count
	searchStallPerDim = 8    // iterations without a counted improvement, per dimension
	searchSpread      = 1e-9 // converged at once when every vertex's value lies within this
	// gridSearchAbsolute replaces searchAbsolute in the search on the grid.
	gridSearchAbsolute = 1e-4
	// sameRunWidth: runs that end within this share of the range of one
	// already re-scored, in every parameter, are one optimum.
	sameRunWidth = 1e-2
)

// The finite-difference steps of the standard errors (standardErrors).
const (
	seRoughStep = 0.01 // rough pass: step as a fraction of each parameter's range
	seFineStep  = 0.5  // fine pass: step as a fraction of the rough SE
	seEdge      = 1e-3 // a parameter within this fraction of its range of a bound is held fixed
)

// Fit is one candidate fitted to one dataset by maximum likelihood
// (model.md §5).
type Fit struct {
	Design      string
	Generator   string
	Participant int
	Candidate   string
	Names       []string  // the candidate's free parameters
	Params      []float64 // estimates, natural units
	SE          []float64 // grid-Hessian standard errors (self-fits only; NaN otherwise), secondary to Intervals
	SEReliable  bool
	SENote      string
	Measurement Measurement // every measurement estimate (NaN where not measured)
	LogL        float64
	K, N        int
	AIC, AICc   float64
	BIC         float64
	Converged   bool
	Status      string
	Evaluations int
	Failed      bool
	Error       string
	// TruthLogL is, for a self-fit, ln L at the generating hypothesis
	// parameters with the measurement terms fitted as in any fit (exact
	// predictions); NaN for other fits. A self-fit's LogL below it by more
	// than truthTolerance is a search that lost to the truth.
	TruthLogL float64
	// Intervals are the 95% profile-likelihood intervals of Params
	// (self-fits only; nil for other fits).
	Intervals []Interval
	// Polished is set when the fit was refined on exact predictions
	// (every candidate in contention for the dataset).
	Polished bool
	// deep is set once the fit had the deep polish (polish's deep mode);
	// it lives only while RunShard decides who is polished how far.
	deep bool
}

// fitter fits one candidate (its prediction grid) to datasets of one design.
type fitter struct {
	grid *PredictionGrid
	ws   *models.Workspace
	pr   *models.Prediction // scratch for exact predictions
	pred []float64
}

func newFitter(c *PredictionGrid) *fitter {
	return &fitter{grid: c, ws: c.listener.NewWorkspace(), pr: c.listener.NewPrediction(), pred: make([]float64, c.lay.size())}
}

func logit(u float64) float64   { return math.Log(u / (1 - u)) }
func sigmoid(z float64) float64 { return 1 / (1 + math.Exp(-z)) }

// space maps the search vector z (unconstrained) to natural parameters:
// the candidate's free parameters by the logit of the scaled range, then
// lapse and eeg_ar when measured.
type space struct {
	lo, hi     []float64
	lapse, ar  int // index of lapse and eeg_ar in θ, or −1
	dimsHyp    int
	totalDims  int
	defaultLap float64
	defaultAR  float64
}

func newSpace(c *PredictionGrid, s *sufficientStats) space {
	sp := space{lapse: -1, ar: -1, dimsHyp: len(c.Names), defaultLap: 0.02, defaultAR: 0.25}
	sp.lo = append(sp.lo, c.lo...)
	sp.hi = append(sp.hi, c.hi...)
	if s.measAcc {
		sp.lapse = len(sp.lo)
		sp.lo, sp.hi = append(sp.lo, 0), append(sp.hi, lapseMax)
	}
	if s.measEEG {
		sp.ar = len(sp.lo)
		sp.lo, sp.hi = append(sp.lo, -arMax), append(sp.hi, arMax)
	}
	sp.totalDims = len(sp.lo)
	return sp
}

func (sp space) toNatural(z, theta []float64) {
	for i := range z {
		theta[i] = sp.lo[i] + (sp.hi[i]-sp.lo[i])*sigmoid(z[i])
	}
}

func (sp space) toSearch(theta, z []float64) {
	for i := range theta {
		u := (theta[i] - sp.lo[i]) / (sp.hi[i] - sp.lo[i])
		u = math.Max(1e-6, math.Min(1-1e-6, u))
		z[i] = logit(u)
	}
}

func (sp space) split(theta []float64) (hyp []float64, lapse, ar float64) {
	lapse, ar = 0, 0
	if sp.lapse >= 0 {
		lapse = theta[sp.lapse]
	}
	if sp.ar >= 0 {
		ar = theta[sp.ar]
	}
	return theta[:sp.dimsHyp], lapse, ar
}

// negLogLik evaluates −ln L at natural θ with interpolated (exact=false) or
// exact predictions.
func (f *fitter) negLogLik(s *sufficientStats, sp space, theta []float64, exact bool, est *Measurement) float64 {
	hyp, lapse, ar := sp.split(theta)
	if exact {
		f.grid.exactInto(hyp, f.pred, f.ws, f.pr)
	} else {
		f.grid.Interpolate(hyp, f.pred, f.ws)
	}
	return logLik(s, f.grid.lay, f.pred, lapse, ar, est)
}

// starts picks up to nStarts starting points: the best grid nodes by the
// likelihood at default lapse and eeg_ar, each at least two grid steps from
// the ones already chosen.
func (f *fitter) starts(s *sufficientStats, sp space) [][]float64 {
	c := f.grid
	dims := sp.dimsHyp
	base := make([]float64, sp.totalDims)
	if sp.lapse >= 0 {
		base[sp.lapse] = sp.defaultLap
	}
	if sp.ar >= 0 {
		base[sp.ar] = sp.defaultAR
	}
	if dims == 0 || c.points == 0 {
		for i := 0; i < dims; i++ {
			base[i] = c.Hypothesis.Params[c.Names[i]].Median()
		}
		return [][]float64{base}
	}
	type scored struct {
		node int
		v    float64
	}
	// Starts come from the grid's original uniform nodes (refinement's
	// added nodes are for accuracy, not coverage), every startStride-th
	// one in each parameter of a grid of two or more.
	stride := 1
	if dims >= 2 {
		stride = startStride
	}
	nodes := c.Nodes()
	all := make([]scored, 0, nodes)
	_, lapse, ar := sp.split(base)
	for n := 0; n < nodes; n++ {
		coarse := true
		for i := 0; i < dims; i++ {
			a := c.axes[i][c.axisIndex(n, i)]
			coarse = coarse && a == math.Trunc(a) && int(a)%stride == 0
		}
		if !coarse {
			continue
		}
		v := logLik(s, c.lay, c.node(n), lapse, ar, nil)
		if math.IsNaN(v) {
			v = math.Inf(1)
		}
		all = append(all, scored{n, v})
	}
	sort.SliceStable(all, func(i, j int) bool { return all[i].v < all[j].v })
	var picked []int
	var out [][]float64
	for _, sc := range all {
		if len(out) == nStarts {
			break
		}
		far := true
		for _, p := range picked {
			d := 0
			for i := 0; i < dims; i++ {
				a := c.axes[i][c.axisIndex(sc.node, i)]
				b := c.axes[i][c.axisIndex(p, i)]
				d = max(d, int(math.Abs(a-b)+1e-9))
			}
			far = far && d >= startSpacing
		}
		if !far {
			continue
		}
		picked = append(picked, sc.node)
		x := append([]float64(nil), base...)
		c.nodeParams(sc.node, x[:dims])
		out = append(out, x)
	}
	return out
}

// searchSettings are the stopping rules of one Nelder–Mead run: an initial
// simplex of 0.5 in the logit-transformed space, at most 400 evaluations per
// dimension, converged when the best value improves by less than 1e-6
// (absolute) over 12 iterations per dimension, or when every vertex's value
// lies within 1e-9.
// gridSearchSettings are searchSettings with an improvement below
// gridSearchAbsolute not counted: the search on the grid only finds where
// the exact polish starts, and the grid is good to gridTolerance of ln L,
// so sharpening its optimum further buys nothing.
func gridSearchSettings(dims int) nmSettings {
	set := searchSettings(dims)
	set.Absolute = gridSearchAbsolute
	return set
}

func searchSettings(dims int) nmSettings {
	return nmSettings{Size: searchSimplex, MaxEvals: searchEvalsPerDim * dims, Absolute: searchAbsolute, Relative: searchRelative,
		Stall: searchStallPerDim * dims, Spread: searchSpread}
}

// fit runs the multi-start Nelder–Mead search (derivative-free, as the
// likelihood has kinks and jumps: model.md §5) on interpolated
// predictions, then evaluates the exact likelihood at the optimum. The
// polish, the standard errors and the intervals of a self-fit follow in
// RunShard.
func (f *fitter) fit(s *sufficientStats) Fit {
	c := f.grid
	sp := newSpace(c, s)
	out := Fit{Candidate: c.Hypothesis.Name, Names: c.Names, K: len(c.Names) + s.nMeasurement(), N: s.nObs()}
	theta := make([]float64, sp.totalDims)
	best := math.Inf(1)
	var bestTheta []float64
	converged := false
	status := "no search (nothing free)"
	evals := 0
	type run struct {
		theta     []float64
		f         float64
		status    string
		converged bool
	}
	var runs []run
	if sp.totalDims == 0 {
		best = f.negLogLik(s, sp, theta, false, nil)
	}
	for _, start := range f.starts(s, sp) {
		if sp.totalDims == 0 {
			break
		}
		z0 := make([]float64, sp.totalDims)
		sp.toSearch(start, z0)
		res := nelderMead(func(z []float64) float64 {
			sp.toNatural(z, theta)
			return f.negLogLik(s, sp, theta, false, nil)
		}, z0, gridSearchSettings(sp.totalDims))
		evals += res.Evals
		if math.IsInf(res.F, 0) || math.IsNaN(res.F) {
			status = res.Status
			continue
		}
		th := make([]float64, sp.totalDims)
		sp.toNatural(res.X, th)
		runs = append(runs, run{theta: th, f: res.F, status: res.Status, converged: res.Converged})
		best = math.Min(best, res.F)
	}
	if sp.totalDims == 0 && !math.IsInf(best, 0) {
		runs = append(runs, run{theta: theta, f: best, status: status, converged: true})
	}
	// The grid is only a surrogate: near a jump in the predictions (an
	// invalid trial switching between recovered and misdirected) its
	// optimum can sit on the wrong side. Every run that ends within
	// rescoreWindow of the best surrogate value is re-scored with exact predictions and the
	// best exact value wins.
	var est Measurement
	nll := math.Inf(1)
	var scored [][]float64
	for _, r := range runs {
		if r.f > best+rescoreWindow || sameRun(sp, scored, r.theta) {
			continue
		}
		scored = append(scored, r.theta)
		// The exact prediction at the run's end, with lapse and eeg_ar
		// re-fitted to it (they were fitted to the surrogate's).
		th := append([]float64(nil), r.theta...)
		f.grid.exactInto(th[:sp.dimsHyp], f.pred, f.ws, f.pr)
		f.nuisanceSearch(s, sp, th)
		var e Measurement
		_, lapse, ar := sp.split(th)
		v := logLik(s, f.grid.lay, f.pred, lapse, ar, &e)
		if v < nll {
			nll, est, bestTheta = v, e, th
			status, converged = r.status, r.converged
		}
	}
	out.Status, out.Converged, out.Evaluations = status, converged, evals
	if len(runs) == 0 {
		out.Failed, out.Error = true, "no finite likelihood found: "+status
		out.LogL, out.AIC, out.AICc, out.BIC = math.NaN(), math.NaN(), math.NaN(), math.NaN()
		return out
	}
	if math.IsNaN(nll) || math.IsInf(nll, 0) {
		out.Failed, out.Error = true, "exact likelihood not finite at the optimum"
		out.LogL, out.AIC, out.AICc, out.BIC = math.NaN(), math.NaN(), math.NaN(), math.NaN()
		return out
	}
	maskMeasurement(s, &est)
	out.Measurement = est
	out.Params = append([]float64(nil), bestTheta[:sp.dimsHyp]...)
	out.LogL = -nll
	out.AIC, out.AICc, out.BIC = AIC(out.LogL, out.K), AICc(out.LogL, out.K, out.N), BIC(out.LogL, out.K, out.N)
	out.SE = make([]float64, sp.dimsHyp)
	for i := range out.SE {
		out.SE[i] = math.NaN()
	}
	return out
}

// standardErrors computes SEs of the candidate's parameters from the
// numerical Hessian of −ln L (grid predictions, profiled linear terms) in
// natural units: a secondary figure beside the profile intervals, which
// lead. The likelihood has kinks wherever a criterion crossing moves
// across an iteration, so a tiny step measures the kinks, not the
// curvature: a first pass with steps of 1% of each range gives rough SEs,
// and the second pass uses steps of half those SEs (the scale on which a
// 95% interval is read), checked against twice the step by HessianSE. Both
// passes run on the grid surrogate: an exact pass cost a third of a run
// and still described one mode of a likelihood with kinks and jumps. Parameters within 0.1% of a bound of their range are held
// fixed (the Hessian of a boundary optimum is not an information matrix);
// a candidate parameter held so gets a NaN SE.
func (f *fitter) standardErrors(s *sufficientStats, sp space, theta []float64) ([]float64, bool, string) {
	se := make([]float64, sp.dimsHyp)
	for j := range se {
		se[j] = math.NaN()
	}
	var active []int
	room := make([]float64, len(theta))
	atEdge := false
	for i := range theta {
		r := sp.hi[i] - sp.lo[i]
		room[i] = math.Min(theta[i]-sp.lo[i], sp.hi[i]-theta[i])
		if room[i] > seEdge*r {
			active = append(active, i)
		} else if i < sp.dimsHyp {
			atEdge = true
		}
	}
	if len(active) == 0 {
		return se, false, "every estimate at the edge of its range"
	}
	full := append([]float64(nil), theta...)
	x := make([]float64, len(active))
	steps := make([]float64, len(active))
	clampStep := func(k int, h float64) float64 {
		i := active[k]
		r := sp.hi[i] - sp.lo[i]
		return math.Max(1e-4*r, math.Min(h, math.Min(0.1*r, room[i]/2.5)))
	}
	for k, i := range active {
		x[k] = theta[i]
		steps[k] = clampStep(k, seRoughStep*(sp.hi[i]-sp.lo[i]))
	}
	// The rough pass runs on the grid surrogate (no exact predictions):
	// its steps span more than one grid cell, so the piecewise-linear
	// surrogate's curvature is a fair first guess of the scale.
	roughNLL := func(t []float64) float64 {
		for k, i := range active {
			full[i] = t[k]
		}
		hyp, lapse, ar := sp.split(full)
		f.grid.Interpolate(hyp, f.pred, f.ws)
		return logLik(s, f.grid.lay, f.pred, lapse, ar, nil)
	}
	rough, _, _, why := HessianSE(roughNLL, x, steps)
	for k := range steps {
		if math.IsNaN(rough[k]) || math.IsInf(rough[k], 0) {
			return se, false, "rough pass: " + why
		}
		steps[k] = clampStep(k, seFineStep*rough[k])
	}
	fine, _, ok, why := HessianSE(roughNLL, x, steps)
	for k, i := range active {
		if i < sp.dimsHyp {
			se[i] = fine[k]
		}
	}
	if atEdge {
		return se, false, "a parameter at the edge of its range (held fixed); " + why
	}
	return se, ok, why
}

// maskMeasurement sets the estimates of measurements the design does not
// record to NaN.
func maskMeasurement(s *sufficientStats, m *Measurement) {
	nan := math.NaN()
	if !s.measRT || s.nRT == 0 {
		m.RTBase, m.RTScale, m.RTSD = nan, nan, nan
	}
	if !s.measAcc {
		m.Lapse = nan
	}
	if !s.measEEG {
		m.EEGOffset, m.EEGGain, m.EEGSD, m.EEGAR = nan, nan, nan, nan
	}
}

func median(x []float64) float64 {
	if len(x) == 0 {
		return math.NaN()
	}
	y := append([]float64(nil), x...)
	sort.Float64s(y)
	n := len(y)
	if n%2 == 1 {
		return y[n/2]
	}
	return (y[n/2-1] + y[n/2]) / 2
}

// truthTolerance is how far below the truth's ln L a self-fit may end
// before it counts as a search that lost to the truth.
const truthTolerance = 1e-6

// nuisanceSearch minimises −ln L over the searched measurement terms
// (lapse, eeg_ar) for fixed predictions in f.pred, the linear terms
// profiled in closed form, from the given natural θ (whose hypothesis part
// is ignored). It returns the minimum and writes the minimiser into theta.
func (f *fitter) nuisanceSearch(s *sufficientStats, sp space, theta []float64) float64 {
	var idx []int
	for _, i := range []int{sp.lapse, sp.ar} {
		if i >= 0 {
			idx = append(idx, i)
		}
	}
	at := func(th []float64) float64 {
		_, lapse, ar := sp.split(th)
		return logLik(s, f.grid.lay, f.pred, lapse, ar, nil)
	}
	if len(idx) == 0 {
		return at(theta)
	}
	z0 := make([]float64, len(idx))
	one := func(z []float64, th []float64) {
		for k, i := range idx {
			th[i] = sp.lo[i] + (sp.hi[i]-sp.lo[i])*sigmoid(z[k])
		}
	}
	for k, i := range idx {
		u := (theta[i] - sp.lo[i]) / (sp.hi[i] - sp.lo[i])
		z0[k] = logit(math.Max(1e-6, math.Min(1-1e-6, u)))
	}
	th := append([]float64(nil), theta...)
	res := nelderMead(func(z []float64) float64 {
		one(z, th)
		return at(th)
	}, z0, searchSettings(len(idx)))
	one(res.X, theta)
	return res.F
}

// truthLogL is ln L at the generating hypothesis parameters truth, with the
// measurement terms fitted as in any fit on exact predictions: the
// reference a self-fit's search must reach; pr is the exact prediction at
// truth, which the dataset was simulated from. It starts the nuisance search
// from the same defaults as the fit's own starts, never from the true
// measurement values.
func (f *fitter) truthLogL(s *sufficientStats, truth []float64, pr *models.Prediction) float64 {
	sp := newSpace(f.grid, s)
	theta := make([]float64, sp.totalDims)
	copy(theta, truth)
	if sp.lapse >= 0 {
		theta[sp.lapse] = sp.defaultLap
	}
	if sp.ar >= 0 {
		theta[sp.ar] = sp.defaultAR
	}
	f.grid.lay.flatten(pr, f.pred)
	return -f.nuisanceSearch(s, sp, theta)
}

// Exact polish settings: the compass search of exactCoordinatePolish
// starts with steps of polishFirstStep grid cells (the refined grid puts
// the estimate within one), halves them when a poll fails, and stops
// below polishMinStep cells or after polishEvalsPerDim exact evaluations
// per hypothesis parameter.
const (
	polishFirstStep          = 0.5 // grid cells
	polishMinStep            = 1e-4
	polishLineEvals          = 48
	polishCompassEvalsPerDim = 6
	polishQuickEvalsPerDim   = 4
	// deepWindow: a candidate within this of a dataset's best (criterion
	// units), and every self-fit, gets the deep polish; the others in
	// contention the quick one.
	deepWindow      = 0.5
	polishShrink    = 0.25
	polishFlat      = 1e-9
	polishFlatWidth = 0.02
	// modeWindow: another mode of the grid within this of the estimate's
	// −ln L (lapse and eeg_ar held) is searched too.
	modeWindow = 2
	modeTries  = 2
	// modeTriesDeep other modes are scored for a deep polish; each
	// within modeRepolishWindow (ln units, exact) of the best is refined
	// quickly, and deeply when that brings it within modeScreenWindow.
	modeTriesDeep      = 2
	modeRepolishWindow = 0.1
	modeScreenWindow   = 0.05
	// startStride thins the nodes that starts are picked from on grids of
	// two or more parameters.
	startStride = 2
	// contentionWindow: a candidate is in contention for a dataset, and
	// polished, when under any criterion it ends within this (in criterion
	// units, 2 ln-units each) of that criterion's best candidate.
	contentionWindow = 2
)

// thetaOf rebuilds the natural search vector of a finished fit.
func thetaOf(sp space, out *Fit) []float64 {
	theta := make([]float64, sp.totalDims)
	copy(theta, out.Params)
	if sp.lapse >= 0 {
		theta[sp.lapse] = out.Measurement.Lapse
	}
	if sp.ar >= 0 {
		theta[sp.ar] = out.Measurement.EEGAR
	}
	return theta
}

// polish refines a finished fit on exact predictions, in two steps that
// every candidate in contention gets alike (the search never sees the
// truth):
//
//  1. a profile pass: −ln L at every grid node with the fit's lapse and
//     eeg_ar; the best local minima away from the estimate within
//     modeWindow of it are scored exactly;
//  2. a search on exact predictions over the hypothesis parameters
//     (exactCoordinatePolish: Brent's method for one, a compass search
//     for more; deep or quick), each point's measurement terms re-fitted.
//
// The fit keeps whichever exact −ln L is lowest, so polishing never makes
// it worse.
func (f *fitter) polish(s *sufficientStats, out *Fit, deep bool) {
	if out.Failed {
		return
	}
	g := f.grid
	sp := newSpace(g, s)
	theta := thetaOf(sp, out)
	best := polishPoint{theta: theta, nll: -out.LogL}
	var others []polishPoint // the other modes scored, for a deep polish
	if sp.dimsHyp > 0 && g.points >= 2 {
		_, lapse, ar := sp.split(theta)
		// The estimate's exact −ln L is the yardstick: a node's stored
		// prediction is exact too, so both stand on one footing, whereas
		// the grid's value at the estimate can be far off near a jump
		// (a search that settled on an interpolation artefact).
		here := -out.LogL
		// Other modes: grid nodes at least two grid steps from the
		// estimate in some parameter that are local minima of the grid's
		// −ln L (lapse and eeg_ar held) and better than, or within
		// modeWindow of, the estimate's own grid value. The grid may be
		// least trustworthy where modes crowd, so the best modeTries of
		// them are scored exactly, each with its measurement terms
		// re-fitted, rather than searched on the grid.
		nodes := g.Nodes()
		table := make([]float64, nodes)
		for n := range table {
			table[n] = logLik(s, g.lay, g.node(n), lapse, ar, nil)
		}
		type mode struct {
			node int
			v    float64
		}
		var modes []mode
		for n := range table {
			if !(table[n] <= here+modeWindow) {
				continue
			}
			far, local := false, true
			for i := 0; i < sp.dimsHyp; i++ {
				k := g.axisIndex(n, i)
				far = far || math.Abs(g.axes[i][k]-g.coord(i, theta[i])) >= 2
				if k > 0 && table[n-g.strides[i]] < table[n] {
					local = false
				}
				if k < len(g.axes[i])-1 && table[n+g.strides[i]] < table[n] {
					local = false
				}
			}
			if far && local {
				modes = append(modes, mode{n, table[n]})
			}
		}
		sort.SliceStable(modes, func(a, b int) bool { return modes[a].v < modes[b].v })
		tries := modeTries
		if deep {
			tries = modeTriesDeep
		}
		for _, m := range modes[:min(len(modes), tries)] {
			// A node's stored prediction is exact: no new prediction.
			th := append([]float64(nil), theta...)
			g.nodeParams(m.node, th[:sp.dimsHyp])
			copy(f.pred, g.node(m.node))
			nll := f.nuisanceSearch(s, sp, th)
			others = append(others, polishPoint{theta: th, nll: nll})
			best.consider(f, nll, th)
		}
	}
	if sp.dimsHyp > 0 {
		start := best.theta
		best = f.exactCoordinatePolish(s, sp, best, deep)
		if deep {
			// A mode's node can score a little worse than the estimate
			// and still hold the better optimum (modes of a jumping
			// likelihood lie close in ln L): each one within
			// modeRepolishWindow of the best is refined as well.
			others = append(others, polishPoint{theta: theta, nll: -out.LogL})
			for _, o := range others {
				if &o.theta[0] == &start[0] || o.nll > best.nll+modeRepolishWindow {
					continue
				}
				// A quick polish screens the mode; only one that comes
				// within modeScreenWindow of the best is refined deeply.
				p := f.exactCoordinatePolish(s, sp, polishPoint{theta: append([]float64(nil), o.theta...), nll: o.nll}, false)
				if p.nll > best.nll+modeScreenWindow {
					continue
				}
				p = f.exactCoordinatePolish(s, sp, p, true)
				if p.pred != nil && p.nll < best.nll {
					best = p
				}
			}
		}
	} else {
		th := append([]float64(nil), theta...)
		g.exactInto(nil, f.pred, f.ws, f.pr)
		best.consider(f, f.nuisanceSearch(s, sp, th), th)
	}
	out.Polished = true
	out.deep = out.deep || deep
	if best.pred == nil || best.nll >= -out.LogL {
		return
	}
	// The winner's exact prediction was kept: only its measurement
	// estimates are read again.
	var est Measurement
	hyp, lapse, ar := sp.split(best.theta)
	nll := logLik(s, g.lay, best.pred, lapse, ar, &est)
	maskMeasurement(s, &est)
	out.Measurement = est
	out.Params = append([]float64(nil), hyp...)
	out.LogL = -nll
	out.AIC, out.AICc, out.BIC = AIC(out.LogL, out.K), AICc(out.LogL, out.K, out.N), BIC(out.LogL, out.K, out.N)
}

// polishPoint is the best point a polish has found: natural θ, its exact
// −ln L and, once it improved on the fit, a copy of its exact prediction.
type polishPoint struct {
	theta []float64
	nll   float64
	pred  []float64
}

// consider keeps θ with value nll when it is lower, copying the exact
// prediction in f.pred that nll was computed from.
func (b *polishPoint) consider(f *fitter, nll float64, theta []float64) {
	if nll < b.nll {
		b.theta, b.nll = theta, nll
		b.pred = append(b.pred[:0], f.pred...)
	}
}

// polishWanted says how far each fit of one dataset is to be polished:
// 2 (deep) within deepWindow of the best under any criterion, 1 (quick)
// within contentionWindow, 0 otherwise; self, the generator's own fit,
// always deep (its ln L is checked against the truth's).
func polishWanted(fits []Fit, self int) []int {
	out := make([]int, len(fits))
	for _, c := range Criteria {
		best := math.Inf(1)
		for i := range fits {
			if v := c.Of(&fits[i]); v < best {
				best = v
			}
		}
		for i := range fits {
			v := c.Of(&fits[i])
			switch {
			case v <= best+deepWindow:
				out[i] = 2
			case v <= best+contentionWindow:
				out[i] = max(out[i], 1)
			}
		}
	}
	if self >= 0 && self < len(out) {
		out[self] = 2
	}
	return out
}

// exactCoordinatePolish lowers the exact −ln L from best. With deep set
// and one parameter it runs Brent's method (brentMin) on the grid cell
// around the estimate, moved on while the best point ends at an edge;
// otherwise a compass search over the hypothesis parameters (Kolda, Lewis & Torczon 2003,
// SIAM Review 45:385, "Optimization by direct search"): it polls x − h_j
// and then x + h_j along each parameter in turn and moves to the first
// point that is lower, keeping the step; when a whole poll finds nothing
// lower, every step is multiplied by polishShrink, and a poll whose
// points all lie within polishFlat of the best ends it. Steps start at
// polishFirstStep grid cells; the search ends when they are below
// polishMinStep cells or after polishCompassEvalsPerDim (deep) or
// polishQuickEvalsPerDim (quick) exact evaluations per parameter. A compass search
// converges onto a kink, where a parabola through three points points the
// wrong way, and a kept step lets it travel further than the first step
// (a shrinking one could not: its steps sum to a bounded distance). The
// measurement terms are re-fitted at every point.
func (f *fitter) exactCoordinatePolish(s *sufficientStats, sp space, best polishPoint, deep bool) polishPoint {
	g := f.grid
	cells := float64(max(g.points, 9) - 1)
	h := make([]float64, sp.dimsHyp)
	minStep := make([]float64, sp.dimsHyp)
	for j := range h {
		cell := (sp.hi[j] - sp.lo[j]) / cells
		h[j], minStep[j] = polishFirstStep*cell, polishMinStep*cell
	}
	budget := polishCompassEvalsPerDim * sp.dimsHyp
	if !deep {
		budget = polishQuickEvalsPerDim * sp.dimsHyp
	}
	evals := 0
	if deep && sp.dimsHyp == 1 {
		cells0 := (sp.hi[0] - sp.lo[0]) / cells
		// One parameter: Brent's method on a bracket of polishFirstStep
		// cells either side, moved on when the best point ends at an edge
		// that is not the range's.
		val := func(v float64) float64 {
			th := append([]float64(nil), best.theta...)
			th[0] = v
			g.exactInto(th[:1], f.pred, f.ws, f.pr)
			nll := f.nuisanceSearch(s, sp, th)
			best.consider(f, nll, th)
			return nll
		}
		budget = polishLineEvals
		for tries := 0; tries < 3 && evals < budget; tries++ {
			x := best.theta[0]
			a, b := math.Max(sp.lo[0], x-h[0]), math.Min(sp.hi[0], x+h[0])
			var xm float64
			var n int
			lo, hi, flo, fhi, ok := 0.0, 0.0, 0.0, 0.0, false
			if tries == 0 {
				lo, hi, flo, fhi, ok = f.gridBracket(s, sp, best.theta)
			}
			if ok && (flo < best.nll || fhi < best.nll) {
				// A node of the cell is lower than the estimate: the
				// minimum lies beyond it, so the search starts there
				// (a bracket's ends must not be below its inside).
				ok = false
			}
			if ok {
				// The first bracket is the grid cell around the
				// estimate: its nodes' predictions are exact, so with
				// lapse and eeg_ar held their values cost no prediction
				// and give the first parabola.
				w, fw, v, fv := lo, flo, hi, fhi
				if fhi < flo {
					w, fw, v, fv = hi, fhi, lo, flo
				}
				xm, _, n = brentMinFrom(val, lo, hi, x, best.nll, w, fw, v, fv, minStep[0], budget-evals, polishFlatWidth*cells0, polishFlat, 3)
				a, b = lo, hi
			} else {
				xm, _, n = brentMin(val, a, b, x, best.nll, minStep[0], budget-evals, polishFlatWidth*cells0, polishFlat, 3)
			}
			evals += n
			if !(xm-a < 2*minStep[0] && a > sp.lo[0]) && !(b-xm < 2*minStep[0] && b < sp.hi[0]) {
				break
			}
		}
		return best
	}
	// rise is the largest amount by which a failed poll's points lay above
	// the best: when it is below polishFlat, −ln L is flat at this step
	// and a shorter one cannot gain more than about that.
	rise := 0.0
	at := func(j int, v float64) bool {
		th := append([]float64(nil), best.theta...)
		th[j] = math.Max(sp.lo[j], math.Min(sp.hi[j], v))
		if th[j] == best.theta[j] {
			return false
		}
		evals++
		g.exactInto(th[:sp.dimsHyp], f.pred, f.ws, f.pr)
		was := best.nll
		v2 := f.nuisanceSearch(s, sp, th)
		best.consider(f, v2, th)
		if best.nll < was {
			return true
		}
		rise = math.Max(rise, v2-was)
		return false
	}
	for evals < budget {
		moved := false
		rise = 0
		for j := 0; j < sp.dimsHyp && evals < budget; j++ {
			if h[j] < minStep[j] {
				continue
			}
			x := best.theta[j]
			if at(j, x-h[j]) || at(j, x+h[j]) {
				moved = true
			}
		}
		if moved {
			continue
		}
		if rise < polishFlat {
			break
		}
		small := true
		for j := range h {
			h[j] *= polishShrink
			small = small && h[j] < minStep[j]
		}
		if small {
			break
		}
	}
	return best
}

// gridBracket returns the grid cell of a one-parameter grid around θ's
// hypothesis parameter (the cells either side when θ sits on a node), in
// natural units, with −ln L at its two nodes for θ's lapse and eeg_ar;
// ok is false when θ is not strictly inside.
func (f *fitter) gridBracket(s *sufficientStats, sp space, theta []float64) (lo, hi, flo, fhi float64, ok bool) {
	g := f.grid
	ax := g.axes[0]
	c := g.coord(0, theta[0])
	k := sort.SearchFloat64s(ax, c) // first node ≥ c
	i, j := k-1, k
	if k < len(ax) && ax[k] == c {
		j = k + 1
	}
	if i < 0 || j >= len(ax) {
		return 0, 0, 0, 0, false
	}
	_, lapse, ar := sp.split(theta)
	lo, hi = g.value(0, ax[i]), g.value(0, ax[j])
	if !(lo < theta[0] && theta[0] < hi) {
		return 0, 0, 0, 0, false
	}
	flo = logLik(s, g.lay, g.node(i), lapse, ar, nil)
	fhi = logLik(s, g.lay, g.node(j), lapse, ar, nil)
	return lo, hi, flo, fhi, true
}

// sameRun reports whether theta ended within sameRunWidth of its range, in every
// parameter, of a run already re-scored: starts that converge to one
// optimum need one exact prediction, not one each.
func sameRun(sp space, done [][]float64, theta []float64) bool {
	for _, d := range done {
		same := true
		for i := range theta {
			same = same && math.Abs(d[i]-theta[i]) <= sameRunWidth*(sp.hi[i]-sp.lo[i])
		}
		if same {
			return true
		}
	}
	return false
}
