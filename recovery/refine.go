package recovery

import (
	"context"
	"math"
	"slices"
	"sort"

	"discrimen/internal/parallel"
	"discrimen/models"
)

// Grid refinement settings. A cell of a one-parameter grid is split at its
// midpoint while the interpolation error there, as its effect on ln L for a
// typical dataset of the design (typicalData), exceeds gridTolerance; a
// cell narrower than jumpWidth of the range that is still over tolerance
// holds a jump of the predictions themselves, which no grid closes; at most
// refineBudget nodes are added per grid.
const (
	gridTolerance = 0.5
	jumpWidth     = 1e-6
	refineBudget  = 384
)

// refineResult is what refinement did to one grid.
type refineResult struct {
	Added int
	// Jumps are the parameter values (natural units) of cells narrower
	// than jumpWidth of the range still over tolerance.
	Jumps []float64
	// Worst is the largest ln L effect left at a tested midpoint that was
	// not split (over tolerance only at a jump or when the budget ran out).
	Worst float64
	// Exhausted is set when the budget stopped the refinement.
	Exhausted bool
}

// typicalData is the dataset a design records on average, used to express
// a prediction error as its effect on ln L: trial counts per CTI and class
// and the medians of the measurement priors.
type typicalData struct {
	lay                  layout
	nValid, nInvalid     float64 // trials per CTI
	items                float64
	rt, acc, eeg         bool
	rtScale, rtSD, lapse float64
	eegGain, eegSD       float64
}

func newTypicalData(d *models.Design, lay layout) typicalData {
	m := d.Measurement
	n := float64(d.TrialsPerCTI)
	return typicalData{
		lay: lay, nValid: n * d.Validity, nInvalid: n * (1 - d.Validity), items: float64(d.Items),
		rt: d.HasMeasure("rt"), acc: d.HasMeasure("accuracy"), eeg: d.HasMeasure("eeg"),
		rtScale: m.RTScale.Median(), rtSD: m.RTSD.Median(), lapse: m.Lapse.Median(),
		eegGain: m.EEGGain.Median(), eegSD: m.EEGSD.Median(),
	}
}

// effect bounds the change of ln L, for a typical dataset generated from
// predictions p, when it is evaluated at predictions q instead. Its core
// is the Kullback–Leibler divergence of the data's distribution under q
// from it under p, summed over observations (Kullback & Leibler 1951,
// Annals of Mathematical Statistics 22:79), per group of observations:
//
//	RT (correct reports, normal): n·acc·(rt_scale·ΔRT)² / (2·rt_sd²)
//	reports (categorical, lapse-mixed): n·Σ_k p_k ln(p_k/q_k)
//	EEG bins (normal): (eeg_gain·Δe)² / (2·eeg_sd²)
//
// with the priors' medians for the measurement parameters; each group's K
// is widened to K + 2√(2K), the linear term of a dataset whose means sit
// two standard errors from the prediction (common practice: a bound, not
// an expectation).
func (t typicalData) effect(p, q []float64) float64 {
	l := t.lay
	mix := func(x float64) float64 { return math.Max((1-t.lapse)*x+t.lapse/t.items, 1e-9) }
	// Each group of observations contributes its divergence K plus the
	// linear term a dataset whose observed means sit two standard errors
	// from the prediction adds, 2·√(2K) (for a normal mean, K = nΔ²/2σ²
	// and the term is 2√n·|Δ|/σ): real data are not at the prediction.
	group := func(k float64) float64 { return k + 2*math.Sqrt(2*k) }
	kl := func(ps, qs []float64) float64 {
		s := 0.0
		for i := range ps {
			a, b := mix(ps[i]), mix(qs[i])
			s += a * math.Log(a/b)
		}
		return math.Max(s, 0)
	}
	e := 0.0
	for c := 0; c < l.C; c++ {
		if t.rt && t.rtSD > 0 {
			k := t.rtScale * t.rtScale / (2 * t.rtSD * t.rtSD)
			dv, di := p[l.vRT(c)]-q[l.vRT(c)], p[l.iRT(c)]-q[l.iRT(c)]
			e += group(k*t.nValid*p[l.vAcc(c)]*dv*dv) + group(k*t.nInvalid*p[l.iAcc(c)]*di*di)
		}
		if t.acc {
			pv, qv := p[l.vAcc(c)], q[l.vAcc(c)]
			e += group(t.nValid * kl([]float64{pv, 1 - pv}, []float64{qv, 1 - qv}))
			pt, pc, qt, qc := p[l.iAcc(c)], p[l.iMis(c)], q[l.iAcc(c)], q[l.iMis(c)]
			e += group(t.nInvalid * kl([]float64{pt, pc, 1 - pt - pc}, []float64{qt, qc, 1 - qt - qc}))
		}
	}
	if t.eeg && t.eegSD > 0 {
		k := t.eegGain * t.eegGain / (2 * t.eegSD * t.eegSD)
		kk := 0.0
		for b := 0; b < l.neural(); b++ {
			d := p[l.eeg(b)] - q[l.eeg(b)]
			kk += k * d * d
		}
		e += group(kk)
	}
	return e
}

