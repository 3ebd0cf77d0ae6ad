package models

import (
	"fmt"
	"math"
	"regexp"
	"slices"
	"sort"
	"strconv"
	"strings"
	"unicode/utf8"
)

// Problem is one thing wrong with a study file. Path is a JSON path in dotted
// form ("designs[0].validity", "hypotheses[2].params.tau.min"); an empty Path
// means the file as a whole.
type Problem struct {
	Path    string `json:"path"`
	Problem string `json:"problem"`
}

// String renders the problem as "PATH: PROBLEM", or the problem alone for
// the file as a whole.
func (p Problem) String() string {
	if p.Path == "" {
		return p.Problem
	}
	return p.Path + ": " + p.Problem
}

// ValidationError carries every problem found in a study file.
type ValidationError struct {
	Problems []Problem
	// OverBudget is true when the study's one fault is its compute budget
	// (MaxFits): the file is well formed but asks for too many fits, which
	// a service reports as over its cap rather than as a malformed file.
	OverBudget bool
	// Warnings are the study's warnings (Study.Warnings) where the file
	// decoded far enough to find them.
	Warnings []Problem
	// OverLimit is true when the file is over a size cap of limits.go
	// (values per vary block, variants, string length, array entries, ...):
	// the problems name each value over a cap, and nothing else was
	// checked.
	OverLimit bool
}

// Error lists the problems one per line.
func (e *ValidationError) Error() string {
	lines := make([]string, len(e.Problems))
	for i, p := range e.Problems {
		lines[i] = p.String()
	}
	return strings.Join(lines, "\n")
}

// MaxFits is the largest compute budget a study file may ask for: the number
// of fits, Σ over (expanded) designs of participants × hypotheses².
const MaxFits = 5_000_000

// Limits of the study file (model.md §1-2 and the service's budget).
const (
	minStreams, maxStreams       = 2, 6
	maxItems                     = 32
	maxTrialsPerCTI              = 10000
	maxParticipants              = 10000
	maxEpochMs                   = 1000
	maxTimeMs                    = 60000 // the schema's cap on every time in ms
	minGainLevels, maxGainLevels = 2, 64
	maxIterationsPerEpoch        = 256
	minHypotheses, maxHypotheses = 2, 12
	maxDesigns                   = 16
	maxReplicates                = 100000
	validityTolerance            = 1e-9 // lets validity = 1/streams be written with finite decimals
	fixedAndFreeText             = "is fixed by value, so it takes no min, max or generate: a parameter is either fixed {value} or free {min, max[, generate]}"
	priorDists                   = "fixed, normal, uniform, lognormal"
	generateDists                = "uniform, normal, loguniform"
	measuresText                 = "rt, accuracy, eeg"
	budgetFormula                = "participants × hypotheses² summed over designs"
)

// VaryFields lists the design fields a vary block may change.
var VaryFields = []string{"cti_ms", "cti_weights", "trials_per_cti", "measures", "validity", "participants", "streams", "items", "presentation_ms"}

type checker struct{ out []Problem }

func (c *checker) add(path, format string, args ...any) {
	c.out = append(c.out, Problem{Path: path, Problem: fmt.Sprintf(format, args...)})
}

func join(prefix, rel string) string {
	switch {
	case prefix == "":
		return rel
	case rel == "":
		return prefix
	case strings.HasPrefix(rel, "["):
		return prefix + rel
	}
	return prefix + "." + rel
}

// g prints a float as Go's shortest round-tripping form; g3 with three
// significant digits, for bounds derived by division (1/3 → 0.333).
func g(v float64) string  { return strconv.FormatFloat(v, 'g', -1, 64) }
func g3(v float64) string { return strconv.FormatFloat(v, 'g', 3, 64) }

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

func intRange(c *checker, path, name string, v, lo, hi int) bool {
	if v < lo || v > hi {
		c.add(path, "%s must be in %d..%d, got %d", name, lo, hi, v)
		return false
	}
	return true
}

func countText(subject string, lo, hi, n int) string {
	noun := func(k int) string {
		if k == 1 {
			return "entry"
		}
		return "entries"
	}
	switch {
	case hi < 0:
		return fmt.Sprintf("%s must have at least %d %s, got %d", subject, lo, noun(lo), n)
	case lo < 0:
		return fmt.Sprintf("%s must have at most %d %s, got %d", subject, hi, noun(hi), n)
	}
	return fmt.Sprintf("%s must have %d..%d entries, got %d", subject, lo, hi, n)
}

