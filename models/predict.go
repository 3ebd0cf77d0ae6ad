package models

import (
	"fmt"
	"sort"
	"strings"
)

// HypothesisPrediction is one hypothesis's predictions in the shape that
// `discrimen predict --format json` prints and the report embeds.
type HypothesisPrediction struct {
	Name     string             `json:"name"`
	Family   string             `json:"family"`
	Params   map[string]float64 `json:"params"`
	CTIms    []int              `json:"cti_ms"`
	Valid    ClassReadouts      `json:"valid"`
	Invalid  ClassReadouts      `json:"invalid"`
	Neural   NeuralReadouts     `json:"neural"`
	Censored CensoredReadouts   `json:"censored"`
}

// ClassReadouts is one trial class's RT and accuracy by CTI.
type ClassReadouts struct {
	RTms        []float64 `json:"rt_ms"`
	Accuracy    []float64 `json:"accuracy"`
	Misdirected []float64 `json:"misdirected,omitempty"`
}

// NeuralReadouts is the baseline-corrected neural signal by CTI, in bins.
type NeuralReadouts struct {
	BinMs int         `json:"bin_ms"`
	ByCTI [][]float64 `json:"by_cti"`
}

// CensoredReadouts is, per CTI, the share of trials censored at the
// window's end: 0 or 1 for the deterministic agent, a share in [0, 1] with
// agent.precision_sd > 0.
type CensoredReadouts struct {
	Valid   []float64 `json:"valid"`
	Invalid []float64 `json:"invalid"`
}

// ReferenceValues returns the free parameter values (ordered as
// h.FreeParams()) at the medians of their generating distributions.
func (h Hypothesis) ReferenceValues() []float64 {
	names := h.FreeParams()
	v := make([]float64, len(names))
	for i, n := range names {
		v[i] = h.Params[n].Median()
	}
	return v
}

// PredictAt computes h's predictions for design d at the given free values,
// with the set map overriding any parameter (free or fixed) by name.
func PredictAt(l *Listener, d *Design, h Hypothesis, free []float64, set map[string]float64) (HypothesisPrediction, error) {
	hh := h
	if len(set) > 0 {
		hh.Params = make(map[string]Param, len(h.Params)+len(set))
		for k, v := range h.Params {
			hh.Params[k] = v
		}
		names := h.FreeParams()
		keep := free[:0:0]
		for i, n := range names {
			if _, ok := set[n]; !ok {
				keep = append(keep, free[i])
			}
		}
		allowed := h.AllowedParams()
		for k, v := range set {
			if !contains(allowed, k) {
				return HypothesisPrediction{}, fmt.Errorf("models: hypothesis %q (%s) has no parameter %q; allowed: %v", h.Name, h.Family, k, allowed)
			}
			hh.Params[k] = Param{Value: &v}
		}
		free = keep
	}
	vals, err := hh.Resolve(d, free)
	if err != nil {
		return HypothesisPrediction{}, err
	}
	prec, err := NewPrecision(hh, d, free)
	if err != nil {
		return HypothesisPrediction{}, err
	}
	p := l.NewPrediction()
	l.Predict(prec, p, nil)
	return HypothesisPrediction{
		Name: h.Name, Family: h.Family, Params: vals, CTIms: p.CTIms,
		Valid:    ClassReadouts{RTms: p.Valid.RTms, Accuracy: p.Valid.Accuracy},
		Invalid:  ClassReadouts{RTms: p.Invalid.RTms, Accuracy: p.Invalid.Accuracy, Misdirected: p.Invalid.Misdirected},
		Neural:   NeuralReadouts{BinMs: p.BinMs, ByCTI: p.Neural},
		Censored: CensoredReadouts{Valid: p.Valid.Censored, Invalid: p.Invalid.Censored},
	}, nil
}

// PredictDesign predicts every hypothesis of the study for design d at its
// reference values, with overrides set[hypothesis][param].
func PredictDesign(s *Study, d *Design, set map[string]map[string]float64) ([]HypothesisPrediction, error) {
	l, err := NewListener(d)
	if err != nil {
		return nil, err
	}
	for name := range set {
		found := false
		for _, h := range s.Hypotheses {
			found = found || h.Name == name
		}
		if !found {
			names := make([]string, len(s.Hypotheses))
			for i, h := range s.Hypotheses {
				names[i] = h.Name
			}
			sort.Strings(names)
			return nil, fmt.Errorf("models: --set names hypothesis %q; the study has %v", name, names)
		}
	}
	out := make([]HypothesisPrediction, 0, len(s.Hypotheses))
	for _, h := range s.Hypotheses {
		hp, err := PredictAt(l, d, h, h.ReferenceValues(), set[h.Name])
		if err != nil {
			return nil, err
		}
		out = append(out, hp)
	}
	return out, nil
}

func contains(xs []string, x string) bool {
	for _, v := range xs {
		if v == x {
			return true
		}
	}
	return false
}

// Label says which trial classes are censored at CTI index c: "both",
// "valid", "invalid" or none when every share is 0 or 1 (the deterministic
// agent); otherwise the shares above 0, as in "valid 0.12, invalid 0.40".
func (cs CensoredReadouts) Label(c int, none string) string {
	at := func(v []float64) float64 {
		if c < len(v) {
			return v[c]
		}
		return 0
	}
	v, inv := at(cs.Valid), at(cs.Invalid)
	whole := func(x float64) bool { return x == 0 || x == 1 }
	if whole(v) && whole(inv) {
		switch {
		case v == 1 && inv == 1:
			return "both"
		case v == 1:
			return "valid"
		case inv == 1:
			return "invalid"
		}
		return none
	}
	share := func(x float64) string {
		if x < 0.005 {
			return "<0.01"
		}
		if x > 0.995 && x < 1 {
			return ">0.99"
		}
		return fmt.Sprintf("%.2f", x)
	}
	var parts []string
	if v > 0 {
		parts = append(parts, "valid "+share(v))
	}
	if inv > 0 {
		parts = append(parts, "invalid "+share(inv))
	}
	return strings.Join(parts, ", ")
}
