package recovery

import (
	"math"
	"sort"
)

// profileThreshold is χ²₁(0.95)/2: a 95% profile-likelihood interval holds
// the values whose profile −ln L lies within it of the minimum (Venzon &
// Moolgavkar 1988, Applied Statistics 37:87; Pawitan 2001, "In All
// Likelihood", ch. 2-3). χ²₁(0.95) = 3.8415 (any χ² table).
const profileThreshold = 1.9207

// Interval is a 95% profile-likelihood interval of one parameter: the
// values whose profile −ln L lies within profileThreshold of the minimum.
// Low and High are its outer ends; OpenLow (OpenHigh) is set where the set
// reaches the parameter's range, so the range's end is only where the
// search stopped looking; Pieces lists the connected parts, in order, when
// the set is not connected (one piece otherwise). ExactLow and ExactHigh
// are the rise of the exact −ln L (exact predictions, measurement terms
// re-fitted) at the ends over the fit's exact minimum, which should be
// near profileThreshold where the grid is good; NaN at an open end.
type Interval struct {
	Low       NullFloat      `json:"low"`
	High      NullFloat      `json:"high"`
	OpenLow   bool           `json:"open_low"`
	OpenHigh  bool           `json:"open_high"`
	Pieces    [][2]NullFloat `json:"pieces"`
	ExactLow  NullFloat      `json:"exact_rise_low"`
	ExactHigh NullFloat      `json:"exact_rise_high"`
}

// NoInterval is the interval of a parameter that has none (a failed fit, a
// candidate without a grid).
func NoInterval() Interval {
	nan := NullFloat(math.NaN())
	return Interval{Low: nan, High: nan, ExactLow: nan, ExactHigh: nan, Pieces: [][2]NullFloat{}}
}

// Contains reports whether v lies in one of the pieces.
func (iv Interval) Contains(v float64) bool {
	for _, p := range iv.Pieces {
		if v >= float64(p[0]) && v <= float64(p[1]) {
			return true
		}
	}
	return false
}

// profileIntervals computes the 95% profile interval of each free
// hypothesis parameter of a fit at natural θ (exact minimum nllExact).
//
// The profile of parameter j at grid value a is
//
//	p_j(a) = min over the other hypothesis parameters (grid nodes with
//	         coordinate j = a) and the measurement terms of −ln L,
//
// with the linear measurement terms profiled in closed form, lapse and
// eeg_ar first held at the fit's values over the whole grid and then
// re-fitted at each grid value of j near the set, on the grid's
// predictions. The set {a : p_j(a) ≤ min p_j + profileThreshold} is read
// off the grid values, its ends placed by linear interpolation of p_j
// between the last value inside and the first outside, and re-scored with
// exact predictions. The fit's own estimate is always inside: if the grid
// puts it outside (an interpolation error), the nearest piece is widened
// to it.
func (f *fitter) profileIntervals(s *sufficientStats, sp space, theta []float64, nllExact float64) []Interval {
	g := f.grid
	D := sp.dimsHyp
	out := make([]Interval, D)
	for j := range out {
		out[j] = NoInterval()
	}
	if D == 0 || g.points < 2 {
		return out
	}
	_, lapse, ar := sp.split(theta)
	nodes := g.Nodes()
	table := make([]float64, nodes)
	for n := 0; n < nodes; n++ {
		v := logLik(s, g.lay, g.node(n), lapse, ar, nil)
		if math.IsNaN(v) {
			v = math.Inf(1)
		}
		table[n] = v
	}
	nuis := append([]float64(nil), theta...)
	for j := 0; j < D; j++ {
		P := len(g.axes[j])
		prof := make([]float64, P)
		arg := make([]int, P)
		for a := range prof {
			prof[a], arg[a] = math.Inf(1), -1
		}
		for n := 0; n < nodes; n++ {
			a := g.axisIndex(n, j)
			if table[n] < prof[a] {
				prof[a], arg[a] = table[n], n
			}
		}
		m := math.Inf(1)
		for _, v := range prof {
			m = math.Min(m, v)
		}
		// Re-fit the searched measurement terms where it can move the
		// set's edge: at the minimum, then at each value just outside the
		// set, walking outwards while the re-fit brings it inside. Values
		// inside stay inside (a re-fit only lowers −ln L).
		if sp.lapse >= 0 || sp.ar >= 0 {
			refit := make([]bool, P)
			do := func(a int) {
				if a < 0 || a >= P || refit[a] || arg[a] < 0 {
					return
				}
				refit[a] = true
				copy(f.pred, g.node(arg[a]))
				copy(nuis, theta)
				prof[a] = math.Min(prof[a], f.nuisanceSearch(s, sp, nuis))
			}
			lowest := 0
			for a := range prof {
				if prof[a] < prof[lowest] {
					lowest = a
				}
			}
			do(lowest)
			m = math.Min(m, prof[lowest])
			for a := 0; a < P; a++ {
				if prof[a] > m+profileThreshold {
					continue
				}
				for _, dir := range []int{-1, 1} {
					for b := a + dir; b >= 0 && b < P && prof[b] > m+profileThreshold && !refit[b]; b += dir {
						do(b)
						if prof[b] > m+profileThreshold {
							break
						}
					}
				}
			}
		}
		if math.IsInf(m, 0) {
			continue
		}
		out[j] = f.readInterval(s, sp, theta, nllExact, j, prof, arg, m)
	}
	return out
}

