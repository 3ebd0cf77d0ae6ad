package models

import (
	"fmt"
	"math"
)

// probFloor is the floor applied to every probability before its log
// (model.md §3), so that validity = 1 or item_fidelity = 1 give large but
// finite evidence.
const probFloor = 1e-9

func flog(p float64) float64 { return math.Log(math.Max(p, probFloor)) }

// Listener is the active-inference listening agent of model.md §3 compiled
// for one design: every likelihood that does not depend on the hypothesis
// is computed once here. A Listener is read-only after NewListener and safe
// for concurrent use; each goroutine passes its own Workspace to Predict.
type Listener struct {
	L, V, G, K int
	gains      []float64
	hit, miss  []float64 // ln A_γ(i|x) for i = x and i ≠ x, per gain level
	lnUnif     float64   // ln(1/V): an item on a stream that is not the target
	cueHit     float64   // ln P(c = d | d) = ln ρ
	cueMiss    float64   // ln P(c ≠ d | d) = ln((1−ρ)/(L−1))
	fdHit      float64   // ln P(f = d | d) = ln π
	fdMiss     float64   // ln P(f ≠ d | d) = ln((1−π)/(L−1))
	mkTarget   float64   // Σ_l ln P(k_l | f) for f = the marked stream
	mkOther    float64   // Σ_l ln P(k_l | f) for any other f
	inv2s2     float64   // 1/(2σ²), σ = one gain-level spacing
	invKappa   float64
	crit       float64
	alpha      float64

	ctiMs     []int
	nOn       []int // target onset per CTI, in epochs
	maxOn     int
	cueEpochs int // epochs with the cue shown when cue_ms is set; 0 = until onset
	present   int // P, presentation epochs
	window    int // W, response-window epochs
	deltaMs   float64
	binMs     int
	binIters  int

	// sigma is agent.precision_sd (model.md §3b): 0 for the deterministic
	// agent; gainLo and gainHi clip each trial's shifted precision course.
	sigma, gainLo, gainHi float64
	// dfSnaps[c] is the agent's state at target onset of CTI c apart from
	// the gain factor. Before target onset no factor reads the gain
	// beliefs (the items carry the only coupling to g), so d, f, x and the
	// accumulated evidence follow one course for every hypothesis: it is
	// run once here, and Predict runs only the gain factor up to onset.
	dfSnaps []state
}

// NewListener compiles the agent for design d (defaults filled, valid).
func NewListener(d *Design) (*Listener, error) {
	a := d.Agent
	if d.EpochMs <= 0 {
		return nil, fmt.Errorf("models: epoch_ms must be positive, got %d", d.EpochMs)
	}
	l := &Listener{
		L: d.Streams, V: d.Items, G: a.GainLevels, K: a.IterationsPerEpoch,
		gains:    a.GainGrid(),
		invKappa: 1 / a.TimeConstant,
		crit:     a.Criterion,
		alpha:    a.ChoiceTemperature,
		ctiMs:    append([]int(nil), d.CTIms...),
		deltaMs:  float64(d.EpochMs),
		binMs:    d.EEGBinMs,
	}
	if l.L < 2 || l.V < l.L || l.G < 2 || l.K < 1 {
		return nil, fmt.Errorf("models: design %q: need streams ≥ 2, items ≥ streams, gain_levels ≥ 2, iterations_per_epoch ≥ 1", d.Name)
	}
	mult := func(field string, ms int) (int, error) {
		if ms <= 0 || ms%d.EpochMs != 0 {
			return 0, fmt.Errorf("models: design %q: %s = %d must be a positive whole multiple of epoch_ms = %d", d.Name, field, ms, d.EpochMs)
		}
		return ms / d.EpochMs, nil
	}
	for _, c := range d.CTIms {
		n, err := mult("cti_ms", c)
		if err != nil {
			return nil, err
		}
		l.nOn = append(l.nOn, n)
		l.maxOn = max(l.maxOn, n)
	}
	var err error
	if l.present, err = mult("presentation_ms", d.PresentationMs); err != nil {
		return nil, err
	}
	if l.window, err = mult("response_window_ms", d.ResponseWindowMs); err != nil {
		return nil, err
	}
	if d.CueMs > 0 {
		if l.cueEpochs, err = mult("cue_ms", d.CueMs); err != nil {
			return nil, err
		}
	}
	bin, err := mult("eeg_bin_ms", d.EEGBinMs)
	if err != nil {
		return nil, err
	}
	l.binIters = bin * l.K

	L, V := float64(l.L), float64(l.V)
	fid := a.ItemFidelity
	a0hit, a0miss := fid, (1-fid)/(V-1)
	l.hit = make([]float64, l.G)
	l.miss = make([]float64, l.G)
	for g, gam := range l.gains {
		// A_γ(i|x) = A0(i|x)^γ / Σ_k A0(k|x)^γ
		ph, pm := math.Pow(a0hit, gam), math.Pow(a0miss, gam)
		z := ph + (V-1)*pm
		l.hit[g], l.miss[g] = flog(ph/z), flog(pm/z)
	}
	l.lnUnif = flog(1 / V)
	rho := a.CueReliability
	l.cueHit, l.cueMiss = flog(rho), flog((1-rho)/(L-1))
	l.fdHit, l.fdMiss = flog(d.Validity), flog((1-d.Validity)/(L-1))
	mu := a.MarkerReliability
	// Marker present on the target stream only: P(present | f = l) = μ,
	// P(present | f ≠ l) = 1 − μ, so P(absent | f ≠ l) = μ.
	l.mkTarget = L * flog(mu)
	l.mkOther = 2*flog(1-mu) + (L-2)*flog(mu)
	sp := (a.GainMax - a.GainMin) / float64(l.G-1)
	l.inv2s2 = 1 / (2 * sp * sp)
	if !(a.PrecisionSD >= 0) || math.IsInf(a.PrecisionSD, 0) {
		return nil, fmt.Errorf("models: design %q: agent.precision_sd must be >= 0, got %g", d.Name, a.PrecisionSD)
	}
	l.sigma, l.gainLo, l.gainHi = a.PrecisionSD, a.GainMin, a.GainMax
	l.prepareDF()
	return l, nil
}

