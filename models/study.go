package models

import (
	"bytes"
	"encoding/json"
	"fmt"
	"sort"
	"strings"
)

// Study is the file a user submits: designs to compare, hypotheses that act
// both as generators and as candidates, the group-level replication settings
// and the seed from which every random draw derives.
type Study struct {
	Name        string       `json:"name"`
	Seed        uint64       `json:"seed"`
	Designs     []Design     `json:"designs"`
	Hypotheses  []Hypothesis `json:"hypotheses"`
	Replication Replication  `json:"replication"`
	Ranking     Ranking      `json:"ranking"`
}

// Ranking says how designs are compared (model.md §8).
type Ranking struct {
	// Objective is one of RankingObjectives; default "cheapest_reaching".
	Objective string `json:"objective"`
	// Target is the BIC recovery rate a design must reach under
	// cheapest_reaching; default 0.8.
	Target float64 `json:"target"`
}

// The ranking objectives: normalised mutual information under BIC; the
// same per minute of testing; the worst diagonal of the BIC confusion
// matrix; and the cheapest design (fewest minutes per participant) whose
// BIC recovery rate reaches the target, or the most informative when none
// does.
const (
	ObjectiveInformation          = "information"
	ObjectiveInformationPerMinute = "information_per_minute"
	ObjectiveWorstRecovery        = "worst_recovery"
	ObjectiveCheapestReaching     = "cheapest_reaching"
)

// RankingObjectives lists the ranking objectives in documented order.
var RankingObjectives = []string{ObjectiveInformation, ObjectiveInformationPerMinute, ObjectiveWorstRecovery, ObjectiveCheapestReaching}

// Design is one experiment being planned (model.md §1). Times are in
// milliseconds. A zero field means its documented default (see Defaults).
type Design struct {
	Name             string    `json:"name"`
	Streams          int       `json:"streams"`
	Items            int       `json:"items"`
	Validity         float64   `json:"validity"`
	CTIms            []int     `json:"cti_ms"`
	CTIWeights       []float64 `json:"cti_weights,omitempty"`
	TrialsPerCTI     int       `json:"trials_per_cti"`
	Participants     int       `json:"participants"`
	Measures         []string  `json:"measures"`
	PresentationMs   int       `json:"presentation_ms"`
	ResponseWindowMs int       `json:"response_window_ms"`
	EpochMs          int       `json:"epoch_ms"`
	EEGBinMs         int       `json:"eeg_bin_ms"`
	CueMs            int       `json:"cue_ms,omitempty"`
	// ITIms is the inter-trial interval, counted in the minutes of testing
	// only; default 1000.
	ITIms       int         `json:"iti_ms"`
	Agent       Agent       `json:"agent"`
	Measurement Measurement `json:"measurement"`
	// Vary expands this design into variants, one per listed alternative
	// value of a field (model.md §8). Empty means the design stands alone.
	Vary []Variation `json:"vary,omitempty"`
	// defaulted maps each field FillDefaults filled in because the file
	// omitted it ("epoch_ms", "agent.gain_min") to the JSON of the default
	// it took, so messages can say a value is a default rather than
	// something the user wrote (while the field still holds it).
	defaulted map[string]string
}

// Defaulted reports whether field (a path relative to the design, such as
// "epoch_ms" or "agent.criterion") holds the default it took because the
// file omitted it.
func (d *Design) Defaulted(field string) bool {
	want, ok := d.defaulted[field]
	if !ok {
		return false
	}
	return d.fieldJSON(field) == want
}

// fieldJSON is the JSON of the field at a path relative to the design.
func (d *Design) fieldJSON(field string) string { return fieldIn(d.tree(), field) }

// tree is the design as parsed JSON.
func (d *Design) tree() any {
	b, err := json.Marshal(d)
	if err != nil {
		return nil
	}
	var v any
	if json.Unmarshal(b, &v) != nil {
		return nil
	}
	return v
}

