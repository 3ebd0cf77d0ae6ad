package recovery

import (
	"math"
	"sort"
)

// nmSettings are the stopping rules of one Nelder–Mead run.
type nmSettings struct {
	Size     float64 // initial simplex: x0 and x0 + Size·e_i
	MaxEvals int     // evaluation limit
	Absolute float64 // an improvement of the best value smaller than this...
	Relative float64 // ...plus this times |best| does not count
	Stall    int     // iterations without a counted improvement that mean convergence
	Spread   float64 // converged at once when all vertices' values lie within this
}

// nmResult is where a run ended and why.
type nmResult struct {
	X         []float64
	F         float64
	Evals     int
	Converged bool
	Status    string // "converged", "evaluation limit" or "no finite value"
}

// nelderMead minimises f from x0 by the Nelder–Mead simplex method (Nelder
// & Mead 1965, Computer Journal 7:308) with the dimension-adaptive
// coefficients of Gao & Han 2012 (Computational Optimization and
// Applications 51:259; citation from memory), gonum's defaults:
//
//	reflection 1, expansion 1 + 2/n, contraction 0.75 − 1/(2n), shrink 1 − 1/n
//	(n = 1: expansion 2, contraction 0.5, shrink 0.5)
//
// It is written here rather than taken from gonum's optimize because that
// package hands every evaluation between goroutines over channels, which
// costs more than one of our likelihood evaluations on the prediction grid
// (about 2 µs).
// Non-finite values count as +Inf. The run is deterministic.
func nelderMead(f func([]float64) float64, x0 []float64, set nmSettings) nmResult {
	n := len(x0)
	if n == 0 {
		panic("recovery: nelderMead: empty starting point")
	}
	nf := float64(n)
	rho, chi, gamma, sigma := 1.0, 1+2/nf, 0.75-1/(2*nf), 1-1/nf
	if n == 1 {
		// As gonum: the adaptive formulas degenerate in one dimension
		// (shrink 1 − 1/n = 0 would collapse the simplex).
		chi, gamma, sigma = 2, 0.5, 0.5
	}
	evals := 0
	eval := func(x []float64) float64 {
		evals++
		v := f(x)
		if math.IsNaN(v) || math.IsInf(v, -1) {
			return math.Inf(1)
		}
		return v
	}
	verts := make([][]float64, n+1)
	vals := make([]float64, n+1)
	for i := range verts {
		verts[i] = append([]float64(nil), x0...)
		if i > 0 {
			verts[i][i-1] += set.Size
		}
		vals[i] = eval(verts[i])
	}
	order := make([]int, n+1)
	centroid := make([]float64, n)
	xr, xe, xc := make([]float64, n), make([]float64, n), make([]float64, n)
	along := func(dst []float64, t float64, from, to []float64) {
		// dst = from + t·(to − from)
		for j := range dst {
			dst[j] = from[j] + t*(to[j]-from[j])
		}
	}
	best := math.Inf(1)
	stall := 0
	status, converged := "evaluation limit", false
	for evals < set.MaxEvals {
		for i := range order {
			order[i] = i
		}
		sort.SliceStable(order, func(a, b int) bool { return vals[order[a]] < vals[order[b]] })
		b, w, sw := order[0], order[n], order[n-1]
		if fb := vals[b]; fb < best && best-fb > set.Relative*math.Abs(fb)+set.Absolute {
			best, stall = fb, 0
		} else {
			stall++
		}
		if stall >= set.Stall || (!math.IsInf(vals[w], 1) && vals[w]-vals[b] <= set.Spread) {
			status, converged = "converged", true
			break
		}
		for j := range centroid {
			centroid[j] = 0
		}
		for _, i := range order[:n] {
			for j, v := range verts[i] {
				centroid[j] += v / nf
			}
		}
		along(xr, -rho, centroid, verts[w])
		fr := eval(xr)
		switch {
		case fr < vals[b]:
			along(xe, -rho*chi, centroid, verts[w])
			if fe := eval(xe); fe < fr {
				copy(verts[w], xe)
				vals[w] = fe
			} else {
				copy(verts[w], xr)
				vals[w] = fr
			}
		case fr < vals[sw]:
			copy(verts[w], xr)
			vals[w] = fr
		default:
			var fc float64
			if fr < vals[w] {
				along(xc, gamma, centroid, xr) // outside contraction
				fc = eval(xc)
				if fc <= fr {
					copy(verts[w], xc)
					vals[w] = fc
					continue
				}
			} else {
				along(xc, gamma, centroid, verts[w]) // inside contraction
				fc = eval(xc)
				if fc < vals[w] {
					copy(verts[w], xc)
					vals[w] = fc
					continue
				}
			}
			for _, i := range order[1:] { // shrink towards the best vertex
				along(verts[i], sigma, verts[b], verts[i])
				vals[i] = eval(verts[i])
			}
		}
	}
	bi := 0
	for i := range vals {
		if vals[i] < vals[bi] {
			bi = i
		}
	}
	if math.IsInf(vals[bi], 1) {
		status, converged = "no finite value", false
	}
	return nmResult{X: append([]float64(nil), verts[bi]...), F: vals[bi], Evals: evals, Converged: converged, Status: status}
}