// refine1D splits the cells of a one-parameter grid where interpolation
// costs more than gridTolerance of ln L for a typical dataset (see the
// constants above).
func (c *PredictionGrid) refine1D(ctx context.Context, workers int) error {
	if len(c.axes) != 1 || len(c.axes[0]) < 2 {
		return nil
	}
	size := c.lay.size()
	typ := newTypicalData(c.design, c.lay)
	type node struct {
		g    float64
		pred []float64
	}
	ax := c.axes[0]
	nodes := make([]node, len(ax))
	for k := range ax {
		nodes[k] = node{ax[k], append([]float64(nil), c.values[k*size:(k+1)*size]...)}
	}
	exact := func(g float64, dst []float64, ws *models.Workspace, p *models.Prediction) {
		c.exactInto([]float64{c.value(0, g)}, dst, ws, p)
	}
	type scratch struct {
		ws *models.Workspace
		p  *models.Prediction
	}
	scr := make([]*scratch, max(workers, 1))
	interp := make([]float64, size)
	width := jumpWidth * float64(c.points-1) // in grid units
	res := &c.refine
	var added []node
	// The cells are tested level by level: every midpoint of a level in
	// parallel, then the splits decided in order of position, so the
	// result does not depend on the workers.
	type cell struct{ a, b node }
	level := make([]cell, len(ax)-1)
	for k := range level {
		level[k] = cell{nodes[k], nodes[k+1]}
	}
	for len(level) > 0 {
		mids := make([]node, len(level))
		err := parallel.For(ctx, len(level), workers, func(w, k int) error {
			if scr[w] == nil {
				scr[w] = &scratch{c.listener.NewWorkspace(), c.listener.NewPrediction()}
			}
			g := 0.5 * (level[k].a.g + level[k].b.g)
			mids[k] = node{g, make([]float64, size)}
			exact(g, mids[k].pred, scr[w].ws, scr[w].p)
			return nil
		})
		if err != nil {
			return err
		}
		var next []cell
		for k, cl := range level {
			a, b, m := cl.a, cl.b, mids[k]
			for j := range interp {
				interp[j] = 0.5 * (a.pred[j] + b.pred[j])
			}
			e := typ.effect(m.pred, interp)
			switch {
			case e <= gridTolerance:
			case b.g-a.g <= width:
				res.Jumps = append(res.Jumps, c.value(0, m.g))
				res.Worst = math.Max(res.Worst, e)
			case res.Added >= refineBudget:
				res.Exhausted = true
				res.Worst = math.Max(res.Worst, e)
			default:
				res.Added++
				added = append(added, m)
				next = append(next, cell{a, m}, cell{m, b})
			}
		}
		level = next
	}
	// Neighbouring narrow cells of one jump (a jump with a short ramp)
	// are one jump: merge those within 1e-4 of the range.
	sort.Float64s(res.Jumps)
	merged := res.Jumps[:0]
	for _, j := range res.Jumps {
		if len(merged) > 0 && j-merged[len(merged)-1] <= 1e-4*(c.hi[0]-c.lo[0]) {
			continue
		}
		merged = append(merged, j)
	}
	res.Jumps = merged
	if len(added) == 0 {
		return nil
	}
	all := append(nodes, added...)
	sort.Slice(all, func(i, j int) bool { return all[i].g < all[j].g })
	c.axes[0] = make([]float64, len(all))
	c.values = make([]float64, len(all)*size)
	for k, n := range all {
		c.axes[0][k] = n.g
		copy(c.values[k*size:], n.pred)
	}
	c.setStrides()
	return nil
}