// Validate runs the semantic checks on a decoded, defaults-filled study and
// returns every problem found, in the order of the file.
func (s *Study) Validate() []Problem {
	c := &checker{}
	h := len(s.Hypotheses)

	if n := len(s.Designs); n < 1 || n > maxDesigns {
		c.add("designs", "%s", countText("designs", 1, maxDesigns, n))
	}
	expanded := make([][]Design, len(s.Designs))
	type named struct{ name, where, path string }
	var names []named
	for i := range s.Designs {
		d := s.Designs[i]
		prefix := fmt.Sprintf("designs[%d]", i)
		base := designProblems(&d)
		for _, p := range base {
			c.add(join(prefix, p.Path), "%s", p.Problem)
		}
		if len(d.Vary) == 0 {
			expanded[i] = []Design{d}
			names = append(names, named{d.Name, prefix, join(prefix, "name")})
			continue
		}
		variants, probs := expandDesign(d)
		for _, p := range probs {
			c.add(join(prefix, p.Path), "%s", p.Problem)
		}
		for _, v := range variants {
			expanded[i] = append(expanded[i], v.design)
			names = append(names, named{v.design.Name, join(prefix, v.valuePath), join(prefix, v.namePath)})
			if len(base) > 0 {
				// The variants repeat the design's problems; checking each
				// would cost variants × the design's size. Their own
				// problems show once the design is right.
				continue
			}
			for _, p := range designProblems(&v.design) {
				c.add(join(prefix, v.valuePath), "variant %q: %s", v.design.Name, p.Problem)
			}
		}
	}
	firstUse := map[string]string{}
	for _, n := range names {
		if n.name == "" {
			c.add(n.path, "name must not be empty")
			continue
		}
		if l := utf8.RuneCountInString(n.name); l > MaxVariantNameLength {
			c.add(n.path, "the variant's name %q… is %d characters; the cap is %d: give the vary block labels", truncateRunes(n.name, 40), l, MaxVariantNameLength)
			continue
		}
		if w, dup := firstUse[n.name]; dup {
			c.add(n.path, "name %q is used by %s too; design names, variants included, must be unique", n.name, w)
			continue
		}
		firstUse[n.name] = n.where
	}

	if h < minHypotheses || h > maxHypotheses {
		c.add("hypotheses", "%s", countText("hypotheses", minHypotheses, maxHypotheses, h))
	}
	hypNames := map[string]int{}
	for j := range s.Hypotheses {
		hy := &s.Hypotheses[j]
		prefix := fmt.Sprintf("hypotheses[%d]", j)
		switch k, dup := hypNames[hy.Name]; {
		case hy.Name == "":
			c.add(prefix+".name", "name must not be empty")
		case dup:
			c.add(prefix+".name", "name %q is used by hypotheses[%d] too; hypothesis names must be unique", hy.Name, k)
		default:
			hypNames[hy.Name] = j
		}
		hypothesisProblems(c, prefix, hy, s.Designs)
	}

	var all []Design
	for _, e := range expanded {
		all = append(all, e...)
	}
	if len(all) > MaxVariants {
		// LoadStudy refuses such a file before decoding; this is for a
		// study built in Go.
		c.add("designs", "the designs expand to %d variants; the cap is %d variants per study", len(all), MaxVariants)
	}
	replicationProblems(c, &s.Replication, all)
	rankingProblems(c, &s.Ranking)

	if f := DesignsFits(all, h); f > MaxFits {
		c.add("", "the study needs %s fits (%s, %d designs with vary blocks expanded); the limit is %s", thousands(f), budgetFormula, len(all), thousands(MaxFits))
	}
	return c.out
}