// prepareDF runs the preparatory epochs once for the factors that do not
// depend on the hypothesis (d, f, x and their evidence) and keeps their
// state at each target onset in dfSnaps. The gain factor is run too, under
// a flat prior, only because iterate updates every factor; Predict
// replaces it.
func (l *Listener) prepareDF() {
	ws := l.NewWorkspace()
	flat := make([]float64, l.G)
	st := &ws.cur
	l.initState(st, flat)
	l.dfSnaps = make([]state, len(l.nOn))
	for c := range l.dfSnaps {
		l.dfSnaps[c] = newState(l)
	}
	snapAt := func(tau int) {
		for c, on := range l.nOn {
			if on == tau {
				l.dfSnaps[c].copyFrom(st)
			}
		}
	}
	for tau := 0; tau < l.maxOn; tau++ {
		snapAt(tau)
		cue := l.cueEpochs == 0 || tau < l.cueEpochs
		for k := 0; k < l.K; k++ {
			l.iterate(ws, st, flat, cue, false)
		}
		l.accumulate(ws, st, cue, false)
	}
	snapAt(l.maxOn)
}

// PrecisionSD is the trial-to-trial standard deviation of precision this
// listener was compiled with (agent.precision_sd; 0 = deterministic).
func (l *Listener) PrecisionSD() float64 { return l.sigma }

// Prediction holds the exact predictions of one hypothesis at one
// parameter point for one design (model.md §3 readouts).
type Prediction struct {
	CTIms   []int
	Valid   ClassPrediction
	Invalid ClassPrediction
	// Neural[c] holds the baseline-corrected expected precision in bins of
	// BinMs from cue onset, only bins that end by target onset of CTI c.
	BinMs  int
	Neural [][]float64
}

// ClassPrediction holds one trial class's readouts, one entry per CTI.
type ClassPrediction struct {
	RTms        []float64 // ms from target onset to the criterion crossing
	Accuracy    []float64 // P(report the target item)
	Misdirected []float64 // P(report the cued stream's item); 0 on valid trials
	// Censored is the share of trials whose criterion is not reached inside
	// the response window: 0 or 1 for the deterministic agent, the
	// expectation over trials with precision_sd > 0 (model.md §3b).
	Censored []float64
}

// state is every belief the agent carries between iterations.
type state struct {
	vd, sd, vf, sf, vx, sx, vg, sg []float64
	ed, ef, ex                     []float64
}

