package models

import (
	"fmt"
	"math"
	"slices"
	"sort"
	"strconv"
)

// Precision is a hypothesis's precision time course γ(t), t in seconds
// since cue onset (model.md §2).
type Precision interface {
	At(t float64) float64
}

// Sign is the allowed sign of a hypothesis parameter.
type Sign int

const (
	AnySign Sign = iota
	Positive
	NonNegative
)

// ParamSpec is one parameter of a precision family.
type ParamSpec struct {
	Name string
	// Default is the value an omitted parameter takes for a design; nil
	// means the parameter is required.
	Default func(d *Design) float64
	Sign    Sign
	// Seconds marks a time parameter in seconds (a value far above the
	// design's time span is warned about as a likely unit slip).
	Seconds bool
	// Gain marks a parameter in gain units: every value it can take must
	// lie within [gain_min, gain_max] of every design.
	Gain bool
}

// Required reports whether the study must give the parameter.
func (p ParamSpec) Required() bool { return p.Default == nil }

// Family is one precision family: its name, its formula, its parameters
// and its constructor. The validator, the JSON Schema's family branches,
// the evaluator and the messages all read this one table.
type Family struct {
	Name string
	// Formula is γ(t) in plain text, t in seconds since cue onset; the
	// schema quotes it.
	Formula string
	// Params lists the family's parameters for hypothesis h in documented
	// order. It takes the hypothesis so that a family whose parameter list
	// depends on it (knots: one level per entry of knots_s) fits the same
	// table.
	Params func(h Hypothesis) []ParamSpec
	// ParamPattern, for a family whose parameter list comes from the
	// hypothesis, is the pattern every parameter name matches; the schema
	// uses it since it cannot list the names. Empty for a fixed list.
	ParamPattern string
	// UsesKnots reports that the family reads the hypothesis's knots_s
	// (required for it, not allowed for the others).
	UsesKnots bool
	// New builds γ for hypothesis h from every parameter's value
	// (defaults filled in).
	New func(h Hypothesis, v map[string]float64, d *Design) Precision
}

// gainBounds are γ_lo and γ_hi, shared by every non-constant family
// (model.md §2); they default to the agent's gain range.
var gainBounds = []ParamSpec{
	{Name: "low", Default: func(d *Design) float64 { return d.Agent.GainMin }, Sign: Positive, Gain: true},
	{Name: "high", Default: func(d *Design) float64 { return d.Agent.GainMax }, Sign: Positive, Gain: true},
}

// fixedParams is Params for a family whose parameter list never changes.
func fixedParams(own ...ParamSpec) func(Hypothesis) []ParamSpec {
	all := append(own, gainBounds...)
	return func(Hypothesis) []ParamSpec { return all }
}

// families is the table of precision families, in documented order.
var families = []Family{
	{
		Name: "constant", Formula: "γ(t) = level",
		Params: func(Hypothesis) []ParamSpec { return []ParamSpec{{Name: "level", Sign: Positive}} },
		New:    func(_ Hypothesis, v map[string]float64, _ *Design) Precision { return Constant{Level: v["level"]} },
	},
	{
		Name: "linear", Formula: "γ(t) = min(high, low + slope·t)",
		Params: fixedParams(ParamSpec{Name: "slope", Sign: NonNegative}),
		New: func(_ Hypothesis, v map[string]float64, _ *Design) Precision {
			return Linear{Low: v["low"], High: v["high"], Slope: v["slope"]}
		},
	},
	{
		Name: "exponential", Formula: "γ(t) = low + (high−low)·(e^{rate·t}−1)/(e^{rate·horizon}−1) for t ≤ horizon, high after",
		Params: fixedParams(ParamSpec{Name: "rate", Sign: Positive},
			ParamSpec{Name: "horizon", Sign: Positive, Seconds: true, Default: func(d *Design) float64 { return float64(maxInt(d.CTIms)) / 1000 }}),
		New: func(_ Hypothesis, v map[string]float64, _ *Design) Precision {
			return Exponential{Low: v["low"], High: v["high"], Rate: v["rate"], Horizon: v["horizon"]}
		},
	},
	{
		Name: "saturating", Formula: "γ(t) = low + (high−low)·(1 − e^{−t/tau})",
		Params: fixedParams(ParamSpec{Name: "tau", Sign: Positive, Seconds: true}),
		New: func(_ Hypothesis, v map[string]float64, _ *Design) Precision {
			return Saturating{Low: v["low"], High: v["high"], Tau: v["tau"]}
		},
	},
	{
		Name: "logistic", Formula: "γ(t) = low + (high−low)/(1 + e^{−(t−midpoint)/width})",
		Params: fixedParams(ParamSpec{Name: "midpoint", Sign: AnySign, Seconds: true}, ParamSpec{Name: "width", Sign: Positive, Seconds: true}),
		New: func(_ Hypothesis, v map[string]float64, _ *Design) Precision {
			return Logistic{Low: v["low"], High: v["high"], Midpoint: v["midpoint"], Width: v["width"]}
		},
	},
	{
		Name: "hazard", Formula: "γ(t) = low + (high−low)·h(t), h the subjective hazard of the CTIs within window",
		Params: fixedParams(ParamSpec{Name: "weber", Sign: Positive},
			ParamSpec{Name: "window", Sign: Positive, Seconds: true, Default: func(*Design) float64 { return 0.2 }}),
		New: func(_ Hypothesis, v map[string]float64, d *Design) Precision {
			return NewHazard(v["low"], v["high"], v["weber"], v["window"], d.CTIms, d.CTIWeights)
		},
	},
	{
		Name:         "knots",
		Formula:      KnotsFormula,
		Params:       knotParams,
		ParamPattern: `^k([1-9]|1[0-2])$`,
		UsesKnots:    true,
		New: func(h Hypothesis, v map[string]float64, _ *Design) Precision {
			k := make([]float64, len(h.KnotsS))
			for i := range k {
				k[i] = v[KnotParam(i)]
			}
			return Knots{T: slices.Clone(h.KnotsS), K: k}
		},
	},
}

