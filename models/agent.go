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
	return l, nil
}

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
	Censored    []bool    // criterion not reached inside the response window
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
	l          *Listener
	cur, br    state
	snaps      []state
	lnPrior    []float64 // epochs × G
	prepE      []float64
	tgt        []float64
	prevSx     []float64
	itemOn     []int // item shown on stream l
	streamOf   []int // stream showing item x, or −1
	choice     []float64
	preparedTo int
}

// NewWorkspace allocates scratch memory for Predict.
func (l *Listener) NewWorkspace() *Workspace {
	w := &Workspace{l: l, cur: newState(l), br: newState(l)}
	w.snaps = make([]state, len(l.nOn))
	for i := range w.snaps {
		w.snaps[i] = newState(l)
	}
	epochs := l.maxOn + l.window
	w.lnPrior = make([]float64, epochs*l.G)
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
		return ClassPrediction{RTms: make([]float64, n), Accuracy: make([]float64, n), Misdirected: make([]float64, n), Censored: make([]bool, n)}
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
// target onset into a valid and an invalid trial.
func (l *Listener) Predict(p Precision, dst *Prediction, ws *Workspace) {
	if ws == nil {
		ws = l.NewWorkspace()
	}
	if ws.l != l {
		panic("models: workspace belongs to another listener")
	}
	G := l.G
	epochs := l.maxOn + l.window
	for tau := 0; tau < epochs; tau++ {
		l.gainPrior(ws.lnPrior[tau*G:(tau+1)*G], p.At(float64(tau)*l.deltaMs/1000))
	}
	st := &ws.cur
	l.initState(st, ws.lnPrior[:G])
	e0 := dot(l.gains, st.sg)

	// Preparatory epochs, common to every CTI and trial class.
	snapAt := func(tau int) {
		for c, on := range l.nOn {
			if on == tau {
				ws.snaps[c].copyFrom(st)
			}
		}
	}
	for tau := 0; tau < l.maxOn; tau++ {
		snapAt(tau)
		cue := l.cueEpochs == 0 || tau < l.cueEpochs
		prior := ws.lnPrior[tau*G : (tau+1)*G]
		for k := 0; k < l.K; k++ {
			l.iterate(ws, st, prior, cue, false)
			ws.prepE[tau*l.K+k] = dot(l.gains, st.sg)
		}
		l.accumulate(ws, st, cue, false)
	}
	snapAt(l.maxOn)

	for c, on := range l.nOn {
		bins := dst.Neural[c]
		for b := range bins {
			s := 0.0
			for i := b * l.binIters; i < (b+1)*l.binIters; i++ {
				s += ws.prepE[i]
			}
			bins[b] = s/float64(l.binIters) - e0
		}
		for class := 0; class < 2; class++ {
			ws.br.copyFrom(&ws.snaps[c])
			l.setItems(ws, class == 1)
			rt, acc, mis, cens := l.respond(ws, &ws.br, on)
			cp := &dst.Valid
			if class == 1 {
				cp = &dst.Invalid
			}
			cp.RTms[c], cp.Accuracy[c], cp.Censored[c] = rt, acc, cens
			if class == 1 {
				cp.Misdirected[c] = mis
			} else {
				cp.Misdirected[c] = 0
			}
		}
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
		softStep(st.vx, st.sx, tx, l.invKappa)
	} else if !allZero(st.ex) {
		tx := ws.tgt[:l.V]
		copy(tx, st.ex)
		softStep(st.vx, st.sx, tx, l.invKappa)
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
// probabilities of reporting the target and the cued stream's item, and
// whether the RT was censored at the window's end.
func (l *Listener) respond(ws *Workspace, st *state, on int) (rt, acc, mis float64, censored bool) {
	G := l.G
	prevMax := maxOf(st.sx)
	copy(ws.prevSx, st.sx)
	for tau := on; tau < on+l.window; tau++ {
		items := tau-on < l.present
		cue := l.cueEpochs > 0 && tau < l.cueEpochs
		prior := ws.lnPrior[tau*G : (tau+1)*G]
		for k := 0; k < l.K; k++ {
			l.iterate(ws, st, prior, cue, items)
			m := maxOf(st.sx)
			if m >= l.crit && prevMax < l.crit {
				// i* = i − 1 + (criterion − m_{i−1})/(m_i − m_{i−1})
				frac := (l.crit - prevMax) / (m - prevMax)
				i := float64((tau-on)*l.K + k)
				rt = (i + frac) * l.deltaMs / float64(l.K)
				for x := range ws.choice {
					ws.choice[x] = ws.prevSx[x] + frac*(st.sx[x]-ws.prevSx[x])
				}
				acc, mis = l.choose(ws.choice, ws.itemOn[0])
				return rt, acc, mis, false
			}
			prevMax = m
			copy(ws.prevSx, st.sx)
		}
		l.accumulate(ws, st, cue, items)
	}
	copy(ws.choice, st.sx)
	acc, mis = l.choose(ws.choice, ws.itemOn[0])
	return float64(l.window) * l.deltaMs, acc, mis, true
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