// designProblems checks one design; paths are relative to the design.
func designProblems(d *Design) []Problem {
	c := &checker{}
	L := d.Streams
	streamsOK := intRange(c, "streams", "streams", L, minStreams, maxStreams)

	itemsLo := minStreams
	if streamsOK {
		itemsLo = L
	}
	if d.Items < itemsLo || d.Items > maxItems {
		c.add("items", "items must be in [streams, %d] = [%d, %d]%s, got %d", maxItems, itemsLo, maxItems, d.streamsNote(streamsOK), d.Items)
	}
	itemsOK := d.Items >= 2 && d.Items <= maxItems

	if streamsOK {
		lo := 1 / float64(L)
		if !(d.Validity >= lo-validityTolerance && d.Validity <= 1) {
			c.add("validity", "validity must be in [1/streams, 1] = [%s, 1]%s, got %s", g3(lo), d.streamsNote(true), g(d.Validity))
		}
	} else if !(d.Validity > 0 && d.Validity <= 1) {
		c.add("validity", "validity must be in (0, 1], got %s", g(d.Validity))
	}

	epoch := d.EpochMs
	epochOK := intRange(c, "epoch_ms", "epoch_ms", epoch, 1, maxEpochMs)

	if len(d.CTIms) == 0 {
		c.add("cti_ms", "cti_ms must list at least one CTI")
	}
	seen := map[int]int{}
	minCTI := 0
	for i, t := range d.CTIms {
		p := fmt.Sprintf("cti_ms[%d]", i)
		if t <= 0 {
			c.add(p, "%s must be > 0, got %d", p, t)
			continue
		}
		if epochOK && t%epoch != 0 {
			c.add(p, "%s must be a whole multiple of %s, got %d", p, d.ref("epoch_ms", epoch), t)
		}
		if j, dup := seen[t]; dup {
			c.add("cti_ms", "cti_ms must not repeat a value: cti_ms[%d] and cti_ms[%d] are both %d", j, i, t)
		} else {
			seen[t] = i
		}
		if minCTI == 0 || t < minCTI {
			minCTI = t
		}
	}

	if len(d.CTIWeights) != len(d.CTIms) {
		c.add("cti_weights", "cti_weights must have one weight per CTI (%d in cti_ms), got %d", len(d.CTIms), len(d.CTIWeights))
	}
	sum, weightsOK := 0.0, true
	for i, w := range d.CTIWeights {
		if !(w >= 0) || math.IsInf(w, 1) {
			c.add(fmt.Sprintf("cti_weights[%d]", i), "cti_weights[%d] must be >= 0, got %s", i, g(w))
			weightsOK = false
			continue
		}
		sum += w
	}
	if weightsOK && len(d.CTIWeights) > 0 && !(sum > 0) {
		c.add("cti_weights", "cti_weights must sum to more than 0, got %s", g(sum))
	}

	intRange(c, "trials_per_cti", "trials_per_cti", d.TrialsPerCTI, 1, maxTrialsPerCTI)
	intRange(c, "participants", "participants", d.Participants, 1, maxParticipants)

	if len(d.Measures) == 0 {
		c.add("measures", "measures must list at least one of %s", measuresText)
	}
	seenM := map[string]int{}
	for i, m := range d.Measures {
		if !slices.Contains(Measures, m) {
			c.add(fmt.Sprintf("measures[%d]", i), "measures[%d] must be one of %s, got %q", i, measuresText, m)
			continue
		}
		if j, dup := seenM[m]; dup {
			c.add("measures", "measures must not repeat a value: measures[%d] and measures[%d] are both %q", j, i, m)
		} else {
			seenM[m] = i
		}
	}

	timed := func(name string, v int) bool {
		if v <= 0 {
			c.add(name, "%s must be > 0, got %d", name, v)
			return false
		}
		if epochOK && v%epoch != 0 {
			c.add(name, "%s must be a whole multiple of %s, got %d", name, d.ref("epoch_ms", epoch), v)
			return false
		}
		return true
	}
	presOK := timed("presentation_ms", d.PresentationMs)
	windowOK := timed("response_window_ms", d.ResponseWindowMs)
	if presOK && windowOK && d.ResponseWindowMs < d.PresentationMs {
		c.add("response_window_ms", "response_window_ms must be >= %s, got %d", d.ref("presentation_ms", d.PresentationMs), d.ResponseWindowMs)
	}
	if timed("eeg_bin_ms", d.EEGBinMs) && d.HasMeasure("eeg") && minCTI > 0 && d.EEGBinMs > minCTI {
		c.add("eeg_bin_ms", "eeg_bin_ms must be <= the shortest CTI (%d ms) when eeg is measured, got %d", minCTI, d.EEGBinMs)
	}
	if d.CueMs != 0 {
		timed("cue_ms", d.CueMs)
	}
	intRange(c, "iti_ms", "iti_ms", d.ITIms, 1, maxTimeMs)

	agentProblems(c, d, streamsOK, itemsOK)
	measurementProblems(c, &d.Measurement)
	for i, p := range c.out {
		if f := d.defaultedField(p.Path); f != "" {
			c.out[i].Problem += fmt.Sprintf(" (%s is not in the file: that is its default)", f)
		}
	}
	return c.out
}

// defaultedField returns the defaulted field a path (relative to the
// design) lies in, "" when the file gave it.
func (d *Design) defaultedField(path string) string {
	for f := range d.defaulted {
		if (path == f || strings.HasPrefix(path, f+".") || strings.HasPrefix(path, f+"[")) && d.Defaulted(f) {
			return f
		}
	}
	return ""
}

// streamsNote marks the streams a bound derives from as the default.
func (d *Design) streamsNote(ok bool) string {
	if ok && d.Defaulted("streams") {
		return fmt.Sprintf(" with streams = %d (the default)", d.Streams)
	}
	return ""
}