func newState(l *Listener) state {
	mk := func(n int) []float64 { return make([]float64, n) }
	return state{
		vd: mk(l.L), sd: mk(l.L), vf: mk(l.L), sf: mk(l.L),
		vx: mk(l.V), sx: mk(l.V), vg: mk(l.G), sg: mk(l.G),
		ed: mk(l.L), ef: mk(l.L), ex: mk(l.V),
	}
}

func (s *state) copyFrom(o *state) {
	copy(s.vd, o.vd)
	copy(s.sd, o.sd)
	copy(s.vf, o.vf)
	copy(s.sf, o.sf)
	copy(s.vx, o.vx)
	copy(s.sx, o.sx)
	copy(s.vg, o.vg)
	copy(s.sg, o.sg)
	copy(s.ed, o.ed)
	copy(s.ef, o.ef)
	copy(s.ex, o.ex)
}

// Workspace is the scratch memory of one Predict call; reuse it across
// calls in one goroutine to avoid allocation.
type Workspace struct {
	l        *Listener
	cur, br  state
	gsnapV   [][]float64 // gain beliefs v_g, s_g at each target onset
	gsnapS   [][]float64
	gamma    []float64 // γ(t_τ) of the current run, per epoch
	lnPrior  []float64 // epochs × G, filled on first use in a run
	priorRun []uint32  // run number that filled lnPrior's epoch τ
	run      uint32
	prepE    []float64
	e0       float64 // the neural baseline of the current run
	tgt      []float64
	prevSx   []float64
	itemOn   []int // item shown on stream l
	streamOf []int // stream showing item x, or −1
	choice   []float64
	res      []trialResult // per CTI × class of the current run
	graded   *gradedScratch
}

// trialResult is one deterministic trial's readouts and its outcome
// (model.md §3b step 1).
type trialResult struct {
	rt, acc, mis float64
	censored     bool
	// category of the most probable item at response (ties to the lowest
	// item index): reportTarget, reportCued or reportOther.
	category int8
}

const (
	reportTarget int8 = iota
	reportCued
	reportOther
)

// outcome codes category and censoring into one comparable value.
func (r trialResult) outcome() int8 {
	o := 2 * r.category
	if r.censored {
		o++
	}
	return o
}

// NewWorkspace allocates scratch memory for Predict.
func (l *Listener) NewWorkspace() *Workspace {
	w := &Workspace{l: l, cur: newState(l), br: newState(l)}
	w.gsnapV = make([][]float64, len(l.nOn))
	w.gsnapS = make([][]float64, len(l.nOn))
	for i := range w.gsnapV {
		w.gsnapV[i] = make([]float64, l.G)
		w.gsnapS[i] = make([]float64, l.G)
	}
	epochs := l.maxOn + l.window
	w.gamma = make([]float64, epochs)
	w.lnPrior = make([]float64, epochs*l.G)
	w.priorRun = make([]uint32, epochs)
	w.res = make([]trialResult, 2*len(l.nOn))
	w.prepE = make([]float64, l.maxOn*l.K)
	w.tgt = make([]float64, max(l.L, l.V, l.G))
	w.prevSx = make([]float64, l.V)
	w.itemOn = make([]int, l.L)
	w.streamOf = make([]int, l.V)
	w.choice = make([]float64, l.V)
	return w
}

// NewPrediction allocates a Prediction shaped for this listener.
func (l *Listener) NewPrediction() *Prediction {
	n := len(l.nOn)
	cp := func() ClassPrediction {
		return ClassPrediction{RTms: make([]float64, n), Accuracy: make([]float64, n), Misdirected: make([]float64, n), Censored: make([]float64, n)}
	}
	p := &Prediction{CTIms: append([]int(nil), l.ctiMs...), Valid: cp(), Invalid: cp(), BinMs: l.binMs, Neural: make([][]float64, n)}
	for c, on := range l.nOn {
		nb := (on * l.K) / l.binIters
		p.Neural[c] = make([]float64, nb)
	}
	return p
}