// KnotsFormula is the knots family's γ(t) in plain text.
const KnotsFormula = "γ(t) = k1 for t ≤ t1; k_i + (k_{i+1} − k_i)·(t − t_i)/(t_{i+1} − t_i) for t_i ≤ t ≤ t_{i+1}; kn for t ≥ tn; t_i = knots_s[i] (s, strictly increasing), one level k_i per knot (gain units)"

// MinKnots and MaxKnots bound the length of knots_s.
const MinKnots, MaxKnots = 2, 12

// KnotParam is the name of the level at knot i (0-based): k1, k2, ...
func KnotParam(i int) string { return "k" + strconv.Itoa(i+1) }

// knotParams is one required level k_i per entry of h.KnotsS, each in
// gain units.
func knotParams(h Hypothesis) []ParamSpec {
	specs := make([]ParamSpec, len(h.KnotsS))
	for i := range specs {
		specs[i] = ParamSpec{Name: KnotParam(i), Sign: Positive, Gain: true}
	}
	return specs
}

// Families lists the precision families' names in their documented order.
var Families = func() []string {
	names := make([]string, len(families))
	for i, f := range families {
		names[i] = f.Name
	}
	return names
}()

// LookupFamily returns the family of that name.
func LookupFamily(name string) (Family, bool) {
	for _, f := range families {
		if f.Name == name {
			return f, true
		}
	}
	return Family{}, false
}

// ParamNames returns the names of specs in their order.
func ParamNames(specs []ParamSpec) []string {
	n := make([]string, len(specs))
	for i, p := range specs {
		n[i] = p.Name
	}
	return n
}

// findParam returns the spec of that name.
func findParam(specs []ParamSpec, name string) (ParamSpec, bool) {
	for _, p := range specs {
		if p.Name == name {
			return p, true
		}
	}
	return ParamSpec{}, false
}

// AllowedParams returns the parameter names hypothesis h's family accepts,
// sorted; nil for an unknown family.
func (h Hypothesis) AllowedParams() []string {
	f, ok := LookupFamily(h.Family)
	if !ok {
		return nil
	}
	names := ParamNames(f.Params(h))
	sort.Strings(names)
	return names
}

// Resolve returns every parameter of h for design d: free parameters take
// the values in free (ordered as h.FreeParams()), fixed ones their value,
// omitted ones their default.
func (h Hypothesis) Resolve(d *Design, free []float64) (map[string]float64, error) {
	names := h.FreeParams()
	if len(free) != len(names) {
		panic(fmt.Sprintf("models: %d free values for %d free parameters of %s", len(free), len(names), h.Name))
	}
	f, ok := LookupFamily(h.Family)
	if !ok {
		return nil, fmt.Errorf("models: hypothesis %q: family %q is not one of %v", h.Name, h.Family, Families)
	}
	specs := f.Params(h)
	vals := make(map[string]float64, len(specs))
	for _, ps := range specs {
		if ps.Default != nil {
			vals[ps.Name] = ps.Default(d)
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
	for _, ps := range specs {
		if _, ok := vals[ps.Name]; !ok {
			return nil, fmt.Errorf("models: hypothesis %q: parameter %q is required for family %s", h.Name, ps.Name, h.Family)
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
	f, _ := LookupFamily(h.Family) // Resolve has found it
	return f.New(h, v, d), nil
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

// Knots is the precision time course given at fixed times:
//
//	γ(t) = k_1 for t ≤ t_1,  k_n for t ≥ t_n,
//	γ(t) = k_i + (k_{i+1} − k_i)·(t − t_i)/(t_{i+1} − t_i) for t_i ≤ t ≤ t_{i+1},
//
// T the knot times t_i in seconds (strictly increasing), K the levels k_i.
type Knots struct{ T, K []float64 }

func (k Knots) At(t float64) float64 {
	n := len(k.T)
	if t <= k.T[0] {
		return k.K[0]
	}
	if t >= k.T[n-1] {
		return k.K[n-1]
	}
	// the first knot above t: t_{i-1} < t < t_i
	i := sort.SearchFloat64s(k.T, t)
	if k.T[i] == t {
		return k.K[i]
	}
	t0, t1 := k.T[i-1], k.T[i]
	return k.K[i-1] + (k.K[i]-k.K[i-1])*(t-t0)/(t1-t0)
}

func maxInt(xs []int) int {
	m := 0
	for i, x := range xs {
		if i == 0 || x > m {
			m = x
		}
	}
	return m
}