// fieldIn is the JSON of the field at a dotted path of a parsed design.
func fieldIn(v any, field string) string {
	for _, k := range strings.Split(field, ".") {
		m, _ := v.(map[string]any)
		v = m[k]
	}
	out, _ := json.Marshal(v)
	return string(out)
}

// defaultNote is " (the default)" for a defaulted field, "" otherwise.
func (d *Design) defaultNote(field string) string {
	if d.Defaulted(field) {
		return " (the default)"
	}
	return ""
}

// ref renders another field's value in a message, "epoch_ms = 50", marked
// as a default when the file omitted it.
func (d *Design) ref(field string, v any) string {
	return fmt.Sprintf("%s = %v%s", field[strings.LastIndexByte(field, '.')+1:], v, d.defaultNote(field))
}

// Variation lists alternative values for one design field. Each value
// replaces the field in a copy of the design; Label names the copy.
type Variation struct {
	Field  string            `json:"field"`
	Values []json.RawMessage `json:"values"`
	Labels []string          `json:"labels,omitempty"`
}

// Agent holds the listening agent's constants (model.md §3).
type Agent struct {
	CueReliability     float64 `json:"cue_reliability"`
	ItemFidelity       float64 `json:"item_fidelity"`
	MarkerReliability  float64 `json:"marker_reliability"`
	GainLevels         int     `json:"gain_levels"`
	GainMin            float64 `json:"gain_min"`
	GainMax            float64 `json:"gain_max"`
	IterationsPerEpoch int     `json:"iterations_per_epoch"`
	TimeConstant       float64 `json:"time_constant"`
	Criterion          float64 `json:"criterion"`
	ChoiceTemperature  float64 `json:"choice_temperature"`
	// PrecisionSD is σ of model.md §3b: each trial's precision course is
	// shifted by δ ~ N(0, σ²) and clipped to [GainMin, GainMax]. Gain
	// units; 0 (the default) is the deterministic agent.
	PrecisionSD float64 `json:"precision_sd,omitempty"`
}

// Measurement holds the priors of the measurement parameters (model.md §4)
// from which each synthetic participant draws its own values.
type Measurement struct {
	RTBase    Prior `json:"rt_base"`
	RTScale   Prior `json:"rt_scale"`
	RTSD      Prior `json:"rt_sd"`
	Lapse     Prior `json:"lapse"`
	EEGOffset Prior `json:"eeg_offset"`
	EEGGain   Prior `json:"eeg_gain"`
	EEGSD     Prior `json:"eeg_sd"`
	EEGAR     Prior `json:"eeg_ar"`
}

// Prior is a distribution for one measurement parameter:
//
//	fixed:     value
//	normal:    mean, sd (truncated to [min, max] when both are given)
//	uniform:   min, max
//	lognormal: mu, sigma of ln X
type Prior struct {
	Dist  string   `json:"dist"`
	Value float64  `json:"value,omitempty"`
	Mean  float64  `json:"mean,omitempty"`
	SD    float64  `json:"sd,omitempty"`
	Min   *float64 `json:"min,omitempty"`
	Max   *float64 `json:"max,omitempty"`
	Mu    float64  `json:"mu,omitempty"`
	Sigma float64  `json:"sigma,omitempty"`
}

// Hypothesis is a precision family with its parameters (model.md §2).
type Hypothesis struct {
	Name   string `json:"name"`
	Family string `json:"family"`
	// KnotsS are the knot times t_i of the knots family, in seconds from
	// cue onset, strictly increasing; other families take none.
	KnotsS []float64        `json:"knots_s,omitempty"`
	Params map[string]Param `json:"params"`
}

// Param is either fixed (Value set) or free over [Min, Max] with a
// generating distribution for true values.
type Param struct {
	Value    *float64  `json:"value,omitempty"`
	Min      *float64  `json:"min,omitempty"`
	Max      *float64  `json:"max,omitempty"`
	Generate *Generate `json:"generate,omitempty"`
}

// Free reports whether the parameter is estimated.
func (p Param) Free() bool { return p.Value == nil }