// softStep is one gradient step of model.md §3 on one factor:
//
//	ε = ln softmax(target) − v;  v ← v + ε/κ;  v ← ln softmax(v);  s = softmax(v)
//
// Both normalisations only add constants to v, and a constant added to v
// changes neither s nor any later step (the update is affine in v with
// weights summing to 1), so the step keeps v unnormalised and computes
// v ← (1 − 1/κ)·v + target/κ,  s = softmax(v). v stays bounded because the
// update is a contraction towards target.
func softStep(v, s, target []float64, invKappa float64) {
	keep := 1 - invKappa
	m := math.Inf(-1)
	for i := range v {
		x := keep*v[i] + invKappa*target[i]
		v[i] = x
		if x > m {
			m = x
		}
	}
	sum := 0.0
	for i, x := range v {
		e := math.Exp(x - m)
		s[i] = e
		sum += e
	}
	inv := 1 / sum
	for i := range s {
		s[i] *= inv
	}
}

// softStepItems is softStep on the item factor. Items shown..V−1 are on no
// stream (setItems shows items 0..L−1), so their targets and beliefs are
// equal bit for bit and their exponential is computed once; the result is
// softStep's, bit for bit.
func softStepItems(v, s, target []float64, shown int, invKappa float64) {
	keep := 1 - invKappa
	m := math.Inf(-1)
	for i := range v {
		x := keep*v[i] + invKappa*target[i]
		v[i] = x
		if x > m {
			m = x
		}
	}
	sum := 0.0
	for i := 0; i < shown; i++ {
		e := math.Exp(v[i] - m)
		s[i] = e
		sum += e
	}
	if shown < len(v) {
		e := math.Exp(v[shown] - m)
		for i := shown; i < len(v); i++ {
			s[i] = e
			sum += e
		}
	}
	inv := 1 / sum
	for i := range s {
		s[i] *= inv
	}
}

// softmaxInto sets s = softmax(v) by the same operations as softStep's
// second half, so that s matches the one softStep would leave bit for bit.
func softmaxInto(v, s []float64) {
	m := math.Inf(-1)
	for _, x := range v {
		if x > m {
			m = x
		}
	}
	sum := 0.0
	for i, x := range v {
		e := math.Exp(x - m)
		s[i] = e
		sum += e
	}
	inv := 1 / sum
	for i := range s {
		s[i] *= inv
	}
}

func logSumExp(x []float64) float64 {
	m := x[0]
	for _, v := range x[1:] {
		if v > m {
			m = v
		}
	}
	sum := 0.0
	for _, v := range x {
		sum += math.Exp(v - m)
	}
	return m + math.Log(sum)
}

// gainPrior fills dst with ln P_τ(g) ∝ −(γ_g − γ(t))²/(2σ²), normalised.
func (l *Listener) gainPrior(dst []float64, gamma float64) {
	for g, gv := range l.gains {
		d := gv - gamma
		dst[g] = -d * d * l.inv2s2
	}
	z := logSumExp(dst)
	lf := math.Log(probFloor)
	for g := range dst {
		dst[g] = math.Max(dst[g]-z, lf)
	}
}

// Predict computes the exact predictions of precision course p into dst
// (from NewPrediction), using ws (from NewWorkspace; nil allocates one).
// The preparatory part is run once to the longest CTI and branched at each
// target onset into a valid and an invalid trial. With precision_sd > 0 the
// predictions are expectations over trials (model.md §3b, predictGraded).
func (l *Listener) Predict(p Precision, dst *Prediction, ws *Workspace) {
	if ws == nil {
		ws = l.NewWorkspace()
	}
	if ws.l != l {
		panic("models: workspace belongs to another listener")
	}
	if l.sigma > 0 {
		l.predictGraded(p, dst, ws)
		return
	}
	for tau := range ws.gamma {
		ws.gamma[tau] = p.At(float64(tau) * l.deltaMs / 1000)
	}
	l.runTrials(ws, l.maxOn, nil, true)
	for c := range l.nOn {
		l.neuralInto(ws, c, dst.Neural[c])
		for class := 0; class < 2; class++ {
			r := ws.res[2*c+class]
			cp := &dst.Valid
			if class == 1 {
				cp = &dst.Invalid
			}
			cp.RTms[c], cp.Accuracy[c], cp.Misdirected[c] = r.rt, r.acc, r.mis
			cp.Censored[c] = 0
			if r.censored {
				cp.Censored[c] = 1
			}
		}
	}
}

