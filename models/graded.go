package models

// Trial-to-trial variability of precision (model.md §3b): with
// agent.precision_sd = σ > 0 each trial's precision course is shifted by
// δ ~ N(0, σ²) and clipped to the gain range, and every prediction is an
// expectation over δ, written in u = Φ(δ/σ) ∈ (0, 1).

import (
	"math"
	"slices"

	"gonum.org/v1/gonum/integrate/quad"
	"gonum.org/v1/gonum/mathext"
)

// The rule of model.md §3b.
const (
	scanTail     = 1e-6 // the outermost scan points, u = 1e-6 and 1 − 1e-6
	scanInterior = 16   // interior scan points (j − 0.5)/16, j = 1..16
	changeTol    = 1e-8 // a change of outcome is located to this width in u
	glPoints     = 6    // Gauss–Legendre points per piece
	// neuralQuantum is the resolution of graded neural bins (gain units),
	// far above rounding noise and far below any signal a fit could see.
	neuralQuantum = 1e-12
)

// scanU are the scan points of model.md §3b step 2, ascending.
var scanU = func() []float64 {
	u := []float64{scanTail}
	for j := 1; j <= scanInterior; j++ {
		u = append(u, (float64(j)-0.5)/scanInterior)
	}
	return append(u, 1-scanTail)
}()

// glNodes and glWeights are the Gauss–Legendre rule on [0, 1] (gonum's
// quad.Legendre, checked against tabulated values in the tests).
var glNodes, glWeights = func() ([]float64, []float64) {
	x, w := make([]float64, glPoints), make([]float64, glPoints)
	quad.Legendre{}.FixedLocations(x, w, 0, 1)
	// Ascending, so that every sum over nodes runs in one fixed order.
	if x[0] > x[len(x)-1] {
		slices.Reverse(x)
		slices.Reverse(w)
	}
	return x, w
}()

// gradedScratch is the memory of one graded prediction set.
type gradedScratch struct {
	gam      []float64 // γ(t_τ) of the hypothesis, per epoch, unshifted
	scan     [][]int8  // outcome per scan point × (CTI × class)
	changes  [][]float64
	need     []bool
	rtw      []float64 // E[p_target · RT] per CTI × class
	rtPlain  []float64 // E[RT], the fallback when E[p_target] underflows
	bins     []float64
	idx      []int
	brackets []bracket
	// trace, when set, records every integration node (tests).
	trace func(i int, u, w float64, r trialResult)
}

func (l *Listener) gradedScratch(ws *Workspace) *gradedScratch {
	if ws.graded != nil {
		return ws.graded
	}
	n := 2 * len(l.nOn)
	g := &gradedScratch{
		gam:     make([]float64, len(ws.gamma)),
		scan:    make([][]int8, len(scanU)),
		changes: make([][]float64, n),
		need:    make([]bool, n),
		rtw:     make([]float64, n),
		rtPlain: make([]float64, n),
		bins:    make([]float64, l.maxOn*l.K/l.binIters+1),
	}
	for j := range g.scan {
		g.scan[j] = make([]int8, n)
	}
	ws.graded = g
	return g
}

// shift returns δ = σ Φ⁻¹(u).
func (l *Listener) shift(u float64) float64 { return l.sigma * mathext.NormalQuantile(u) }

// runShifted runs the trials of index i with need[i] (all when need is nil)
// on the precision course shifted by δ(u) and clipped to the gain range.
// It runs the preparation only up to the latest target onset needed, and
// keeps the neural signal only when neural is set.
func (l *Listener) runShifted(ws *Workspace, u float64, need []bool, neural bool) {
	g := ws.graded
	d := l.shift(u)
	upto := 0
	for c, on := range l.nOn {
		if need == nil || need[2*c] || need[2*c+1] {
			upto = max(upto, on)
		}
	}
	for tau, v := range g.gam {
		ws.gamma[tau] = min(l.gainHi, max(l.gainLo, v+d))
	}
	l.runTrials(ws, upto, need, neural)
}

