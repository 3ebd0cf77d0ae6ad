package models

import (
	"fmt"
	"math"
	"sort"
)

// Precision is a hypothesis's precision time course γ(t), t in seconds
// since cue onset (model.md §2).
type Precision interface {
	At(t float64) float64
}

// FamilyParams lists each family's own parameters (low and high are added
// to every family but constant).
var FamilyParams = map[string][]string{
	"constant":    {"level"},
	"linear":      {"slope"},
	"exponential": {"rate", "horizon"},
	"saturating":  {"tau"},
	"logistic":    {"midpoint", "width"},
	"hazard":      {"weber", "window"},
}

// AllowedParams returns the parameter names a family accepts, sorted.
func AllowedParams(family string) []string {
	own, ok := FamilyParams[family]
	if !ok {
		return nil
	}
	names := append([]string(nil), own...)
	if family != "constant" {
		names = append(names, "low", "high")
	}
	sort.Strings(names)
	return names
}

// ParamDefault returns the default of a parameter the study may omit, and
// whether it has one: low and high default to the agent's gain range,
// horizon to the longest CTI, window to 0.2 s.
func ParamDefault(name string, d *Design) (float64, bool) {
	switch name {
	case "low":
		return d.Agent.GainMin, true
	case "high":
		return d.Agent.GainMax, true
	case "horizon":
		return float64(maxInt(d.CTIms)) / 1000, true
	case "window":
		return 0.2, true
	}
	return 0, false
}

// Resolve returns every parameter of h for design d: free parameters take
// the values in free (ordered as h.FreeParams()), fixed ones their value,
// omitted ones their default.
func (h Hypothesis) Resolve(d *Design, free []float64) (map[string]float64, error) {
	names := h.FreeParams()
	if len(free) != len(names) {
		panic(fmt.Sprintf("models: %d free values for %d free parameters of %s", len(free), len(names), h.Name))
	}
	vals := make(map[string]float64, len(h.Params)+2)
	for _, n := range AllowedParams(h.Family) {
		if v, ok := ParamDefault(n, d); ok {
			vals[n] = v
		}
	}
	for n, p := range h.Params {
		if !p.Free() {
			vals[n] = *p.Value
		}
	}
	for i, n := range names {
		vals[n] = free[i]
	}
	for _, n := range AllowedParams(h.Family) {
		if _, ok := vals[n]; !ok {
			return nil, fmt.Errorf("models: hypothesis %q: parameter %q is required for family %s", h.Name, n, h.Family)
		}
	}
	return vals, nil
}

// NewPrecision builds the precision time course of h for design d at the
// given free parameter values.
func NewPrecision(h Hypothesis, d *Design, free []float64) (Precision, error) {
	v, err := h.Resolve(d, free)
	if err != nil {
		return nil, err
	}
	lo, hi := v["low"], v["high"]
	switch h.Family {
	case "constant":
		return Constant{Level: v["level"]}, nil
	case "linear":
		return Linear{Low: lo, High: hi, Slope: v["slope"]}, nil
	case "exponential":
		return Exponential{Low: lo, High: hi, Rate: v["rate"], Horizon: v["horizon"]}, nil
	case "saturating":
		return Saturating{Low: lo, High: hi, Tau: v["tau"]}, nil
	case "logistic":
		return Logistic{Low: lo, High: hi, Midpoint: v["midpoint"], Width: v["width"]}, nil
	case "hazard":
		return NewHazard(lo, hi, v["weber"], v["window"], d.CTIms, d.CTIWeights), nil
	}
	return nil, fmt.Errorf("models: hypothesis %q: family %q is not one of %v", h.Name, h.Family, Families)
}

// Constant is γ(t) = level.
type Constant struct{ Level float64 }

func (c Constant) At(float64) float64 { return c.Level }

// Linear is
//
//	γ(t) = min(high, low + slope·t)
type Linear struct{ Low, High, Slope float64 }

func (l Linear) At(t float64) float64 { return math.Min(l.High, l.Low+l.Slope*t) }