// prior returns ln P_τ(g) of the current run, computing it from ws.gamma
// on first use.
func (l *Listener) prior(ws *Workspace, tau int) []float64 {
	G := l.G
	dst := ws.lnPrior[tau*G : (tau+1)*G]
	if ws.priorRun[tau] != ws.run {
		l.gainPrior(dst, ws.gamma[tau])
		ws.priorRun[tau] = ws.run
	}
	return dst
}

// runTrials runs one deterministic trial course under the precision in
// ws.gamma: the gain factor through the preparatory epochs up to epoch
// upto (the other factors come from dfSnaps), then, at each target onset
// up to upto, a valid and an invalid trial for every CTI × class index i
// with need == nil or need[i], into ws.res[i]. With neural set the
// expected precision of every preparatory iteration is kept in ws.prepE
// (neuralInto reads it); without, the gain beliefs s_g are computed only
// at target onsets: v_g's update does not read them.
func (l *Listener) runTrials(ws *Workspace, upto int, need []bool, neural bool) {
	ws.run++
	if ws.run == 0 { // wrapped: forget every cached prior
		clear(ws.priorRun)
		ws.run = 1
	}
	vg, sg := ws.cur.vg, ws.cur.sg
	// The gain beliefs start at P_0 (initState's renormalised prior).
	prior0 := l.prior(ws, 0)
	z := logSumExp(prior0)
	for g := range vg {
		vg[g] = prior0[g] - z
		sg[g] = math.Exp(vg[g])
	}
	ws.e0 = dot(l.gains, sg)
	snapAt := func(tau int) {
		for c, on := range l.nOn {
			if on == tau {
				copy(ws.gsnapV[c], vg)
				if !neural && tau > 0 {
					softmaxInto(vg, sg)
				}
				copy(ws.gsnapS[c], sg)
			}
		}
	}
	// Preparatory epochs: with no items the gain factor's target is its
	// prior alone (model.md §3), so only its step runs.
	keep := 1 - l.invKappa
	for tau := 0; tau < upto; tau++ {
		snapAt(tau)
		prior := l.prior(ws, tau)
		if !neural {
			for range l.K {
				for g, p := range prior {
					vg[g] = keep*vg[g] + l.invKappa*p
				}
			}
			continue
		}
		for k := 0; k < l.K; k++ {
			softStep(vg, sg, prior, l.invKappa)
			ws.prepE[tau*l.K+k] = dot(l.gains, sg)
		}
	}
	snapAt(upto)
	for c, on := range l.nOn {
		if on > upto {
			continue
		}
		for class := 0; class < 2; class++ {
			i := 2*c + class
			if need != nil && !need[i] {
				continue
			}
			ws.br.copyFrom(&l.dfSnaps[c])
			copy(ws.br.vg, ws.gsnapV[c])
			copy(ws.br.sg, ws.gsnapS[c])
			l.setItems(ws, class == 1)
			ws.res[i] = l.respond(ws, &ws.br, on)
		}
	}
}

// neuralInto writes the neural bins of CTI c of the current run into bins.
func (l *Listener) neuralInto(ws *Workspace, c int, bins []float64) {
	for b := range bins {
		s := 0.0
		for i := b * l.binIters; i < (b+1)*l.binIters; i++ {
			s += ws.prepE[i]
		}
		bins[b] = s/float64(l.binIters) - ws.e0
	}
}

func dot(a, b []float64) float64 {
	s := 0.0
	for i := range a {
		s += a[i] * b[i]
	}
	return s
}

// initState sets beliefs to the priors: d, f and x uniform (the marginal of
// f under P(f|d) with uniform d is uniform), g at P_0.
func (l *Listener) initState(st *state, prior0 []float64) {
	fill := func(v, s []float64) {
		u := 1 / float64(len(v))
		for i := range v {
			v[i], s[i] = math.Log(u), u
		}
	}
	fill(st.vd, st.sd)
	fill(st.vf, st.sf)
	fill(st.vx, st.sx)
	// The floored prior sums to slightly more than 1: renormalise.
	z := logSumExp(prior0)
	for g := range st.vg {
		st.vg[g] = prior0[g] - z
		st.sg[g] = math.Exp(st.vg[g])
	}
	for i := range st.ed {
		st.ed[i], st.ef[i] = 0, 0
	}
	for i := range st.ex {
		st.ex[i] = 0
	}
}