// readInterval turns one parameter's profile on the grid values into its
// interval.
func (f *fitter) readInterval(s *sufficientStats, sp space, theta []float64, nllExact float64, j int, prof []float64, arg []int, m float64) Interval {
	g := f.grid
	P := len(prof)
	cut := m + profileThreshold
	in := func(a int) bool { return prof[a] <= cut }
	// The crossing between grid values a (inside) and b (outside).
	cross := func(a, b int) float64 {
		t := (cut - prof[a]) / (prof[b] - prof[a])
		if math.IsNaN(t) || math.IsInf(prof[b], 0) {
			t = 0.5
		}
		t = math.Max(0, math.Min(1, t))
		ga, gb := g.axes[j][a], g.axes[j][b]
		return g.value(j, ga+t*(gb-ga))
	}
	iv := NoInterval()
	var pieces [][2]float64
	for a := 0; a < P; {
		if !in(a) {
			a++
			continue
		}
		b := a
		for b+1 < P && in(b+1) {
			b++
		}
		lo, hi := g.lo[j], g.hi[j]
		if a > 0 {
			lo = cross(a, a-1)
		}
		if b < P-1 {
			hi = cross(b, b+1)
		}
		pieces = append(pieces, [2]float64{lo, hi})
		a = b + 1
	}
	if len(pieces) == 0 {
		return iv
	}
	est := theta[j]
	inside := false
	for _, p := range pieces {
		inside = inside || (est >= p[0] && est <= p[1])
	}
	if !inside {
		k, best := 0, math.Inf(1)
		for i, p := range pieces {
			d := math.Min(math.Abs(est-p[0]), math.Abs(est-p[1]))
			if d < best {
				k, best = i, d
			}
		}
		pieces[k][0], pieces[k][1] = math.Min(pieces[k][0], est), math.Max(pieces[k][1], est)
		// Widening may join neighbours.
		merged := pieces[:1]
		for _, p := range pieces[1:] {
			last := &merged[len(merged)-1]
			if p[0] <= last[1] {
				last[1] = math.Max(last[1], p[1])
				continue
			}
			merged = append(merged, p)
		}
		pieces = merged
	}
	for _, p := range pieces {
		iv.Pieces = append(iv.Pieces, [2]NullFloat{NullFloat(p[0]), NullFloat(p[1])})
	}
	iv.Low, iv.High = NullFloat(pieces[0][0]), NullFloat(pieces[len(pieces)-1][1])
	iv.OpenLow = in(0)
	iv.OpenHigh = in(P - 1)
	endAt := func(v float64, a int) NullFloat {
		// The other hypothesis parameters at the profile's node nearest
		// the end, parameter j at the end itself.
		x := make([]float64, sp.totalDims)
		copy(x, theta)
		if a >= 0 && arg[a] >= 0 {
			g.nodeParams(arg[a], x[:sp.dimsHyp])
		}
		x[j] = v
		g.exactInto(x[:sp.dimsHyp], f.pred, f.ws, f.pr)
		return NullFloat(f.nuisanceSearch(s, sp, x) - nllExact)
	}
	if !iv.OpenLow {
		iv.ExactLow = endAt(float64(iv.Low), nearestValue(g, j, float64(iv.Low)))
	}
	if !iv.OpenHigh {
		iv.ExactHigh = endAt(float64(iv.High), nearestValue(g, j, float64(iv.High)))
	}
	return iv
}

// nearestValue is the index of the node of parameter j nearest to v.
func nearestValue(g *PredictionGrid, j int, v float64) int {
	u, ax := g.coord(j, v), g.axes[j]
	k := sort.SearchFloat64s(ax, u)
	if k == len(ax) || (k > 0 && u-ax[k-1] < ax[k]-u) {
		k--
	}
	return k
}