// Exponential is the late, convex rise
//
//	γ(t) = low + (high−low)·(e^{rate·t}−1)/(e^{rate·T}−1) for t ≤ T, high after,
//
// evaluated as e^{rate(t−T)}·(1−e^{−rate·t})/(1−e^{−rate·T}) when rate·T > 1
// so that large rates do not overflow, and as t/T in the limit rate → 0.
type Exponential struct{ Low, High, Rate, Horizon float64 }

func (e Exponential) At(t float64) float64 {
	if t >= e.Horizon {
		return e.High
	}
	if t <= 0 {
		return e.Low
	}
	r, T := e.Rate, e.Horizon
	var frac float64
	switch {
	case math.Abs(r*T) < 1e-12:
		frac = t / T
	case r*T > 1:
		frac = math.Exp(r*(t-T)) * math.Expm1(-r*t) / math.Expm1(-r*T)
	default:
		frac = math.Expm1(r*t) / math.Expm1(r*T)
	}
	return e.Low + (e.High-e.Low)*frac
}

// Saturating is the early, concave rise (the exponential CDF)
//
//	γ(t) = low + (high−low)·(1 − e^{−t/tau})
type Saturating struct{ Low, High, Tau float64 }

func (s Saturating) At(t float64) float64 {
	return s.Low + (s.High-s.Low)*-math.Expm1(-t/s.Tau)
}

// Logistic is
//
//	γ(t) = low + (high−low)/(1 + e^{−(t−midpoint)/width})
type Logistic struct{ Low, High, Midpoint, Width float64 }

func (l Logistic) At(t float64) float64 {
	z := (t - l.Midpoint) / l.Width
	var s float64
	if z >= 0 {
		s = 1 / (1 + math.Exp(-z))
	} else {
		ez := math.Exp(z)
		s = ez / (1 + ez)
	}
	return l.Low + (l.High-l.Low)*s
}

// Hazard is precision driven by temporal expectation:
//
//	γ(t) = low + (high−low)·h(t),  h(t) = (F(t+w) − F(t)) / (1 − F(t))
//
// with F the CDF of the CTI distribution blurred by scalar timing noise,
// f(t) = Σ_j p_j N(t; c_j, (φ c_j)²) (the subjective hazard of Janssen &
// Shadlen 2005, Nature Neuroscience 8:234). The survival 1 − F is summed
// from erfc terms so it does not underflow past the last CTI; h = 1 where
// the survival is below 1e-300.
type Hazard struct {
	Low, High, Weber, Window float64
	cti, p                   []float64 // seconds, normalised weights
}

// NewHazard builds the hazard family for CTIs in ms with the given weights.
func NewHazard(low, high, weber, window float64, ctiMs []int, weights []float64) *Hazard {
	h := &Hazard{Low: low, High: high, Weber: weber, Window: window}
	sum := 0.0
	for i := range ctiMs {
		w := 1.0
		if len(weights) == len(ctiMs) {
			w = weights[i]
		}
		sum += w
	}
	for i, c := range ctiMs {
		w := 1.0
		if len(weights) == len(ctiMs) {
			w = weights[i]
		}
		h.cti = append(h.cti, float64(c)/1000)
		h.p = append(h.p, w/sum)
	}
	return h
}

// Survival returns 1 − F(t) = Σ_j p_j · ½·erfc((t − c_j)/(φ c_j √2)).
func (h *Hazard) Survival(t float64) float64 {
	s := 0.0
	for j, c := range h.cti {
		s += h.p[j] * 0.5 * math.Erfc((t-c)/(h.Weber*c*math.Sqrt2))
	}
	return s
}

// Rate returns h(t) = (S(t) − S(t+w)) / S(t), in [0, 1].
func (h *Hazard) Rate(t float64) float64 {
	s := h.Survival(t)
	if s < 1e-300 {
		return 1
	}
	r := (s - h.Survival(t+h.Window)) / s
	return math.Max(0, math.Min(1, r))
}

func (h *Hazard) At(t float64) float64 { return h.Low + (h.High-h.Low)*h.Rate(t) }

func maxInt(xs []int) int {
	m := 0
	for i, x := range xs {
		if i == 0 || x > m {
			m = x
		}
	}
	return m
}