// setItems lays out one trial: the cue points at stream 0. On a valid
// trial the target (item 0) is on stream 0 and stream l shows item l; on an
// invalid trial the target is on stream 1 and the cued stream 0 shows the
// distractor item 1. Items L..V−1 are not shown.
func (l *Listener) setItems(ws *Workspace, invalid bool) {
	for x := range ws.streamOf {
		ws.streamOf[x] = -1
	}
	for s := 0; s < l.L; s++ {
		ws.itemOn[s] = s
	}
	if invalid {
		ws.itemOn[0], ws.itemOn[1] = 1, 0
	}
	for s, x := range ws.itemOn {
		ws.streamOf[x] = s
	}
}

// targetStream is the marked stream: 0 on valid trials, 1 on invalid ones.
func (ws *Workspace) targetStream() int { return ws.streamOf[0] }

// gainMix returns H = Σ_g s_g ln A_γg(i=x) and M = Σ_g s_g ln A_γg(i≠x).
func (l *Listener) gainMix(sg []float64) (h, m float64) {
	for g, s := range sg {
		h += s * l.hit[g]
		m += s * l.miss[g]
	}
	return h, m
}

// msgF fills dst with Σ_l m_{l→f} + Σ_l ln P(k_l | f).
func (l *Listener) msgF(ws *Workspace, st *state, dst []float64) {
	h, m := l.gainMix(st.sg)
	other := float64(l.L-1) * l.lnUnif
	tgt := ws.targetStream()
	for f := 0; f < l.L; f++ {
		sx := st.sx[ws.itemOn[f]]
		dst[f] = sx*h + (1-sx)*m + other
		if f == tgt {
			dst[f] += l.mkTarget
		} else {
			dst[f] += l.mkOther
		}
	}
}

// msgX fills dst with Σ_l m_{l→x}(x) = Σ_l Σ_f Σ_g s_f s_g ln P(w_l | x, f, g).
func (l *Listener) msgX(ws *Workspace, st *state, dst []float64) {
	h, m := l.gainMix(st.sg)
	base := 0.0
	for s := 0; s < l.L; s++ {
		base += st.sf[s]*m + (1-st.sf[s])*l.lnUnif
	}
	for x := range dst {
		dst[x] = base
		if s := ws.streamOf[x]; s >= 0 {
			dst[x] += st.sf[s] * (h - m)
		}
	}
}

// iterate runs one iteration: factors update in the order d, f, x, g, each
// using the latest beliefs of the others.
func (l *Listener) iterate(ws *Workspace, st *state, prior []float64, cue, items bool) {
	L := l.L
	t := ws.tgt[:L]
	for d := 0; d < L; d++ {
		t[d] = st.ed[d] + l.fdMiss + st.sf[d]*(l.fdHit-l.fdMiss)
		if cue {
			if d == 0 {
				t[d] += l.cueHit
			} else {
				t[d] += l.cueMiss
			}
		}
	}
	softStep(st.vd, st.sd, t, l.invKappa)

	if items {
		l.msgF(ws, st, t)
	} else {
		for f := range t {
			t[f] = 0
		}
	}
	for f := 0; f < L; f++ {
		t[f] += st.ef[f] + l.fdMiss + st.sd[f]*(l.fdHit-l.fdMiss)
	}
	softStep(st.vf, st.sf, t, l.invKappa)

	if items {
		tx := ws.tgt[:l.V]
		l.msgX(ws, st, tx)
		for x := range tx {
			tx[x] += st.ex[x]
		}
		softStepItems(st.vx, st.sx, tx, l.L, l.invKappa)
	} else if !allZero(st.ex) {
		tx := ws.tgt[:l.V]
		copy(tx, st.ex)
		softStepItems(st.vx, st.sx, tx, l.L, l.invKappa)
	}
	// With E_x = 0 and no items the target of x is uniform and v_x already
	// is ln(1/V): the step would leave it unchanged, so it is skipped.

	tg := ws.tgt[:l.G]
	copy(tg, prior)
	if items {
		for s := 0; s < L; s++ {
			sf, sx := st.sf[s], st.sx[ws.itemOn[s]]
			off := (1 - sf) * l.lnUnif
			for g := range tg {
				tg[g] += sf*(sx*l.hit[g]+(1-sx)*l.miss[g]) + off
			}
		}
	}
	softStep(st.vg, st.sg, tg, l.invKappa)
}

