package models

import (
	"encoding/json"
	"math"

	"gonum.org/v1/gonum/stat/distuv"
)

// truncNormalQuantile returns the p-quantile of N(mean, sd²) truncated to [lo, hi]:
//
//	q = Φ⁻¹(Φ(a) + p·(Φ(b) − Φ(a)))·sd + mean,  a = (lo−mean)/sd, b = (hi−mean)/sd
func truncNormalQuantile(p, mean, sd, lo, hi float64) float64 {
	n := distuv.UnitNormal
	a, b := n.CDF((lo-mean)/sd), n.CDF((hi-mean)/sd)
	if b-a < 1e-300 {
		return math.Max(lo, math.Min(hi, mean))
	}
	q := n.Quantile(a+p*(b-a))*sd + mean
	return math.Max(lo, math.Min(hi, q))
}

// Quantile returns the u-quantile of the generating distribution of a free
// parameter (u in (0,1)); fixed parameters return their value. Drawing u
// uniformly gives a draw from the distribution.
func (p Param) Quantile(u float64) float64 {
	if !p.Free() {
		return *p.Value
	}
	lo, hi := p.GenerateRange()
	dist := "uniform"
	if p.Generate != nil && p.Generate.Dist != "" {
		dist = p.Generate.Dist
	}
	switch dist {
	case "loguniform":
		return math.Exp(math.Log(lo) + u*(math.Log(hi)-math.Log(lo)))
	case "normal":
		return truncNormalQuantile(u, p.Generate.Mean, p.Generate.SD, lo, hi)
	default:
		return lo + u*(hi-lo)
	}
}

// GenerateRange is the range true values of a free parameter are drawn
// from: the generating sub-range [generate.min, generate.max] where given
// (each bound separately), the fit's range [min, max] otherwise.
func (p Param) GenerateRange() (lo, hi float64) {
	lo, hi = *p.Min, *p.Max
	if p.Generate != nil {
		if p.Generate.Min != nil {
			lo = *p.Generate.Min
		}
		if p.Generate.Max != nil {
			hi = *p.Generate.Max
		}
	}
	return lo, hi
}

// Quantile returns the u-quantile of a measurement prior (u in (0,1)).
func (p Prior) Quantile(u float64) float64 {
	switch p.Dist {
	case "fixed":
		return p.Value
	case "uniform":
		return *p.Min + u*(*p.Max-*p.Min)
	case "lognormal":
		return math.Exp(p.Mu + p.Sigma*distuv.UnitNormal.Quantile(u))
	default: // normal
		lo, hi := math.Inf(-1), math.Inf(1)
		if p.Min != nil {
			lo = *p.Min
		}
		if p.Max != nil {
			hi = *p.Max
		}
		return truncNormalQuantile(u, p.Mean, p.SD, lo, hi)
	}
}

// Median returns the prior's median.
func (p Prior) Median() float64 { return p.Quantile(0.5) }

// MarshalJSON writes a prior with only the fields of its distribution, so
// that a fixed prior at 0 keeps its "value" and a decoded, re-encoded study
// passes the schema again.
func (p Prior) MarshalJSON() ([]byte, error) {
	type out struct {
		Dist  string   `json:"dist"`
		Value *float64 `json:"value,omitempty"`
		Mean  *float64 `json:"mean,omitempty"`
		SD    *float64 `json:"sd,omitempty"`
		Min   *float64 `json:"min,omitempty"`
		Max   *float64 `json:"max,omitempty"`
		Mu    *float64 `json:"mu,omitempty"`
		Sigma *float64 `json:"sigma,omitempty"`
	}
	o := out{Dist: p.Dist, Min: p.Min, Max: p.Max}
	switch p.Dist {
	case "fixed":
		o.Value = &p.Value
	case "normal":
		o.Mean, o.SD = &p.Mean, &p.SD
	case "lognormal":
		o.Mu, o.Sigma = &p.Mu, &p.Sigma
	}
	return json.Marshal(o)
}