// Generate is the distribution of true values over a free parameter's
// range: uniform, normal (mean, sd; truncated to the range) or loguniform.
// Min and Max, when given, narrow the generating range inside the fit's
// range (uniform and loguniform over [Min, Max], normal truncated to it),
// so that true values stay away from the bounds the fit can reach.
type Generate struct {
	Dist string   `json:"dist"`
	Mean float64  `json:"mean,omitempty"`
	SD   float64  `json:"sd,omitempty"`
	Min  *float64 `json:"min,omitempty"`
	Max  *float64 `json:"max,omitempty"`
}

// Replication holds the group-level settings (model.md §7).
type Replication struct {
	GroupSizes   []int   `json:"group_sizes"`
	Replicates   int     `json:"replicates"`
	PXPThreshold float64 `json:"pxp_threshold"`
	TargetRate   float64 `json:"target_rate"`
	// groupSizesDefault is true when the file omitted group_sizes.
	groupSizesDefault bool
}

// Measures lists the allowed measures.
var Measures = []string{"rt", "accuracy", "eeg"}

// DecodeStudy parses a study file strictly (unknown fields are errors) and
// fills defaults. It does not validate ranges; call Validate for that.
func DecodeStudy(data []byte) (*Study, error) {
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	var s Study
	if err := dec.Decode(&s); err != nil {
		return nil, fmt.Errorf("models: study file: %w", err)
	}
	if dec.More() {
		return nil, fmt.Errorf("models: study file: trailing data after the study object")
	}
	s.FillDefaults()
	return &s, nil
}

// FillDefaults replaces every zero field by its default. It is idempotent.
func (s *Study) FillDefaults() {
	if s.Name == "" {
		s.Name = "study"
	}
	for i := range s.Designs {
		s.Designs[i].FillDefaults()
		if s.Designs[i].Name == "" {
			s.Designs[i].Name = fmt.Sprintf("design-%d", i+1)
		}
	}
	for i := range s.Hypotheses {
		if s.Hypotheses[i].Name == "" {
			s.Hypotheses[i].Name = fmt.Sprintf("hypothesis-%d", i+1)
		}
	}
	r := &s.Replication
	if len(r.GroupSizes) == 0 {
		r.GroupSizes = DefaultGroupSizes(s.smallestPool())
		r.groupSizesDefault = true
	}
	if r.Replicates == 0 {
		r.Replicates = 500
	}
	if r.PXPThreshold == 0 {
		r.PXPThreshold = 0.95
	}
	if r.TargetRate == 0 {
		r.TargetRate = 0.8
	}
	if s.Ranking.Objective == "" {
		s.Ranking.Objective = ObjectiveCheapestReaching
	}
	if s.Ranking.Target == 0 {
		s.Ranking.Target = 0.8
	}
}

// smallestPool is the fewest synthetic participants per generator of any
// design or vary variant (0 when there is no design).
func (s *Study) smallestPool() int {
	p := 0
	for _, d := range s.Designs {
		ds, err := d.Expand()
		if err != nil {
			ds = []Design{d}
		}
		for _, x := range ds {
			if x.Participants > 0 && (p == 0 || x.Participants < p) {
				p = x.Participants
			}
		}
	}
	return p
}

// DefaultGroupSizes are the group sizes swept when a study names none, for
// a smallest pool of pool participants per generator: 5, 10, 20, 40, ...
// up to half the pool, ending at half the pool itself (in place of the last
// doubling when that is within a factor 1.5 below it), so that replicate groups
// never take more than half of the pool (beyond that they overlap so much
// that they stop being replicates). A pool below 10 gives the one size
// max(2, pool/2).
func DefaultGroupSizes(pool int) []int {
	half := pool / 2
	if half < 5 {
		return []int{max(2, half)}
	}
	var sizes []int
	for n := 5; n <= half; n *= 2 {
		sizes = append(sizes, n)
	}
	switch last := sizes[len(sizes)-1]; {
	case 2*half < 3*last: // half is close above the last doubling: take its place
		sizes[len(sizes)-1] = half
	case last < half:
		sizes = append(sizes, half)
	}
	return sizes
}