func allZero(x []float64) bool {
	for _, v := range x {
		if v != 0 {
			return false
		}
	}
	return true
}

// accumulate adds an epoch's final messages to E_d, E_f and E_x.
func (l *Listener) accumulate(ws *Workspace, st *state, cue, items bool) {
	if cue {
		st.ed[0] += l.cueHit
		for d := 1; d < l.L; d++ {
			st.ed[d] += l.cueMiss
		}
	}
	if items {
		t := ws.tgt[:l.L]
		l.msgF(ws, st, t)
		for f := range t {
			st.ef[f] += t[f]
		}
		tx := ws.tgt[:l.V]
		l.msgX(ws, st, tx)
		for x := range tx {
			st.ex[x] += tx[x]
		}
	}
}

// respond runs the response window from target onset (epoch on) until the
// posterior max_x s_x crosses the criterion, returning the RT in ms, the
// probabilities of reporting the target and the cued stream's item,
// whether the RT was censored at the window's end, and the category of the
// most probable item at response.
func (l *Listener) respond(ws *Workspace, st *state, on int) trialResult {
	prevMax := maxOf(st.sx)
	copy(ws.prevSx, st.sx)
	for tau := on; tau < on+l.window; tau++ {
		items := tau-on < l.present
		cue := l.cueEpochs > 0 && tau < l.cueEpochs
		// Once neither items nor the cue are shown, the item beliefs move
		// towards their accumulated evidence alone (iterate's x step reads
		// nothing else), and no readout reads d, f or g: only x is run, as
		// iterate would run it, and there is nothing to accumulate.
		xOnly := !items && !cue
		var prior []float64
		if !xOnly {
			prior = l.prior(ws, tau)
		}
		still := xOnly && allZero(st.ex)
		for k := 0; k < l.K; k++ {
			switch {
			case !xOnly:
				l.iterate(ws, st, prior, cue, items)
			case !still:
				softStepItems(st.vx, st.sx, st.ex, l.L, l.invKappa)
			}
			m := maxOf(st.sx)
			if m >= l.crit && prevMax < l.crit {
				// i* = i − 1 + (criterion − m_{i−1})/(m_i − m_{i−1})
				frac := (l.crit - prevMax) / (m - prevMax)
				i := float64((tau-on)*l.K + k)
				rt := (i + frac) * l.deltaMs / float64(l.K)
				for x := range ws.choice {
					ws.choice[x] = ws.prevSx[x] + frac*(st.sx[x]-ws.prevSx[x])
				}
				cat := l.category(ws)
				acc, mis := l.choose(ws.choice, ws.itemOn[0])
				return trialResult{rt: rt, acc: acc, mis: mis, category: cat}
			}
			prevMax = m
			copy(ws.prevSx, st.sx)
		}
		if !xOnly {
			l.accumulate(ws, st, cue, items)
		}
	}
	copy(ws.choice, st.sx)
	cat := l.category(ws)
	acc, mis := l.choose(ws.choice, ws.itemOn[0])
	return trialResult{rt: float64(l.window) * l.deltaMs, acc: acc, mis: mis, censored: true, category: cat}
}

// category classifies the most probable item of ws.choice (ties to the
// lowest item index): the target (item 0), the cued stream's item on an
// invalid trial, or another item.
func (l *Listener) category(ws *Workspace) int8 {
	best := 0
	for x, v := range ws.choice {
		if v > ws.choice[best] {
			best = x
		}
	}
	switch {
	case best == 0:
		return reportTarget
	case best == ws.itemOn[0]:
		return reportCued
	}
	return reportOther
}

// choose returns P(report target) and P(report the cued stream's item)
// under P(report i) ∝ s_x(i)^α. The target is item 0; cued holds the item
// on the cued stream (0 on a valid trial).
func (l *Listener) choose(s []float64, cued int) (acc, mis float64) {
	sum := 0.0
	for i, v := range s {
		p := math.Pow(math.Max(v, 0), l.alpha)
		s[i] = p
		sum += p
	}
	acc = s[0] / sum
	if cued != 0 {
		mis = s[cued] / sum
	}
	return acc, mis
}

func maxOf(x []float64) float64 {
	m := x[0]
	for _, v := range x[1:] {
		if v > m {
			m = v
		}
	}
	return m
}
