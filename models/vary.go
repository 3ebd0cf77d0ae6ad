package models

import (
	"bytes"
	"encoding/json"
	"fmt"
	"maps"
	"math"
	"slices"
	"strings"
)

// Expand returns the design's variants, one per value of each vary block in
// order (a block varies its field alone; blocks are not crossed). Each
// variant is a copy of the design with the field replaced by the value,
// named "<design>/<label>" or "<design>/<field>=<value>", with Vary cleared.
// A design without vary blocks expands to a copy of itself.
//
// Two defaults follow the field they derive from: when cti_ms is varied and
// the design's cti_weights are all equal (the default), each variant gets
// equal weights of its own length; when streams is varied and
// cue_reliability is the default for the design's streams, 4/(3·streams+1),
// each variant gets the default for its own streams.
//
// Expand fails with a *ValidationError (paths relative to the design, such
// as "vary[0].values[1]") when a block names an unknown field, has no
// values, has labels that do not match its values, or has a value that does
// not fit the field's type, and when a block has more than MaxVaryValues
// values or the design more than MaxVariants variants (refused before any
// copy is made). It does not validate the variants; Validate does.
func (d Design) Expand() ([]Design, error) {
	if len(d.Vary) == 0 {
		return []Design{d.clone()}, nil
	}
	vs, probs := expandDesign(d)
	if len(probs) > 0 {
		return nil, &ValidationError{Problems: probs}
	}
	out := make([]Design, len(vs))
	for i, v := range vs {
		out[i] = v.design
	}
	return out, nil
}

// ExpandedDesigns returns every design of the study with its vary blocks
// expanded, in order. The error is a *ValidationError with paths from the
// study root ("designs[1].vary[0].field").
func (s *Study) ExpandedDesigns() ([]Design, error) {
	var out []Design
	var probs []Problem
	for i, d := range s.Designs {
		ds, err := d.Expand()
		if err != nil {
			for _, p := range err.(*ValidationError).Problems {
				probs = append(probs, Problem{Path: join(fmt.Sprintf("designs[%d]", i), p.Path), Problem: p.Problem})
			}
			continue
		}
		out = append(out, ds...)
	}
	if len(probs) == 0 && len(out) > MaxVariants {
		probs = append(probs, Problem{Path: "designs", Problem: fmt.Sprintf(
			"the designs expand to %d variants; the cap is %d variants per study", len(out), MaxVariants)})
	}
	if len(probs) > 0 {
		return nil, &ValidationError{Problems: probs}
	}
	return out, nil
}

type variant struct {
	design    Design
	valuePath string // "vary[k].values[n]", relative to the design
	namePath  string // where the variant's name comes from: its label or its value
}

// expandDesign builds every variant it can and reports, relative to the
// design, each vary entry it cannot use.
func expandDesign(d Design) ([]variant, []Problem) {
	c := &checker{}
	var out []variant
	// Variants are copies of the design without its vary blocks: copying
	// the blocks into each variant made expansion quadratic in their size.
	base := d
	base.Vary = nil
	for k, v := range d.Vary {
		vp := fmt.Sprintf("vary[%d]", k)
		if !slices.Contains(VaryFields, v.Field) {
			c.add(vp+".field", "field must be one of %s, got %q", strings.Join(VaryFields, ", "), v.Field)
			continue
		}
		if len(v.Values) == 0 {
			c.add(vp+".values", "%s", countText("values", 1, -1, 0))
			continue
		}
		if len(v.Values) > MaxVaryValues {
			c.add(vp+".values", "a vary block may have at most %d values, got %d", MaxVaryValues, len(v.Values))
			continue
		}
		if len(out)+len(v.Values) > MaxVariants {
			c.add(vp+".values", "the design's vary blocks reach %d variants at this block; the cap is %d variants per study", len(out)+len(v.Values), MaxVariants)
			break
		}
		if len(v.Labels) > 0 && len(v.Labels) != len(v.Values) {
			c.add(vp+".labels", "labels must have one label per value (%d values), got %d", len(v.Values), len(v.Labels))
		}
		for n, raw := range v.Values {
			valuePath := fmt.Sprintf("%s.values[%d]", vp, n)
			nd := base.clone()
			if want := setField(&nd, &d, v.Field, raw); want != "" {
				c.add(valuePath, "values[%d] (%s) must be %s, got %s", n, v.Field, want, display(rawValue(raw)))
				continue
			}
			namePath := valuePath
			suffix := v.Field + "=" + valueText(raw)
			if n < len(v.Labels) {
				namePath = fmt.Sprintf("%s.labels[%d]", vp, n)
				if v.Labels[n] == "" {
					c.add(namePath, "labels[%d] must not be empty", n)
				} else {
					suffix = v.Labels[n]
				}
			}
			nd.Name = d.Name + "/" + suffix
			out = append(out, variant{design: nd, valuePath: valuePath, namePath: namePath})
		}
	}
	return out, c.out
}

