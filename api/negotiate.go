package api

import (
	"mime"
	"strconv"
	"strings"
)

// negotiate picks the offer an Accept header prefers (RFC 9110 §12.5.1):
// the highest q wins, a more specific range (type/subtype over type/* over
// */*) sets an offer's q, and ties go to the earlier offer. An empty header
// accepts the first offer; "" means nothing offered is acceptable.
func negotiate(accept string, offers []string) string {
	if strings.TrimSpace(accept) == "" {
		return offers[0]
	}
	type rng struct {
		typ, sub string
		q        float64
	}
	var ranges []rng
	for _, part := range strings.Split(accept, ",") {
		part = strings.TrimSpace(part)
		if part == "" {
			continue
		}
		mt, params, err := mime.ParseMediaType(part)
		if err != nil {
			continue
		}
		q := 1.0
		if v, ok := params["q"]; ok {
			if f, err := strconv.ParseFloat(v, 64); err == nil && f >= 0 && f <= 1 {
				q = f
			}
		}
		typ, sub, _ := strings.Cut(mt, "/") // a bare type leaves sub empty, which matches no offer
		ranges = append(ranges, rng{typ, sub, q})
	}
	best, bestQ := "", 0.0
	for _, o := range offers {
		ot, os, _ := strings.Cut(o, "/") // offers are this package's full media types
		q, spec := 0.0, -1
		for _, r := range ranges {
			s := -1
			switch {
			case r.typ == ot && r.sub == os:
				s = 2
			case r.typ == ot && r.sub == "*":
				s = 1
			case r.typ == "*" && r.sub == "*":
				s = 0
			}
			if s > spec {
				spec, q = s, r.q
			}
		}
		if spec >= 0 && q > bestQ {
			best, bestQ = o, q
		}
	}
	return best
}