// bracket is one change of outcome being located for trial index i:
// the outcome at lo is oa, at hi ohi ≠ oa; b (outcome ob) is the scan
// point that closes the interval.
type bracket struct {
	i           int
	lo, hi, b   float64
	oa, ohi, ob int8
	done        bool
	galloping   bool    // looking for the next change beyond lo
	step        float64 // the gallop's next step
	gallopsLeft int
}

// gallops is the number of doublings from 2·changeTol with which a search
// for a further change starts before it bisects the rest of its interval:
// changes of outcome often come in clusters a few 1e-8 apart.
const gallops = 8

// locateAll finds every change of outcome between scan points j−1 and j
// for the trial indices in idx (whose outcomes there differ), into
// g.changes. Each change is bracketed by bisection, the left point moving
// while its outcome matches the left end's, until the bracket is 2e-8
// wide; its midpoint is the change. Brackets that share both ends share
// their midpoint, so one run (branched to every such index) serves them
// all. When the bracket's right end has another outcome than the scan
// point, a further change lies beyond it: it is sought by doubling steps
// from 2e-8, then by bisection.
func (l *Listener) locateAll(ws *Workspace, j int, idx []int) {
	g := ws.graded
	a, b := scanU[j-1], scanU[j]
	br := g.brackets[:0]
	for _, i := range idx {
		br = append(br, bracket{i: i, lo: a, hi: b, b: b, oa: g.scan[j-1][i], ohi: g.scan[j][i], ob: g.scan[j][i]})
	}
	for {
		// The probe of each live bracket, and one run per distinct probe.
		clear(g.need)
		var u float64
		live := false
		for k := range br {
			x := &br[k]
			if x.done {
				continue
			}
			p := x.probe()
			if !live {
				u, live = p, true
			}
			if p == u {
				g.need[x.i] = true
			}
		}
		if !live {
			break
		}
		l.runShifted(ws, u, g.need, false)
		for k := range br {
			x := &br[k]
			if x.done || !g.need[x.i] || x.probe() != u {
				continue
			}
			if x.advance(u, ws.res[x.i].outcome()) {
				g.changes[x.i] = append(g.changes[x.i], 0.5*(x.lo+x.hi))
				if x.ohi == x.ob {
					x.done = true
					continue
				}
				// A further change between hi and b.
				*x = bracket{i: x.i, lo: x.hi, hi: x.b, b: x.b, oa: x.ohi, ohi: x.ob, ob: x.ob,
					galloping: true, step: 2 * changeTol, gallopsLeft: gallops}
			}
		}
	}
	g.brackets = br
}

// probe is the next point at which the bracket needs the outcome.
func (x *bracket) probe() float64 {
	if x.galloping {
		if p := x.lo + x.step; p < x.hi {
			return p
		}
	}
	return 0.5 * (x.lo + x.hi)
}

// advance records outcome o at the probe u and reports whether the
// bracket is narrow enough to place the change at its midpoint.
func (x *bracket) advance(u float64, o int8) bool {
	if x.galloping && u != 0.5*(x.lo+x.hi) {
		if o == x.oa {
			x.lo = u
			x.step *= 2
			x.gallopsLeft--
			if x.gallopsLeft == 0 {
				x.galloping = false
			}
		} else {
			x.hi, x.ohi = u, o
			x.galloping = false
		}
	} else {
		x.galloping = false
		if o == x.oa {
			x.lo = u
		} else {
			x.hi, x.ohi = u, o
		}
	}
	return x.hi-x.lo <= 2*changeTol
}

