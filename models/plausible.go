package models

import (
	"fmt"
	"math"
)

// Warnings lists values a study may hold but that look like a slip, each
// once with its path: a time parameter (seconds) beyond every design's
// longest CTI plus response window, which reads like milliseconds written
// where seconds are meant; and a design whose CTIs are all below 10 ms,
// which reads like seconds written where milliseconds are meant. Warnings
// do not stop a run.
func (s *Study) Warnings() []Problem {
	c := &checker{}
	for i := range s.Designs {
		d := &s.Designs[i]
		if len(d.CTIms) == 0 || d.Defaulted("cti_ms") {
			continue
		}
		if top := maxInt(d.CTIms); top > 0 && top < 10 {
			c.add(fmt.Sprintf("designs[%d].cti_ms", i), "every CTI is below 10 ms (the longest is %d ms); cti_ms are in milliseconds: were seconds written?", top)
		}
	}
	// The longest time span of any design, in seconds.
	span, from := 0.0, ""
	for _, d := range s.Designs {
		if len(d.CTIms) == 0 {
			continue
		}
		if t := float64(maxInt(d.CTIms)+d.ResponseWindowMs) / 1000; t > span {
			span, from = t, d.Name
		}
	}
	if span <= 0 {
		return c.out
	}
	for j, h := range s.Hypotheses {
		f, ok := LookupFamily(h.Family)
		if !ok {
			continue
		}
		for _, ps := range f.Params(h) {
			p, ok := h.Params[ps.Name]
			if !ok || !ps.Seconds {
				continue
			}
			top := math.Inf(-1)
			for _, v := range []*float64{p.Value, p.Min, p.Max} {
				if v != nil && finite(*v) {
					top = math.Max(top, *v)
				}
			}
			if top > span {
				what := ps.Name + " = " + g(top)
				if p.Value == nil && p.Min != nil && p.Max != nil {
					what = fmt.Sprintf("%s range [%s, %s]", ps.Name, g(*p.Min), g(*p.Max))
				}
				c.add(fmt.Sprintf("hypotheses[%d].params.%s", j, ps.Name), "%s s reaches beyond the longest CTI + response window of any design (%s s, design %q); %s is in seconds: were milliseconds written?", what, g(span), from, ps.Name)
			}
		}
	}
	return c.out
}