// Default design values. The measurement priors are ours (model.md gives
// none); they describe a healthy adult sample and are stated in the report.
const (
	DefaultStreams          = 3
	DefaultItems            = 8
	DefaultValidity         = 0.75
	DefaultTrialsPerCTI     = 40
	DefaultParticipants     = 100
	DefaultPresentationMs   = 400
	DefaultResponseWindowMs = 1500
	DefaultEpochMs          = 50
	DefaultEEGBinMs         = 100
	DefaultITIms            = 1000
)

// DefaultCTIms is the default set of cue-target intervals.
var DefaultCTIms = []int{300, 600, 900, 1200}

// FillDefaults replaces every zero field of the design by its default.
func (d *Design) FillDefaults() {
	if d.Streams == 0 {
		d.markDefault("streams")
		d.Streams = DefaultStreams
	}
	if d.Items == 0 {
		d.markDefault("items")
		d.Items = DefaultItems
	}
	if d.Validity == 0 {
		d.markDefault("validity")
		d.Validity = DefaultValidity
	}
	if len(d.CTIms) == 0 {
		d.markDefault("cti_ms")
		d.CTIms = append([]int(nil), DefaultCTIms...)
	}
	if len(d.CTIWeights) == 0 {
		d.markDefault("cti_weights")
		d.CTIWeights = make([]float64, len(d.CTIms))
		for i := range d.CTIWeights {
			d.CTIWeights[i] = 1
		}
	}
	if d.TrialsPerCTI == 0 {
		d.markDefault("trials_per_cti")
		d.TrialsPerCTI = DefaultTrialsPerCTI
	}
	if d.Participants == 0 {
		d.markDefault("participants")
		d.Participants = DefaultParticipants
	}
	if len(d.Measures) == 0 {
		d.markDefault("measures")
		d.Measures = []string{"rt", "accuracy"}
	}
	if d.PresentationMs == 0 {
		d.markDefault("presentation_ms")
		d.PresentationMs = DefaultPresentationMs
	}
	if d.ResponseWindowMs == 0 {
		d.markDefault("response_window_ms")
		d.ResponseWindowMs = DefaultResponseWindowMs
	}
	if d.EpochMs == 0 {
		d.markDefault("epoch_ms")
		d.EpochMs = DefaultEpochMs
	}
	if d.EEGBinMs == 0 {
		d.markDefault("eeg_bin_ms")
		d.EEGBinMs = DefaultEEGBinMs
	}
	if d.ITIms == 0 {
		d.markDefault("iti_ms")
		d.ITIms = DefaultITIms
	}
	a := &d.Agent
	if a.CueReliability == 0 && d.Streams > 0 {
		d.markDefault("agent.cue_reliability")
		// A likelihood ratio of 4/3 per glance: ρ/((1−ρ)/(L−1)) = 4/3.
		a.CueReliability = 4 / (3*float64(d.Streams) + 1)
	}
	if a.ItemFidelity == 0 {
		d.markDefault("agent.item_fidelity")
		a.ItemFidelity = 0.6
	}
	if a.MarkerReliability == 0 {
		d.markDefault("agent.marker_reliability")
		a.MarkerReliability = 0.7
	}
	if a.GainLevels == 0 {
		d.markDefault("agent.gain_levels")
		a.GainLevels = 9
	}
	if a.GainMin == 0 && a.GainMax == 0 {
		d.markDefault("agent.gain_min")
		d.markDefault("agent.gain_max")
		a.GainMin, a.GainMax = 0.1, 2.0
	}
	if a.IterationsPerEpoch == 0 {
		d.markDefault("agent.iterations_per_epoch")
		a.IterationsPerEpoch = 16
	}
	if a.TimeConstant == 0 {
		d.markDefault("agent.time_constant")
		a.TimeConstant = 4
	}
	if a.Criterion == 0 {
		d.markDefault("agent.criterion")
		a.Criterion = 0.9
	}
	if a.ChoiceTemperature == 0 {
		d.markDefault("agent.choice_temperature")
		a.ChoiceTemperature = 1
	}
	m := &d.Measurement
	fill := func(name string, p *Prior, def Prior) {
		if p.Dist == "" {
			*p = def
			d.markDefault("measurement." + name)
		}
	}
	fill("rt_base", &m.RTBase, Prior{Dist: "normal", Mean: 250, SD: 30})
	fill("rt_scale", &m.RTScale, Prior{Dist: "normal", Mean: 1, SD: 0.1, Min: fptr(0.5), Max: fptr(2)})
	fill("rt_sd", &m.RTSD, Prior{Dist: "uniform", Min: fptr(40), Max: fptr(80)})
	fill("lapse", &m.Lapse, Prior{Dist: "uniform", Min: fptr(0), Max: fptr(0.05)})
	fill("eeg_offset", &m.EEGOffset, Prior{Dist: "normal", Mean: 0, SD: 0.5})
	fill("eeg_gain", &m.EEGGain, Prior{Dist: "normal", Mean: 2, SD: 0.3, Min: fptr(0.5), Max: fptr(5)})
	fill("eeg_sd", &m.EEGSD, Prior{Dist: "uniform", Min: fptr(0.3), Max: fptr(0.6)})
	fill("eeg_ar", &m.EEGAR, Prior{Dist: "uniform", Min: fptr(0), Max: fptr(0.5)})
	d.recordDefaults()
}