func agentProblems(c *checker, d *Design, streamsOK, itemsOK bool) {
	a := &d.Agent
	if streamsOK {
		lo := 1 / float64(d.Streams)
		if !(a.CueReliability > lo && a.CueReliability <= 1) {
			c.add("agent.cue_reliability", "cue_reliability must be in (1/streams, 1] = (%s, 1]%s, got %s", g3(lo), d.streamsNote(true), g(a.CueReliability))
		}
	} else if !(a.CueReliability > 0 && a.CueReliability <= 1) {
		c.add("agent.cue_reliability", "cue_reliability must be in (0, 1], got %s", g(a.CueReliability))
	}
	itemsLo := 0.0
	if itemsOK {
		itemsLo = 1 / float64(d.Items)
	}
	if !(a.ItemFidelity > itemsLo && a.ItemFidelity <= 1) {
		c.add("agent.item_fidelity", "item_fidelity must be in (1/items, 1] = (%s, 1], got %s", g3(itemsLo), g(a.ItemFidelity))
	}
	if !(a.MarkerReliability > 0.5 && a.MarkerReliability <= 1) {
		c.add("agent.marker_reliability", "marker_reliability must be in (0.5, 1], got %s", g(a.MarkerReliability))
	}
	intRange(c, "agent.gain_levels", "gain_levels", a.GainLevels, minGainLevels, maxGainLevels)
	if !(a.GainMin > 0) || !finite(a.GainMin) {
		c.add("agent.gain_min", "gain_min must be > 0, got %s", g(a.GainMin))
	}
	if !(a.GainMax > a.GainMin) || !finite(a.GainMax) {
		c.add("agent.gain_max", "gain_max must be > %s, got %s", d.ref("agent.gain_min", g(a.GainMin)), g(a.GainMax))
	}
	intRange(c, "agent.iterations_per_epoch", "iterations_per_epoch", a.IterationsPerEpoch, 1, maxIterationsPerEpoch)
	if !(a.TimeConstant >= 1) || !finite(a.TimeConstant) {
		c.add("agent.time_constant", "time_constant must be >= 1, got %s", g(a.TimeConstant))
	}
	if !(a.Criterion > itemsLo && a.Criterion < 1) {
		c.add("agent.criterion", "criterion must be in (1/items, 1) = (%s, 1), got %s", g3(itemsLo), g(a.Criterion))
	}
	if !(a.ChoiceTemperature > 0) || !finite(a.ChoiceTemperature) {
		c.add("agent.choice_temperature", "choice_temperature must be > 0, got %s", g(a.ChoiceTemperature))
	}
	if !(a.PrecisionSD >= 0) || !finite(a.PrecisionSD) {
		c.add("agent.precision_sd", "precision_sd must be >= 0 (gain units; 0 = no trial-to-trial variability), got %s", g(a.PrecisionSD))
	}
}

// support is the set of values a measurement parameter may take.
type support struct {
	lo, hi         float64
	loOpen, hiOpen bool
}

var (
	anyReal  = support{math.Inf(-1), math.Inf(1), true, true}
	positive = support{0, math.Inf(1), true, true}
)

func (s support) aboveLo(v float64) bool { return v > s.lo || (!s.loOpen && v == s.lo) }
func (s support) belowHi(v float64) bool { return v < s.hi || (!s.hiOpen && v == s.hi) }
func (s support) contains(v float64) bool {
	return !math.IsNaN(v) && s.aboveLo(v) && s.belowHi(v)
}
func (s support) loText() string {
	if s.loOpen {
		return "> " + g(s.lo)
	}
	return ">= " + g(s.lo)
}
func (s support) hiText() string {
	if s.hiOpen {
		return "< " + g(s.hi)
	}
	return "<= " + g(s.hi)
}
func (s support) String() string {
	switch {
	case math.IsInf(s.lo, -1) && math.IsInf(s.hi, 1):
		return "any real number"
	case math.IsInf(s.hi, 1):
		return s.loText()
	}
	l, r := "[", "]"
	if s.loOpen {
		l = "("
	}
	if s.hiOpen {
		r = ")"
	}
	return "in " + l + g(s.lo) + ", " + g(s.hi) + r
}

// measurementPriors lists the priors in file order with their parameter's
// support (model.md §4: SDs and the RT scale are positive, a lapse rate is a
// probability below 1, an AR(1) coefficient is in (−1, 1) for a stationary series).
var measurementPriors = []struct {
	name string
	get  func(*Measurement) *Prior
	sup  support
}{
	{"rt_base", func(m *Measurement) *Prior { return &m.RTBase }, anyReal},
	{"rt_scale", func(m *Measurement) *Prior { return &m.RTScale }, positive},
	{"rt_sd", func(m *Measurement) *Prior { return &m.RTSD }, positive},
	{"lapse", func(m *Measurement) *Prior { return &m.Lapse }, support{0, 1, false, true}},
	{"eeg_offset", func(m *Measurement) *Prior { return &m.EEGOffset }, anyReal},
	{"eeg_gain", func(m *Measurement) *Prior { return &m.EEGGain }, anyReal},
	{"eeg_sd", func(m *Measurement) *Prior { return &m.EEGSD }, positive},
	{"eeg_ar", func(m *Measurement) *Prior { return &m.EEGAR }, support{-1, 1, true, true}},
}

func measurementProblems(c *checker, m *Measurement) {
	for _, mp := range measurementPriors {
		priorProblems(c, "measurement."+mp.name, mp.name, mp.get(m), mp.sup)
	}
}

