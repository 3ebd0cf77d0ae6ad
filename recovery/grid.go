package recovery

import (
	"context"
	"discrimen/internal/parallel"
	"fmt"
	"math"
	"sort"

	"discrimen/models"
)

// gridPoints is the number of grid nodes per free parameter, by the number
// of free parameters: the grid costs points^dims exact predictions.
var gridPoints = map[int]int{1: 129, 2: 41, 3: 17, 4: 9}

// PredictionGrid holds one candidate's exact predictions on a grid over its free
// parameters, for one design (model.md §5: predictions depend only on the
// candidate's parameters). Interpolation is multilinear in the generating
// scale of each parameter (logarithmic for loguniform ones). A PredictionGrid is
// read-only after BuildPredictionGrid and safe for concurrent use.
type PredictionGrid struct {
	Hypothesis models.Hypothesis
	Names      []string
	design     *models.Design
	listener   *models.Listener
	lay        layout
	lo, hi     []float64
	logScale   []bool
	points     int         // initial nodes per parameter (uniform in grid units)
	axes       [][]float64 // node positions per parameter, in grid units [0, points−1], ascending
	values     []float64   // node-major: node index × lay.size()
	strides    []int
	// refine records what refinement did: nodes added, cells still over
	// tolerance at the narrowest width (jumps), and their positions.
	refine refineResult
}