// predictGraded computes the expectations of model.md §3b into dst:
//  1. one branched run per scan point gives every CTI's and class's
//     outcome there;
//  2. between adjacent scan points whose outcomes differ, the change is
//     located with runs up to that CTI's window, of that class alone;
//  3. each CTI × class integrates on its pieces with 6-point
//     Gauss–Legendre; those without a change share the nodes on (0, 1),
//     run once for all of them;
//  4. accuracy, misdirected and censored share are E[·], the RT of correct
//     reports E[p_target · RT] / E[p_target], and the neural bins of a CTI
//     are integrated on the pieces of its valid class.
func (l *Listener) predictGraded(p Precision, dst *Prediction, ws *Workspace) {
	g := l.gradedScratch(ws)
	for tau := range g.gam {
		g.gam[tau] = p.At(float64(tau) * l.deltaMs / 1000)
	}
	n := 2 * len(l.nOn)
	for j, u := range scanU {
		l.runShifted(ws, u, nil, false)
		for i := range n {
			g.scan[j][i] = ws.res[i].outcome()
		}
	}
	for i := range n {
		g.changes[i] = g.changes[i][:0]
	}
	for j := 1; j < len(scanU); j++ {
		idx := g.idx[:0]
		for i := range n {
			if g.scan[j-1][i] != g.scan[j][i] {
				idx = append(idx, i)
			}
		}
		if len(idx) > 0 {
			l.locateAll(ws, j, idx)
		}
		g.idx = idx
	}

	for _, cp := range []*ClassPrediction{&dst.Valid, &dst.Invalid} {
		clear(cp.RTms)
		clear(cp.Accuracy)
		clear(cp.Misdirected)
		clear(cp.Censored)
	}
	for c := range dst.Neural {
		clear(dst.Neural[c])
	}
	clear(g.rtw)
	clear(g.rtPlain)

	// Trials without a change share the nodes on (0, 1).
	some := false
	for i := range n {
		g.need[i] = len(g.changes[i]) == 0
		some = some || g.need[i]
	}
	if some {
		shared := append([]bool(nil), g.need...)
		neural := false
		for c := range l.nOn {
			neural = neural || shared[2*c]
		}
		for k, t := range glNodes {
			l.runShifted(ws, t, shared, neural)
			for i, ok := range shared {
				if ok {
					l.addNode(ws, dst, i, t, glWeights[k])
				}
			}
		}
	}
	for i := range n {
		if len(g.changes[i]) == 0 {
			continue
		}
		a := 0.0
		for e := 0; e <= len(g.changes[i]); e++ {
			b := 1.0
			if e < len(g.changes[i]) {
				b = g.changes[i][e]
			}
			for k, t := range glNodes {
				u := a + (b-a)*t
				clear(g.need)
				g.need[i] = true
				l.runShifted(ws, u, g.need, i%2 == 0)
				l.addNode(ws, dst, i, u, (b-a)*glWeights[k])
			}
			a = b
		}
	}
	// E[e_b] is a sum over nodes, each carrying rounding noise of about
	// 1e-16 that differs from bin to bin; on a flat signal (a constant
	// precision) a profiled eeg_gain would scale that noise up and fit the
	// data's own noise with it. Bins are kept to neuralQuantum.
	for c := range dst.Neural {
		for b, v := range dst.Neural[c] {
			dst.Neural[c][b] = math.Round(v/neuralQuantum) * neuralQuantum
		}
	}
	for c := range l.nOn {
		for class, cp := range []*ClassPrediction{&dst.Valid, &dst.Invalid} {
			i := 2*c + class
			if cp.Accuracy[c] > 0 {
				cp.RTms[c] = g.rtw[i] / cp.Accuracy[c]
			} else {
				cp.RTms[c] = g.rtPlain[i]
			}
			// The weights sum to 1 up to rounding: keep shares in [0, 1].
			cp.Censored[c] = min(1, cp.Censored[c])
			cp.Accuracy[c] = min(1, cp.Accuracy[c])
		}
	}
}

// addNode adds trial index i of the current run, at node u with weight w,
// to the expectations; a valid trial also adds its CTI's neural bins.
func (l *Listener) addNode(ws *Workspace, dst *Prediction, i int, u, w float64) {
	g := ws.graded
	c, class := i/2, i%2
	r := ws.res[i]
	cp := &dst.Valid
	if class == 1 {
		cp = &dst.Invalid
	}
	cp.Accuracy[c] += w * r.acc
	cp.Misdirected[c] += w * r.mis
	if r.censored {
		cp.Censored[c] += w
	}
	g.rtw[i] += w * r.acc * r.rt
	g.rtPlain[i] += w * r.rt
	if class == 0 {
		bins := g.bins[:len(dst.Neural[c])]
		l.neuralInto(ws, c, bins)
		for b, v := range bins {
			dst.Neural[c][b] += w * v
		}
	}
	if g.trace != nil {
		g.trace(i, u, w, r)
	}
}