// Refinement of grids of two or more parameters. Testing every cell, as
// in one dimension, costs as much as the grid and keeps splitting the
// cells that a curve of jumps crosses; instead interpolation is tested
// at ndCheckPoints points of a Halton sequence (Halton 1960, Numerische
// Mathematik 2:84), which needs no seed and covers the box evenly, and
// which the random points of MeasureError, drawn afterwards, do not
// share. At a point over gridTolerance that is not at a jump (jumpNear),
// each axis's own share of the error is measured (linear interpolation
// along that axis alone, between exact predictions on the cell's two
// faces), and the axes over tolerance (or else the worst one) get a new
// node line through the middle of the cell: a whole line (plane, ...) of
// exact predictions, since the grid is a tensor product. Cells narrower
// than ndMinWidth initial cells are not split again; at most
// ndBudgetShare of the initial nodes are added, in ndRounds rounds at
// most.
const (
	ndCheckPoints = 96
	ndRounds      = 8
	ndBudgetShare = 1.0
	ndMinWidth    = 1.0 / 16
)

// halton is the i-th element (i ≥ 1) of the van der Corput sequence in
// the given base, the Halton sequence's coordinate for that base.
func halton(i, base int) float64 {
	f, r := 1.0, 0.0
	for ; i > 0; i /= base {
		f /= float64(base)
		r += f * float64(i%base)
	}
	return r
}

// refineND refines a grid of two or more parameters (see the constants
// above). The result does not depend on the workers: check points,
// decisions and insertions are made in a fixed order.
func (c *PredictionGrid) refineND(ctx context.Context, workers int) error {
	dims := len(c.axes)
	size := c.lay.size()
	typ := newTypicalData(c.design, c.lay)
	budget := int(ndBudgetShare * float64(c.Nodes()))
	if budget == 0 {
		return nil
	}
	primes := [4]int{2, 3, 5, 7}
	m := ndCheckPoints
	params := make([][]float64, m)
	exact := make([][]float64, m)
	for j := range params {
		params[j] = make([]float64, dims)
		for i := range params[j] {
			params[j][i] = c.value(i, halton(j+1, primes[i])*float64(c.points-1))
		}
		exact[j] = make([]float64, size)
	}
	type scratch struct {
		ws *models.Workspace
		p  *models.Prediction
	}
	scr := make([]*scratch, max(workers, 1))
	if err := parallel.For(ctx, m, workers, func(w, j int) error {
		if scr[w] == nil {
			scr[w] = &scratch{c.listener.NewWorkspace(), c.listener.NewPrediction()}
		}
		c.exactInto(params[j], exact[j], scr[w].ws, scr[w].p)
		return nil
	}); err != nil {
		return err
	}
	type bufs struct{ interp, a, b, face []float64 }
	buf := make([]*bufs, max(workers, 1))
	// classified[j] is set once point j has been tested for a jump (the
	// test is the costly part, and a point's jump does not move);
	// jump[j] is its answer.
	classified, jump := make([]bool, m), make([]bool, m)
	res := &c.refine
	type split struct {
		dim int
		at  float64 // grid units
		err float64
	}
	for round := 0; ; round++ {
		// Every point in parallel, then the decisions in point order.
		errs := make([]float64, m)
		found := make([][]split, m)
		err := parallel.For(ctx, m, workers, func(w, j int) error {
			if jump[j] {
				return nil
			}
			if scr[w] == nil {
				scr[w] = &scratch{c.listener.NewWorkspace(), c.listener.NewPrediction()}
			}
			if buf[w] == nil {
				buf[w] = &bufs{make([]float64, size), make([]float64, size), make([]float64, size), make([]float64, dims)}
			}
			ws, pr, bb := scr[w].ws, scr[w].p, buf[w]
			c.Interpolate(params[j], bb.interp, ws)
			e := typ.effect(exact[j], bb.interp)
			if e <= gridTolerance {
				return nil
			}
			if !classified[j] {
				classified[j] = true
				if _, ok := c.jumpNear(params[j], exact[j], typ, ws); ok {
					jump[j] = true
					return nil
				}
			}
			errs[j] = e
			// Each axis's share: linear along axis i alone.
			var mine []split
			for i := 0; i < dims; i++ {
				g := c.coord(i, params[j][i])
				ax := c.axes[i]
				k := max(0, min(sort.SearchFloat64s(ax, g)-1, len(ax)-2))
				if ax[k+1]-ax[k] <= ndMinWidth {
					continue
				}
				t := (g - ax[k]) / (ax[k+1] - ax[k])
				copy(bb.face, params[j])
				bb.face[i] = c.value(i, ax[k])
				c.exactInto(bb.face, bb.a, ws, pr)
				bb.face[i] = c.value(i, ax[k+1])
				c.exactInto(bb.face, bb.b, ws, pr)
				for q := range bb.interp {
					bb.interp[q] = (1-t)*bb.a[q] + t*bb.b[q]
				}
				mine = append(mine, split{i, 0.5 * (ax[k] + ax[k+1]), typ.effect(exact[j], bb.interp)})
			}
			// The axes over tolerance, or else the worst one alone; each
			// ranked by the point's whole error.
			worstAxis, over := 0, false
			for q, sp := range mine {
				if sp.err > mine[worstAxis].err {
					worstAxis = q
				}
				if sp.err > gridTolerance {
					found[j] = append(found[j], split{sp.dim, sp.at, e})
					over = true
				}
			}
			if !over && len(mine) > 0 {
				found[j] = []split{{mine[worstAxis].dim, mine[worstAxis].at, e}}
			}
			return nil
		})
		if err != nil {
			return err
		}
		var splits []split
		worst := 0.0
		for j := range found {
			worst = math.Max(worst, errs[j])
			splits = append(splits, found[j]...)
		}
		res.Worst = worst
		if len(splits) == 0 || round == ndRounds {
			res.Exhausted = res.Exhausted || len(splits) > 0
			return nil
		}
		// The worst first; one line per axis position; within the budget.
		sort.SliceStable(splits, func(x, y int) bool { return splits[x].err > splits[y].err })
		newAt := make([][]float64, dims)
		lens := make([]int, dims)
		for i := range lens {
			lens[i] = len(c.axes[i])
		}
		for _, sp := range splits {
			if slices.Contains(newAt[sp.dim], sp.at) {
				continue
			}
			cost := 1
			for i := range lens {
				if i != sp.dim {
					cost *= lens[i]
				}
			}
			if res.Added+cost > budget {
				res.Exhausted = true
				continue
			}
			res.Added += cost
			lens[sp.dim]++
			newAt[sp.dim] = append(newAt[sp.dim], sp.at)
		}
		if !anyNonEmpty(newAt) {
			return nil
		}
		if err := c.insertLines(ctx, newAt, workers); err != nil {
			return err
		}
	}
}