func (d *Design) markDefault(field string) {
	if d.defaulted == nil {
		d.defaulted = map[string]string{}
	}
	d.defaulted[field] = ""
}

// recordDefaults stores the value each newly defaulted field took.
func (d *Design) recordDefaults() {
	var t any
	for f, v := range d.defaulted {
		if v == "" {
			if t == nil {
				t = d.tree()
			}
			d.defaulted[f] = fieldIn(t, f)
		}
	}
}

func fptr(v float64) *float64 { return &v }

// HasMeasure reports whether the design records measure m.
func (d *Design) HasMeasure(m string) bool {
	for _, x := range d.Measures {
		if x == m {
			return true
		}
	}
	return false
}

// GainGrid returns the gain levels γ_1..γ_G evenly spaced on [GainMin, GainMax].
func (a Agent) GainGrid() []float64 {
	g := make([]float64, a.GainLevels)
	for i := range g {
		if a.GainLevels == 1 {
			g[i] = a.GainMin
			continue
		}
		g[i] = a.GainMin + (a.GainMax-a.GainMin)*float64(i)/float64(a.GainLevels-1)
	}
	return g
}

// FreeParams returns the names of the hypothesis's free parameters, sorted.
// Sorted order is the order of parameter vectors everywhere.
func (h Hypothesis) FreeParams() []string {
	var names []string
	for n, p := range h.Params {
		if p.Free() {
			names = append(names, n)
		}
	}
	// Natural order, so that knots' k2 comes before k10; names without
	// digits sort as strings.
	sort.Slice(names, func(i, j int) bool { return naturalLess(names[i], names[j]) })
	return names
}

// naturalLess orders strings with runs of digits compared as numbers.
func naturalLess(a, b string) bool {
	for a != "" && b != "" {
		da, db := digitRun(a), digitRun(b)
		if da > 0 && db > 0 {
			na, nb := strings.TrimLeft(a[:da], "0"), strings.TrimLeft(b[:db], "0")
			if len(na) != len(nb) {
				return len(na) < len(nb)
			}
			if na != nb {
				return na < nb
			}
			a, b = a[da:], b[db:]
			continue
		}
		if a[0] != b[0] {
			return a[0] < b[0]
		}
		a, b = a[1:], b[1:]
	}
	return len(a) < len(b)
}

// digitRun is the length of s's leading run of ASCII digits.
func digitRun(s string) int {
	n := 0
	for n < len(s) && s[n] >= '0' && s[n] <= '9' {
		n++
	}
	return n
}

// Median returns the median of a free parameter's generating distribution
// (the value of a fixed one).
func (p Param) Median() float64 { return p.Quantile(0.5) }
