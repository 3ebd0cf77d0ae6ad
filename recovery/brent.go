package recovery

import "math"

// brentGolden is (3 − √5)/2, the golden-section fraction.
var brentGolden = 0.5 * (3 - math.Sqrt(5))

// brentMin minimises f on [a, b] from the point x (a ≤ x ≤ b) whose value
// fx is known, by Brent's method: successive parabolic interpolation
// through the three best points, safeguarded by golden-section steps when
// a parabola would step outside the bracket or too far (Brent 1973,
// "Algorithms for Minimization without Derivatives", ch. 5, procedure
// localmin). It stops when the bracket around the best point is within
// 2·(√ε·|x| + tol), ε the float64 machine epsilon, or after maxEvals
// evaluations, and returns the best point, its value and the evaluations
// spent. It finds a local minimum; on a function with kinks the golden
// steps keep it converging. With flatWidth > 0 it also stops once the
// bracket is narrower than flatWidth and the last flatEvals evaluations
// lowered the best value by less than flat in all: there the values say
// more is not worth having, which a tolerance on x alone cannot.
func brentMin(f func(float64) float64, a, b, x, fx, tol float64, maxEvals int, flatWidth, flat float64, flatEvals int) (float64, float64, int) {
	return brentMinFrom(f, a, b, x, fx, x, fx, x, fx, tol, maxEvals, flatWidth, flat, flatEvals)
}

// brentMinFrom is brentMin with two more points already known, w (the
// second best) and v (the third), for its first parabola; brentMin starts
// with v = w = x.
func brentMinFrom(f func(float64) float64, a, b, x, fx, w, fw, v, fv, tol float64, maxEvals int, flatWidth, flat float64, flatEvals int) (float64, float64, int) {
	const sqrtEps = 1.4901161193847656e-08
	var d, e float64
	if w != x {
		// A parabola through known points is tried at once.
		e = 2 * (b - a)
	}
	evals := 0
	hist := []float64{fx}
	for evals < maxEvals {
		if flatWidth > 0 && b-a < flatWidth && len(hist) > flatEvals && hist[len(hist)-1-flatEvals]-fx < flat {
			break
		}
		m := 0.5 * (a + b)
		tol1 := sqrtEps*math.Abs(x) + tol
		tol2 := 2 * tol1
		if math.Abs(x-m) <= tol2-0.5*(b-a) {
			break
		}
		var p, q, r float64
		if math.Abs(e) > tol1 {
			r = (x - w) * (fx - fv)
			q = (x - v) * (fx - fw)
			p = (x-v)*q - (x-w)*r
			q = 2 * (q - r)
			if q > 0 {
				p = -p
			} else {
				q = -q
			}
			r, e = e, d
		}
		if math.Abs(p) < math.Abs(0.5*q*r) && p > q*(a-x) && p < q*(b-x) {
			d = p / q
			if u := x + d; u-a < tol2 || b-u < tol2 {
				d = math.Copysign(tol1, m-x)
			}
		} else {
			if x < m {
				e = b - x
			} else {
				e = a - x
			}
			d = brentGolden * e
		}
		u := x + d
		if math.Abs(d) < tol1 {
			u = x + math.Copysign(tol1, d)
		}
		fu := f(u)
		evals++
		hist = append(hist, math.Min(fx, fu))
		if fu <= fx {
			if u < x {
				b = x
			} else {
				a = x
			}
			v, fv, w, fw, x, fx = w, fw, x, fx, u, fu
			continue
		}
		if u < x {
			a = u
		} else {
			b = u
		}
		if fu <= fw || w == x {
			v, fv, w, fw = w, fw, u, fu
		} else if fu <= fv || v == x || v == w {
			v, fv = u, fu
		}
	}
	return x, fx, evals
}