func anyNonEmpty(s [][]float64) bool {
	for _, x := range s {
		if len(x) > 0 {
			return true
		}
	}
	return false
}

// insertLines adds node positions (grid units) to the axes and computes
// the exact predictions of every new node; existing nodes keep theirs.
func (c *PredictionGrid) insertLines(ctx context.Context, newAt [][]float64, workers int) error {
	dims := len(c.axes)
	size := c.lay.size()
	oldAxes, oldStrides, oldValues := c.axes, c.strides, c.values
	// For each axis, the old index of every new position (−1 when new).
	from := make([][]int, dims)
	axes := make([][]float64, dims)
	for i := range axes {
		ax := append(append([]float64(nil), oldAxes[i]...), newAt[i]...)
		sort.Float64s(ax)
		axes[i] = ax
		from[i] = make([]int, len(ax))
		for k, g := range ax {
			from[i][k] = -1
			if o := sort.SearchFloat64s(oldAxes[i], g); o < len(oldAxes[i]) && oldAxes[i][o] == g {
				from[i][k] = o
			}
		}
	}
	c.axes = axes
	total := c.setStrides()
	c.values = make([]float64, total*size)
	var fresh []int
	for n := 0; n < total; n++ {
		old := 0
		for i := 0; i < dims; i++ {
			o := from[i][c.axisIndex(n, i)]
			if o < 0 {
				old = -1
				break
			}
			old += o * oldStrides[i]
		}
		if old < 0 {
			fresh = append(fresh, n)
			continue
		}
		copy(c.values[n*size:(n+1)*size], oldValues[old*size:(old+1)*size])
	}
	type scratch struct {
		ws *models.Workspace
		p  *models.Prediction
		x  []float64
	}
	scr := make([]*scratch, max(workers, 1))
	return parallel.For(ctx, len(fresh), workers, func(w, k int) error {
		if scr[w] == nil {
			scr[w] = &scratch{c.listener.NewWorkspace(), c.listener.NewPrediction(), make([]float64, dims)}
		}
		s, n := scr[w], fresh[k]
		c.nodeParams(n, s.x)
		c.exactInto(s.x, c.values[n*size:(n+1)*size], s.ws, s.p)
		return nil
	})
}