// setField replaces field in nd by the raw value; it returns the expected
// type when the value does not fit, or "" on success. orig is the design
// being varied, for the defaults that follow the field.
func setField(nd, orig *Design, field string, raw json.RawMessage) string {
	if bytes.Equal(bytes.TrimSpace(raw), []byte("null")) {
		// encoding/json leaves the target untouched on null; a null value
		// would silently repeat the design.
		return typeWant(field)
	}
	delete(nd.defaulted, field) // the variant gives it
	var err error
	switch field {
	case "cti_ms":
		var x []int
		if err = json.Unmarshal(raw, &x); err == nil {
			nd.CTIms = x
			if allEqual(orig.CTIWeights) {
				nd.CTIWeights = make([]float64, len(x))
				for i := range nd.CTIWeights {
					nd.CTIWeights[i] = 1
				}
			}
		}
	case "cti_weights":
		err = json.Unmarshal(raw, &nd.CTIWeights)
	case "trials_per_cti":
		err = json.Unmarshal(raw, &nd.TrialsPerCTI)
	case "measures":
		err = json.Unmarshal(raw, &nd.Measures)
	case "validity":
		err = json.Unmarshal(raw, &nd.Validity)
	case "participants":
		err = json.Unmarshal(raw, &nd.Participants)
	case "streams":
		if err = json.Unmarshal(raw, &nd.Streams); err == nil && orig.Streams > 0 && nd.Streams > 0 &&
			math.Abs(orig.Agent.CueReliability-defaultCueReliability(orig.Streams)) < 1e-12 {
			nd.Agent.CueReliability = defaultCueReliability(nd.Streams)
		}
	case "items":
		err = json.Unmarshal(raw, &nd.Items)
	case "presentation_ms":
		err = json.Unmarshal(raw, &nd.PresentationMs)
	default:
		panic("models: setField: field " + field + " is not in VaryFields")
	}
	if err != nil {
		return typeWant(field)
	}
	return ""
}

// defaultCueReliability is the default of Design.FillDefaults: a likelihood
// ratio of 4/3 per glance, ρ/((1−ρ)/(L−1)) = 4/3, so ρ = 4/(3L+1).
func defaultCueReliability(streams int) float64 { return 4 / (3*float64(streams) + 1) }

func typeWant(field string) string {
	switch field {
	case "cti_ms":
		return "an array of whole numbers in plain digits"
	case "cti_weights":
		return "an array of numbers"
	case "measures":
		return "an array of strings"
	case "validity":
		return "a number"
	}
	return "a whole number in plain digits"
}

func allEqual(w []float64) bool {
	for _, x := range w {
		if x != w[0] {
			return false
		}
	}
	return true
}

func rawValue(raw json.RawMessage) any {
	var v any
	dec := json.NewDecoder(bytes.NewReader(raw))
	dec.UseNumber()
	if dec.Decode(&v) != nil {
		return string(raw)
	}
	return v
}

// valueText renders a vary value for a variant name: numbers as written,
// strings without quotes, arrays as [a,b].
func valueText(raw json.RawMessage) string {
	var b strings.Builder
	var walk func(v any)
	walk = func(v any) {
		switch x := v.(type) {
		case json.Number:
			b.WriteString(x.String())
		case string:
			b.WriteString(x)
		case []any:
			b.WriteByte('[')
			for i, e := range x {
				if i > 0 {
					b.WriteByte(',')
				}
				walk(e)
			}
			b.WriteByte(']')
		default:
			j, _ := json.Marshal(x)
			b.Write(j)
		}
	}
	walk(rawValue(raw))
	return b.String()
}

// clone returns a deep copy of the design, so a variant shares no slice or
// pointer with it.
func (d Design) clone() Design {
	c := d
	c.defaulted = maps.Clone(d.defaulted)
	c.CTIms = slices.Clone(d.CTIms)
	c.CTIWeights = slices.Clone(d.CTIWeights)
	c.Measures = slices.Clone(d.Measures)
	m := &c.Measurement
	for _, mp := range measurementPriors {
		p := mp.get(m)
		if p.Min != nil {
			p.Min = fptr(*p.Min)
		}
		if p.Max != nil {
			p.Max = fptr(*p.Max)
		}
	}
	if d.Vary != nil {
		c.Vary = make([]Variation, len(d.Vary))
		for i, v := range d.Vary {
			c.Vary[i] = Variation{Field: v.Field, Labels: slices.Clone(v.Labels)}
			for _, raw := range v.Values {
				c.Vary[i].Values = append(c.Vary[i].Values, slices.Clone(raw))
			}
		}
	}
	return c
}