func priorProblems(c *checker, path, name string, p *Prior, sup support) {
	bounded := func(bound string) {
		b, v := p.Min, sup.aboveLo
		text := sup.loText()
		if bound == "max" {
			b, v, text = p.Max, sup.belowHi, sup.hiText()
		}
		if b == nil {
			c.add(path+"."+bound, "%s: a %s prior on %s must be truncated with %s %s (%s must be %s)", name, p.Dist, name, bound, text, name, sup)
			return
		}
		if !v(*b) || math.IsNaN(*b) {
			c.add(path+"."+bound, "%s %s must be %s (%s must be %s), got %s", name, bound, text, name, sup, g(*b))
		}
	}
	switch p.Dist {
	case "fixed":
		if !sup.contains(p.Value) || !finite(p.Value) {
			c.add(path+".value", "%s value must be %s, got %s", name, sup, g(p.Value))
		}
	case "normal":
		if !(p.SD > 0) || !finite(p.SD) {
			c.add(path, "%s: dist normal needs sd > 0, got %s", name, g(p.SD))
		}
		if p.Min != nil && p.Max != nil && !(*p.Min < *p.Max) {
			c.add(path, "%s: min must be < max, got min = %s, max = %s", name, g(*p.Min), g(*p.Max))
		}
		if !math.IsInf(sup.lo, -1) {
			bounded("min")
		}
		if !math.IsInf(sup.hi, 1) {
			bounded("max")
		}
	case "uniform":
		var missing []string
		if p.Min == nil {
			missing = append(missing, "min")
		}
		if p.Max == nil {
			missing = append(missing, "max")
		}
		if len(missing) > 0 {
			c.add(path, "%s: dist uniform needs %s", name, joinNames(missing))
			return
		}
		if !(*p.Min < *p.Max) || !finite(*p.Min) || !finite(*p.Max) {
			c.add(path, "%s: min must be < max, got min = %s, max = %s", name, g(*p.Min), g(*p.Max))
		}
		if !math.IsInf(sup.lo, -1) {
			bounded("min")
		}
		if !math.IsInf(sup.hi, 1) {
			bounded("max")
		}
	case "lognormal":
		if !(p.Sigma > 0) || !finite(p.Sigma) {
			c.add(path, "%s: dist lognormal needs sigma > 0, got %s", name, g(p.Sigma))
		}
		// A lognormal takes every value in (0, ∞).
		if sup.lo > 0 || !math.IsInf(sup.hi, 1) {
			c.add(path+".dist", "%s: a lognormal prior takes every value > 0, but %s must be %s; use uniform or a truncated normal", name, name, sup)
		}
	default:
		c.add(path+".dist", "%s dist must be one of %s, got %q", name, priorDists, p.Dist)
	}
}

func hypothesisProblems(c *checker, prefix string, hy *Hypothesis, designs []Design) {
	fam, ok := LookupFamily(hy.Family)
	if !ok {
		c.add(prefix+".family", "family must be one of %s, got %q", strings.Join(Families, ", "), hy.Family)
		return
	}
	knotsOK := knotsProblems(c, prefix, hy, fam, designs)
	spec := fam.Params(*hy)
	pp := prefix + ".params"
	var missing, extra []string
	for _, ps := range spec {
		if _, ok := hy.Params[ps.Name]; ps.Required() && !ok && knotsOK {
			missing = append(missing, ps.Name)
		}
	}
	for name := range hy.Params {
		if _, ok := findParam(spec, name); !ok && (knotsOK || !fam.matchesPattern(name)) {
			extra = append(extra, name)
		}
	}
	if len(missing) > 0 {
		c.add(pp, "%s", familyNeedsMessage(hy.Family, missing))
	}
	if len(extra) > 0 {
		sort.Strings(extra)
		c.add(pp, "%s", unknownParamsMessage(*hy, extra))
	}
	wellFormed := map[string]bool{}
	for _, ps := range spec {
		p, ok := hy.Params[ps.Name]
		if !ok {
			continue
		}
		wellFormed[ps.Name] = paramProblems(c, pp+"."+ps.Name, ps, p)
		if wellFormed[ps.Name] && ps.Gain && ps.Name != "low" && ps.Name != "high" {
			gainRangeProblem(c, pp+"."+ps.Name, ps.Name, p, designs)
		}
	}
	gainProblems(c, pp, hy, wellFormed, designs)
}