// BuildPredictionGrid computes the grid of exact predictions with the given number
// of goroutines. A candidate with more than four free parameters gets no
// grid (Interpolate then computes exact predictions).
func BuildPredictionGrid(ctx context.Context, l *models.Listener, d *models.Design, h models.Hypothesis, workers int) (*PredictionGrid, error) {
	names := h.FreeParams()
	c := &PredictionGrid{Hypothesis: h, Names: names, design: d, listener: l}
	pr := l.NewPrediction()
	c.lay = newLayoutFor(l, pr)
	for _, n := range names {
		p := h.Params[n]
		c.lo = append(c.lo, *p.Min)
		c.hi = append(c.hi, *p.Max)
		c.logScale = append(c.logScale, p.Generate != nil && p.Generate.Dist == "loguniform")
	}
	dims := len(names)
	c.points = gridPoints[dims]
	if dims == 0 {
		c.points = 1
	}
	if c.points == 0 {
		return c, nil
	}
	c.axes = make([][]float64, dims)
	for i := range c.axes {
		c.axes[i] = make([]float64, c.points)
		for k := range c.axes[i] {
			c.axes[i][k] = float64(k)
		}
	}
	total := c.setStrides()
	size := c.lay.size()
	c.values = make([]float64, total*size)
	type scratch struct {
		ws *models.Workspace
		p  *models.Prediction
		x  []float64
	}
	scr := make([]*scratch, max(workers, 1))
	err := parallel.For(ctx, total, workers, func(w, node int) error {
		sc := scr[w]
		if sc == nil {
			sc = &scratch{ws: l.NewWorkspace(), p: l.NewPrediction(), x: make([]float64, dims)}
			scr[w] = sc
		}
		c.nodeParams(node, sc.x)
		prec, err := models.NewPrecision(h, d, sc.x)
		if err != nil {
			return err
		}
		l.Predict(prec, sc.p, sc.ws)
		c.lay.flatten(sc.p, c.values[node*size:(node+1)*size])
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("recovery: prediction grid for %s: %w", h.Name, err)
	}
	refine := c.refine1D
	if dims > 1 {
		refine = c.refineND
	}
	if err := refine(ctx, workers); err != nil {
		return nil, fmt.Errorf("recovery: refining the prediction grid for %s: %w", h.Name, err)
	}
	return c, nil
}

// setStrides computes the node-major strides from the axes and returns the
// number of nodes.
func (c *PredictionGrid) setStrides() int {
	total := 1
	c.strides = make([]int, len(c.axes))
	for i := len(c.axes) - 1; i >= 0; i-- {
		c.strides[i] = total
		total *= len(c.axes[i])
	}
	return total
}

// axisIndex is node's index along parameter i.
func (c *PredictionGrid) axisIndex(node, i int) int { return (node / c.strides[i]) % len(c.axes[i]) }

// Nodes returns the number of grid nodes (0 without a grid).
func (c *PredictionGrid) Nodes() int { return len(c.values) / max(1, c.lay.size()) }

// coord maps a parameter value to grid units in [0, points−1].
func (c *PredictionGrid) coord(i int, x float64) float64 {
	var u float64
	if c.logScale[i] {
		u = (math.Log(x) - math.Log(c.lo[i])) / (math.Log(c.hi[i]) - math.Log(c.lo[i]))
	} else {
		u = (x - c.lo[i]) / (c.hi[i] - c.lo[i])
	}
	return math.Max(0, math.Min(1, u)) * float64(c.points-1)
}

// value maps grid units back to the parameter value.
func (c *PredictionGrid) value(i int, g float64) float64 {
	u := g / float64(c.points-1)
	if c.logScale[i] {
		return math.Exp(math.Log(c.lo[i]) + u*(math.Log(c.hi[i])-math.Log(c.lo[i])))
	}
	return c.lo[i] + u*(c.hi[i]-c.lo[i])
}

func (c *PredictionGrid) nodeParams(node int, x []float64) {
	for i := range x {
		x[i] = c.value(i, c.axes[i][c.axisIndex(node, i)])
	}
}

// node returns the stored prediction vector of one grid node.
func (c *PredictionGrid) node(n int) []float64 {
	s := c.lay.size()
	return c.values[n*s : (n+1)*s]
}

// Interpolate writes the multilinear interpolation of the grid at x into
// dst; without a grid it computes the exact prediction (ws may be nil).
func (c *PredictionGrid) Interpolate(x, dst []float64, ws *models.Workspace) {
	dims := len(c.Names)
	if c.points == 0 {
		c.Exact(x, dst, ws)
		return
	}
	size := c.lay.size()
	if dims == 0 {
		copy(dst, c.values[:size])
		return
	}
	var base [4]int
	var frac [4]float64
	for i := 0; i < dims; i++ {
		g := c.coord(i, x[i])
		ax := c.axes[i]
		k := sort.SearchFloat64s(ax, g) - 1 // last node at or below g
		k = max(0, min(k, len(ax)-2))
		base[i], frac[i] = k, math.Max(0, math.Min(1, (g-ax[k])/(ax[k+1]-ax[k])))
	}
	for j := range dst[:size] {
		dst[j] = 0
	}
	for corner := 0; corner < 1<<dims; corner++ {
		w, idx := 1.0, 0
		for i := 0; i < dims; i++ {
			if corner>>i&1 == 1 {
				w *= frac[i]
				idx += (base[i] + 1) * c.strides[i]
			} else {
				w *= 1 - frac[i]
				idx += base[i] * c.strides[i]
			}
		}
		if w == 0 {
			continue
		}
		v := c.values[idx*size : (idx+1)*size]
		for j, x := range v {
			dst[j] += w * x
		}
	}
}

// Exact writes the exact prediction at x into dst.
func (c *PredictionGrid) Exact(x, dst []float64, ws *models.Workspace) {
	c.exactInto(x, dst, ws, c.listener.NewPrediction())
}

// exactInto is Exact with the caller's prediction scratch, for hot loops.
func (c *PredictionGrid) exactInto(x, dst []float64, ws *models.Workspace, p *models.Prediction) {
	prec, err := models.NewPrecision(c.Hypothesis, c.design, x)
	if err != nil {
		panic(fmt.Sprintf("recovery: candidate %s: %v", c.Hypothesis.Name, err))
	}
	c.listener.Predict(prec, p, ws)
	c.lay.flatten(p, dst)
}

// jumpSteps is the number of bisections jumpNear makes: it narrows a
// segment to 2^−jumpSteps of its length (1/256).
const jumpSteps = 8

// jumpNear decides whether the interpolation error at x (exact
// prediction px) comes from a jump of the predictions: along the segment
// from the nearest grid node to x it bisects towards the half whose
// midpoint linear interpolation misses more, jumpSteps times; if the
// miss over the last, 256 times shorter, segment still costs more than
// gridTolerance of ln L for a typical dataset, the predictions jump
// there (a smooth function's miss shrinks with the square of the length).
// It returns the jump's parameter values.
func (c *PredictionGrid) jumpNear(x, px []float64, typ typicalData, ws *models.Workspace) ([]float64, bool) {
	dims := len(x)
	// The corners of x's cell, nearest first: a jump inside the cell lies
	// between x and at least one of them.
	base := make([]int, dims)
	frac := make([]float64, dims)
	for i := range base {
		g := c.coord(i, x[i])
		ax := c.axes[i]
		k := max(0, min(sort.SearchFloat64s(ax, g)-1, len(ax)-2))
		base[i], frac[i] = k, (g-ax[k])/(ax[k+1]-ax[k])
	}
	type corner struct {
		at   []float64
		dist float64
	}
	corners := make([]corner, 1<<dims)
	for m := range corners {
		at := make([]float64, dims)
		d := 0.0
		for i := range at {
			k, f := base[i], frac[i]
			if m>>i&1 == 1 {
				k, f = k+1, 1-f
			}
			at[i] = c.value(i, c.axes[i][k])
			d += f * f
		}
		corners[m] = corner{at, d}
	}
	sort.SliceStable(corners, func(a, b int) bool { return corners[a].dist < corners[b].dist })
	for _, cn := range corners {
		if at, ok := c.jumpTowards(cn.at, x, px, typ, ws); ok {
			return at, true
		}
	}
	return nil, false
}

// jumpTowards bisects the segment from the node lo to x (exact
// prediction px) as jumpNear describes.
func (c *PredictionGrid) jumpTowards(node, x, px []float64, typ typicalData, ws *models.Workspace) ([]float64, bool) {
	dims := len(x)
	size := c.lay.size()
	lo := append([]float64(nil), node...)
	hi := append([]float64(nil), x...)
	plo, phi := make([]float64, size), append([]float64(nil), px...)
	c.Exact(lo, plo, ws)
	mid := make([]float64, dims)
	pm, lin := make([]float64, size), make([]float64, size)
	miss := 0.0
	for range jumpSteps {
		for i := range mid {
			mid[i] = 0.5 * (lo[i] + hi[i])
		}
		c.Exact(mid, pm, ws)
		// The midpoint's miss against each half's chord decides which
		// half holds the larger change.
		for j := range lin {
			lin[j] = 0.5 * (plo[j] + phi[j])
		}
		miss = typ.effect(pm, lin)
		left := typ.effect(plo, pm)
		right := typ.effect(pm, phi)
		if math.Max(left, right) <= gridTolerance {
			// A jump over tolerance would show in the half that holds
			// it: neither half changes that much, so there is none.
			return nil, false
		}
		if left >= right {
			copy(hi, mid)
			copy(phi, pm)
		} else {
			copy(lo, mid)
			copy(plo, pm)
		}
	}
	if miss <= gridTolerance {
		return nil, false
	}
	at := make([]float64, dims)
	for i := range at {
		at[i] = 0.5 * (lo[i] + hi[i])
	}
	return at, true
}

// SurrogateError is the interpolation error of one candidate's grid against
// exact predictions at random points (model.md §5).
type SurrogateError struct {
	Hypothesis   string  `json:"hypothesis"`
	Points       int     `json:"points"`
	GridNodes    int     `json:"grid_nodes"`
	MaxRTms      float64 `json:"max_rt_ms"`
	MedianRTms   float64 `json:"median_rt_ms"`
	MaxAccuracy  float64 `json:"max_accuracy"`
	MaxNeural    float64 `json:"max_neural"`
	MedianNeural float64 `json:"median_neural"`
	// LogLikError is the largest effect of interpolation error on ln L for
	// a typical dataset of the design, in ln units; OverTolerance is set
	// when it exceeds the grid tolerance even after refinement.
	LogLikError   float64 `json:"loglik_error"`
	OverTolerance bool    `json:"over_tolerance"`
	// SmoothError is, for grids of more parameters, the largest effect on
	// ln L at a checked point that is not at a jump: the interpolation
	// error a finer grid would close. OverTolerance is judged on it.
	SmoothError float64 `json:"smooth_error,omitempty"`
	// Jumps is set when the exact predictions themselves jump between
	// neighbouring grid nodes (an invalid trial flipping between a
	// recovered and a misdirected report), where no grid closes the gap.
	Jumps bool `json:"jumps"`
	// JumpsAt are the parameter values of the jumps (one-parameter grids).
	JumpsAt []float64 `json:"jumps_at"`
	// JumpPoints are, for grids of more parameters, the jumps located from
	// the random points whose error was over tolerance (jumpNear), each a
	// value per parameter.
	JumpPoints []map[string]float64 `json:"jump_points,omitempty"`
}

// MeasureError compares interpolated with exact predictions at n points
// drawn uniformly (in grid units) from the seeded stream.
func (c *PredictionGrid) MeasureError(seed uint64, n int) SurrogateError {
	e := SurrogateError{Hypothesis: c.Hypothesis.Name, Points: n, GridNodes: c.Nodes(), JumpsAt: []float64{}}
	dims := len(c.Names)
	if dims == 0 || c.points == 0 {
		e.Points = 0
		return e
	}
	r := streamRand(seed, "surrogate", c.design.Name, c.Hypothesis.Name)
	size := c.lay.size()
	a, b := make([]float64, size), make([]float64, size)
	ws := c.listener.NewWorkspace()
	x := make([]float64, dims)
	var rtErr, nErr []float64
	typ := newTypicalData(c.design, c.lay)
	var jumps []map[string]float64 // multi-parameter grids: located jumps
	smooth := 0.0                  // the largest error over tolerance not at a jump
	for range n {
		for i := range x {
			x[i] = c.value(i, r.Float64()*float64(c.points-1))
		}
		c.Interpolate(x, a, ws)
		c.Exact(x, b, ws)
		rt, acc, ne := 0.0, 0.0, 0.0
		for cc := 0; cc < c.lay.C; cc++ {
			rt = math.Max(rt, math.Max(math.Abs(a[c.lay.vRT(cc)]-b[c.lay.vRT(cc)]), math.Abs(a[c.lay.iRT(cc)]-b[c.lay.iRT(cc)])))
			for _, j := range []int{c.lay.vAcc(cc), c.lay.iAcc(cc), c.lay.iMis(cc)} {
				acc = math.Max(acc, math.Abs(a[j]-b[j]))
			}
		}
		for bb := 0; bb < c.lay.neural(); bb++ {
			ne = math.Max(ne, math.Abs(a[c.lay.eeg(bb)]-b[c.lay.eeg(bb)]))
		}
		eff := typ.effect(b, a)
		if dims > 1 && eff > gridTolerance {
			// A larger grid is not refined: a point over tolerance is
			// either poor interpolation or a jump of the predictions,
			// which no grid closes; jumpNear tells them apart.
			if at, ok := c.jumpNear(x, b, typ, ws); ok {
				pt := map[string]float64{}
				for i, name := range c.Names {
					pt[name] = at[i]
				}
				jumps = append(jumps, pt)
			} else {
				smooth = math.Max(smooth, eff)
			}
		}
		e.LogLikError = math.Max(e.LogLikError, eff)
		rtErr = append(rtErr, rt)
		nErr = append(nErr, ne)
		e.MaxRTms = math.Max(e.MaxRTms, rt)
		e.MaxAccuracy = math.Max(e.MaxAccuracy, acc)
		e.MaxNeural = math.Max(e.MaxNeural, ne)
	}
	e.MedianRTms = median(rtErr)
	e.MedianNeural = median(nErr)
	e.Jumps = len(c.refine.Jumps) > 0
	e.JumpsAt = append([]float64{}, c.refine.Jumps...)
	e.LogLikError = math.Max(e.LogLikError, c.refine.Worst)
	// A one-parameter grid is refined until every cell is within
	// tolerance but at a jump, where no grid can be: it is over tolerance
	// only when the refinement ran out of budget. A larger grid is not
	// refined; the random points decide.
	if dims == 1 {
		e.OverTolerance = c.refine.Exhausted && c.refine.Worst > gridTolerance
	} else {
		// Over tolerance where the error is not a jump's; a grid whose
		// points over tolerance all sit at jumps is reported as jumping.
		e.SmoothError = smooth
		e.OverTolerance = smooth > gridTolerance
		e.Jumps = len(jumps) > 0
		e.JumpPoints = jumps
	}
	return e
}