// knotsProblems checks knots_s: required for a family that uses knots (2..12
// times in seconds, strictly increasing, within [0, the longest CTI] of every
// design), not allowed for the others. It reports whether the knot list is
// good enough to name the family's parameters.
func knotsProblems(c *checker, prefix string, hy *Hypothesis, fam Family, designs []Design) bool {
	kp := prefix + ".knots_s"
	if !fam.UsesKnots {
		if hy.KnotsS != nil {
			c.add(kp, "knots_s is only for family knots, not %s", fam.Name)
		}
		return true
	}
	n := len(hy.KnotsS)
	if n < MinKnots || n > MaxKnots {
		if hy.KnotsS == nil {
			c.add(kp, "family knots needs knots_s, the knot times in seconds from cue onset (%d..%d, strictly increasing)", MinKnots, MaxKnots)
		} else {
			c.add(kp, "%s", countText("knots_s", MinKnots, MaxKnots, n))
		}
		return false
	}
	longest, from := math.Inf(1), ""
	for _, d := range designs {
		if t := float64(maxInt(d.CTIms)) / 1000; len(d.CTIms) > 0 && t > 0 && t < longest {
			longest, from = t, d.Name
		}
	}
	for i, t := range hy.KnotsS {
		p := fmt.Sprintf("%s[%d]", kp, i)
		switch {
		case !finite(t) || t < 0:
			c.add(p, "knots_s[%d] must be a finite number of seconds >= 0, got %s", i, g(t))
		case i > 0 && !(t > hy.KnotsS[i-1]):
			c.add(p, "knots_s must be strictly increasing: knots_s[%d] = %s is not above knots_s[%d] = %s", i, g(t), i-1, g(hy.KnotsS[i-1]))
		case t > longest:
			c.add(p, "knots_s[%d] = %s s is beyond the longest CTI of design %q (%s s); knots are in seconds and must lie within [0, the longest CTI]", i, g(t), from, g(longest))
		}
	}
	return true
}

// matchesPattern reports whether name fits the family's parameter pattern
// (false for a family with a fixed list).
func (f Family) matchesPattern(name string) bool {
	if f.ParamPattern == "" {
		return false
	}
	return regexp.MustCompile(f.ParamPattern).MatchString(name)
}

// gainRangeProblem checks that every value a gain-unit parameter can take
// lies within [gain_min, gain_max] of every design.
func gainRangeProblem(c *checker, path, name string, p Param, designs []Design) {
	lo, hi := span(p)
	var bad []string
	first := ""
	for _, d := range designs {
		a := d.Agent
		if !(a.GainMin > 0 && a.GainMax > a.GainMin) {
			continue // reported for the design itself
		}
		if lo < a.GainMin || hi > a.GainMax {
			if first == "" {
				first = fmt.Sprintf("design %q has [%s, %s]%s", d.Name, g(a.GainMin), g(a.GainMax), d.defaultNote("agent.gain_min"))
			}
			bad = append(bad, d.Name)
		}
	}
	if len(bad) > 0 {
		more := ""
		if len(bad) > 1 {
			more = fmt.Sprintf(" (and %d more)", len(bad)-1)
		}
		c.add(path, "%s must be within [gain_min, gain_max] of every design; %s%s", spanText(name, p), first, more)
	}
}

// paramProblems checks one parameter and reports whether it is well formed.
func paramProblems(c *checker, path string, ps ParamSpec, p Param) bool {
	name := ps.Name
	ok := true
	signCheck := func(field string, v float64) {
		switch {
		case !finite(v):
			c.add(path+"."+field, "%s %s must be a finite number, got %s", name, field, g(v))
		case ps.Sign == Positive && !(v > 0):
			c.add(path+"."+field, "%s %s must be > 0, got %s", name, field, g(v))
		case ps.Sign == NonNegative && !(v >= 0):
			c.add(path+"."+field, "%s %s must be >= 0, got %s", name, field, g(v))
		default:
			return
		}
		ok = false
	}
	if p.Value != nil {
		if p.Min != nil || p.Max != nil || p.Generate != nil {
			c.add(path, "%s %s", name, fixedAndFreeText)
			return false
		}
		signCheck("value", *p.Value)
		return ok
	}
	var missing []string
	if p.Min == nil {
		missing = append(missing, "min")
	}
	if p.Max == nil {
		missing = append(missing, "max")
	}
	if len(missing) > 0 {
		c.add(path, "%s", paramNeedsMessage(name, missing))
		return false
	}
	signCheck("min", *p.Min)
	signCheck("max", *p.Max)
	if !(*p.Min < *p.Max) {
		c.add(path, "%s min must be < max, got min = %s, max = %s", name, g(*p.Min), g(*p.Max))
		ok = false
	}
	if gen := p.Generate; gen != nil {
		ok = generateProblems(c, path, name, p, ok) && ok
	}
	return ok
}

// generateProblems checks a free parameter's generating distribution: its
// dist, a normal's sd and mean, and the optional sub-range [generate.min,
// generate.max] inside the fit's range. rangeOK says the fit's range itself
// is well formed. It reports whether the distribution is well formed.
func generateProblems(c *checker, path, name string, p Param, rangeOK bool) bool {
	gen := p.Generate
	gp := path + ".generate"
	ok := true
	switch gen.Dist {
	case "uniform", "loguniform":
	case "normal":
		if !(gen.SD > 0) || !finite(gen.SD) {
			c.add(gp, "generate: dist normal needs sd > 0, got %s", g(gen.SD))
			ok = false
		}
		if !finite(gen.Mean) {
			c.add(gp+".mean", "generate mean must be a finite number, got %s", g(gen.Mean))
			ok = false
		}
	case "":
		c.add(gp, "generate needs field %q", "dist")
		return false
	default:
		c.add(gp+".dist", "generate dist must be one of %s, got %q", generateDists, gen.Dist)
		return false
	}
	if !rangeOK {
		return ok
	}
	lo, hi := *p.Min, *p.Max
	fit := fmt.Sprintf("the fit's range [min, max] = [%s, %s]", g(lo), g(hi))
	subOK := true
	for _, b := range []struct {
		field string
		v     *float64
	}{{"min", gen.Min}, {"max", gen.Max}} {
		if b.v == nil {
			continue
		}
		if !finite(*b.v) || *b.v < lo || *b.v > hi {
			c.add(gp+"."+b.field, "generate %s must lie within %s, got %s", b.field, fit, g(*b.v))
			subOK = false
		}
	}
	if !subOK {
		return false
	}
	glo, ghi := p.GenerateRange()
	if !(glo < ghi) {
		c.add(gp, "generate min must be < generate max (the generating range), got [%s, %s]", g(glo), g(ghi))
		return false
	}
	where := fit
	if gen.Min != nil || gen.Max != nil {
		where = fmt.Sprintf("the generating range [%s, %s]", g(glo), g(ghi))
	}
	switch gen.Dist {
	case "loguniform":
		// The fit's own range must be positive too: its prediction grid
		// is spaced on the log scale over [min, max].
		if !(lo > 0) {
			c.add(path+".min", "%s min must be > 0 for a loguniform generate distribution, got %s", name, g(lo))
			return false
		}
	case "normal":
		if ok && (gen.Mean < glo || gen.Mean > ghi) {
			c.add(gp+".mean", "generate mean = %s must lie within %s; a normal truncated far from its mean piles its draws at one bound", g(gen.Mean), where)
			return false
		}
	}
	return ok
}

// span is the set of values a parameter can take: [v, v] when fixed.
func span(p Param) (lo, hi float64) {
	if p.Value != nil {
		return *p.Value, *p.Value
	}
	return *p.Min, *p.Max
}

func spanText(name string, p Param) string {
	lo, hi := span(p)
	if p.Value != nil {
		return fmt.Sprintf("%s = %s", name, g(lo))
	}
	return fmt.Sprintf("%s range [%s, %s]", name, g(lo), g(hi))
}

// gainProblems checks γ_lo and γ_hi: each within [gain_min, gain_max] of
// every design, and γ_lo below γ_hi for every value either can take (an
// omitted one is the design's gain_min or gain_max).
func gainProblems(c *checker, pp string, hy *Hypothesis, wellFormed map[string]bool, designs []Design) {
	low, hasLow := hy.Params["low"]
	high, hasHigh := hy.Params["high"]
	hasLow = hasLow && wellFormed["low"]
	hasHigh = hasHigh && wellFormed["high"]
	if !hasLow && !hasHigh {
		return
	}
	outside := map[string]bool{}
	for _, bound := range []string{"low", "high"} {
		p, has := low, hasLow
		if bound == "high" {
			p, has = high, hasHigh
		}
		if !has {
			continue
		}
		lo, hi := span(p)
		var bad []string
		first := ""
		for _, d := range designs {
			a := d.Agent
			if !(a.GainMin > 0 && a.GainMax > a.GainMin) {
				continue // reported for the design itself
			}
			if lo < a.GainMin || hi > a.GainMax {
				if first == "" {
					first = fmt.Sprintf("design %q has [%s, %s]%s", d.Name, g(a.GainMin), g(a.GainMax), d.defaultNote("agent.gain_min"))
				}
				bad = append(bad, d.Name)
			}
		}
		if len(bad) > 0 {
			outside[bound] = true
			more := ""
			if len(bad) > 1 {
				more = fmt.Sprintf(" (and %d more)", len(bad)-1)
			}
			c.add(pp+"."+bound, "%s must be within [gain_min, gain_max] of every design; %s%s", spanText(bound, p), first, more)
		}
	}
	if hasLow && hasHigh {
		_, loTop := span(low)
		hiBottom, _ := span(high)
		if !(loTop < hiBottom) {
			if low.Value != nil && high.Value != nil {
				c.add(pp+".low", "low must be < high, got low = %s, high = %s", g(loTop), g(hiBottom))
			} else {
				c.add(pp+".low", "low must stay below high: low can reach %s but high can be as small as %s", g(loTop), g(hiBottom))
			}
		}
		return
	}
	if outside["low"] || outside["high"] {
		return // the omitted bound is a gain limit the given one already crosses
	}
	for _, d := range designs {
		a := d.Agent
		if !(a.GainMin > 0 && a.GainMax > a.GainMin) {
			continue
		}
		if hasLow {
			if _, loTop := span(low); !(loTop < a.GainMax) {
				c.add(pp+".low", "low must be < high; high is omitted, so it is gain_max = %s of design %q, but low can reach %s", g(a.GainMax), d.Name, g(loTop))
				return
			}
		} else if hiBottom, _ := span(high); !(a.GainMin < hiBottom) {
			c.add(pp+".high", "high must be > low; low is omitted, so it is gain_min = %s of design %q, but high can be as small as %s", g(a.GainMin), d.Name, g(hiBottom))
			return
		}
	}
}

func rankingProblems(c *checker, r *Ranking) {
	if !slices.Contains(RankingObjectives, r.Objective) {
		c.add("ranking.objective", "objective must be one of %s, got %q", strings.Join(RankingObjectives, ", "), r.Objective)
	}
	if !(r.Target > 0 && r.Target <= 1) {
		c.add("ranking.target", "target must be in (0, 1], got %s", g(r.Target))
	}
}

func replicationProblems(c *checker, r *Replication, designs []Design) {
	c.out = append(c.out, r.Problems(designs)...)
}

// Problems returns every replication setting out of range for the
// (expanded) designs, with its path: the one rule for the validator and
// the group sweep. A group needs at least two participants, and no more
// than any design has (groups are drawn from the design's synthetic
// participants).
func (r *Replication) Problems(designs []Design) []Problem {
	c := &checker{}
	if len(r.GroupSizes) == 0 {
		c.add("replication.group_sizes", "group_sizes must list at least one group size")
	}
	for k, n := range r.GroupSizes {
		p := fmt.Sprintf("replication.group_sizes[%d]", k)
		if n < 2 {
			c.add(p, "group_sizes[%d] must be >= 2, got %d", k, n)
			continue
		}
		for _, d := range designs {
			if d.Participants >= 1 && n > d.Participants {
				note := ""
				if r.groupSizesDefault {
					note = fmt.Sprintf(" (group_sizes is not in the file and defaults to %s: 5, 10, 20, ... up to half the smallest design's participants, at least 2)", intsText(r.GroupSizes))
				}
				c.add(p, "group_sizes[%d] = %d must be <= participants of every design; design %q has %d%s%s", k, n, d.Name, d.Participants, d.defaultNote("participants"), note)
				break
			}
		}
	}
	intRange(c, "replication.replicates", "replicates", r.Replicates, 1, maxReplicates)
	if !(r.PXPThreshold > 0 && r.PXPThreshold < 1) {
		c.add("replication.pxp_threshold", "pxp_threshold must be in (0, 1), got %s", g(r.PXPThreshold))
	}
	if !(r.TargetRate > 0 && r.TargetRate <= 1) {
		c.add("replication.target_rate", "target_rate must be in (0, 1], got %s", g(r.TargetRate))
	}
	return c.out
}

// Fits is the number of fits that participants synthetic participants of
// each of generators generating hypotheses take when every candidate of
// candidates is fitted to each:
//
//	fits = participants × generators × candidates
//
// saturating at MaxInt (0 for negative counts). A design of a study with h
// hypotheses runs Fits(participants, h, h); a shard of one generator runs
// Fits(n, 1, h).
func Fits(participants, generators, candidates int) int {
	p, g, c := max(participants, 0), max(generators, 0), max(candidates, 0)
	if p == 0 || g == 0 || c == 0 {
		return 0
	}
	if g > math.MaxInt/c || p > math.MaxInt/(g*c) {
		return math.MaxInt
	}
	return p * g * c
}

// DesignsFits is Σ over designs of Fits(participants, h, h), saturating at
// MaxInt.
func DesignsFits(designs []Design, h int) int {
	total := 0
	for _, d := range designs {
		f := Fits(d.Participants, h, h)
		if f > math.MaxInt-total {
			return math.MaxInt
		}
		total += f
	}
	return total
}

// TotalFits is the study's compute budget: Σ over designs, vary blocks
// expanded, of participants × hypotheses² (each participant of each
// generating hypothesis is fitted by every candidate). A design whose vary
// blocks do not expand counts once.
func (s *Study) TotalFits() int {
	var all []Design
	for _, d := range s.Designs {
		ds, err := d.Expand()
		if err != nil {
			ds = []Design{d}
		}
		all = append(all, ds...)
	}
	return DesignsFits(all, len(s.Hypotheses))
}

func intsText(xs []int) string {
	parts := make([]string, len(xs))
	for i, x := range xs {
		parts[i] = strconv.Itoa(x)
	}
	return "[" + strings.Join(parts, ", ") + "]"
}

// thousands prints n with comma separators: 5000000 → "5,000,000".
func thousands(n int) string {
	s := strconv.Itoa(n)
	neg := strings.HasPrefix(s, "-")
	s = strings.TrimPrefix(s, "-")
	var b strings.Builder
	for i, r := range s {
		if i > 0 && (len(s)-i)%3 == 0 {
			b.WriteByte(',')
		}
		b.WriteRune(r)
	}
	if neg {
		return "-" + b.String()
	}
	return b.String()
}
