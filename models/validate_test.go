package models

import (
	"bytes"
	"encoding/json"
	"errors"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"sort"
	"strconv"
	"strings"
	"testing"

	"github.com/google/go-cmp/cmp"
)

const invalidDir = "../testdata/studies/invalid"

// invalidCases gives, for each file under testdata/studies/invalid, the one
// problem LoadStudy must report: its exact path and a fragment of its message.
var invalidCases = map[string]struct{ path, fragment string }{
	"cti-too-long":                 {"designs[0].cti_ms[1]", "must be in 1..60000"},
	"cti-in-seconds":               {"designs[0].cti_ms[0]", "got 0.5; cti_ms is in milliseconds: were seconds written?"},
	"budget-over-limit":            {"", "the study needs 5,760,000 fits"},
	"cti-not-epoch-multiple":       {"designs[0].cti_ms[1]", "cti_ms[1] must be a whole multiple of epoch_ms = 50 (the default), got 625"},
	"cti-weights-length":           {"designs[0].cti_weights", "one weight per CTI (4 in cti_ms), got 3"},
	"cue-reliability-at-chance":    {"designs[0].agent.cue_reliability", "cue_reliability must be in (1/streams, 1] = (0.333, 1], got 0.3"},
	"design-names-repeat":          {"designs[1].name", `name "harbour-radio" is used by designs[0] too`},
	"eeg-ar-lognormal":             {"designs[0].measurement.eeg_ar.dist", "eeg_ar must be in (-1, 1)"},
	"eeg-bin-wider-than-cti":       {"designs[0].eeg_bin_ms", "eeg_bin_ms must be <= the shortest CTI (300 ms) when eeg is measured, got 400"},
	"family-unknown":               {"hypotheses[1].family", `family must be one of constant, linear, exponential, saturating, logistic, hazard, knots, got "quadratic"`},
	"fixed-prior-without-value":    {"designs[0].measurement.eeg_offset", "dist fixed needs value"},
	"generate-field-not-for-dist":  {"hypotheses[0].params.level.generate", `generate: dist uniform takes no fields "mean", "sd"; allowed: dist, max, min`},
	"generate-mean-outside-range":  {"hypotheses[0].params.level.generate.mean", "generate mean = 0.9 must lie within the fit's range [min, max] = [0.2, 0.6]"},
	"generate-subrange-outside":    {"hypotheses[0].params.level.generate.max", "generate max must lie within the fit's range [min, max] = [0.2, 1.8], got 2.5"},
	"knots-not-increasing":         {"hypotheses[1].knots_s[2]", "knots_s must be strictly increasing: knots_s[2] = 0.6 is not above knots_s[1] = 0.9"},
	"gain-range-reversed":          {"designs[0].agent.gain_max", "gain_max must be > gain_min = 2, got 1"},
	"group-size-over-participants": {"replication.group_sizes[2]", `group_sizes[2] = 80 must be <= participants of every design; design "harbour-radio" has 40`},
	"hypothesis-names-repeat":      {"hypotheses[1].name", `name "steady" is used by hypotheses[0] too`},
	"integer-with-exponent":        {"designs[0].trials_per_cti", "trials_per_cti must be a whole number in plain digits"},
	"lapse-prior-reaches-one":      {"designs[0].measurement.lapse.max", "lapse max must be < 1 (lapse must be in [0, 1)), got 1.2"},
	"loguniform-from-zero":         {"hypotheses[1].params.slope.min", "slope min must be > 0 for a loguniform generate distribution, got 0"},
	"low-not-below-high":           {"hypotheses[1].params.low", "low must be < high, got low = 1.5, high = 1"},
	"low-outside-gain-range":       {"hypotheses[1].params.low", `low = 0.05 must be within [gain_min, gain_max] of every design; design "harbour-radio" has [0.1, 2]`},
	"measures-repeat":              {"designs[0].measures", `measures[0] and measures[2] are both "rt"`},
	"normal-generate-without-sd":   {"hypotheses[0].params.level.generate", "dist normal needs sd"},
	"not-json":                     {"", "the file is not valid JSON"},
	"param-fixed-and-free":         {"hypotheses[1].params.tau", "tau is fixed by value, so it takes no min, max or generate"},
	"param-min-above-max":          {"hypotheses[1].params.tau", "tau min must be < max, got min = 1, max = 0.1"},
	"param-missing":                {"hypotheses[1].params", "family linear needs parameter slope"},
	"param-not-positive":           {"hypotheses[1].params.tau.min", "tau min must be > 0, got 0"},
	"param-unknown":                {"hypotheses[1].params", `parameter "horizonn" is not allowed for family exponential; allowed: rate, horizon, low, high`},
	"participants-not-integer":     {"designs[0].participants", `participants must be an integer, got "many"`},
	"prior-field-not-for-dist":     {"designs[0].measurement.lapse", `lapse: dist uniform takes no field "mean"; allowed: dist, max, min`},
	"pxp-threshold-one":            {"replication.pxp_threshold", "pxp_threshold must be in (0, 1), got 1"},
	"response-window-short":        {"designs[0].response_window_ms", "response_window_ms must be >= presentation_ms = 400 (the default), got 200"},
	"rt-sd-normal-untruncated":     {"designs[0].measurement.rt_sd.min", "a normal prior on rt_sd must be truncated with min > 0"},
	"seed-negative":                {"seed", "seed must be in 0..18446744073709551615, got -1"},
	"streams-too-many":             {"designs[0].streams", "streams must be in 2..6, got 7"},
	"too-few-hypotheses":           {"hypotheses", "hypotheses must have 2..12 entries, got 1"},
	"unknown-design-field":         {"designs[0]", `unknown field "stream"; allowed: agent, cti_ms,`},
	"validity-below-chance":        {"designs[0].validity", "validity must be in [1/streams, 1] = [0.333, 1], got 0.2"},
	"vary-labels-mismatch":         {"designs[0].vary[0].labels", "labels must have one label per value (3 values), got 2"},
	"vary-unknown-field":           {"designs[0].vary[0].field", `field must be one of cti_ms, cti_weights, trials_per_cti, measures, validity, participants, streams, items, presentation_ms, got "epoch_ms"`},
	"vary-variant-invalid":         {"designs[0].vary[0].values[1]", `variant "harbour-radio/streams=5": items must be in [streams, 32] = [5, 32], got 4`},
}

func readFile(t *testing.T, path string) []byte {
	t.Helper()
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	return data
}

func problemsOf(t *testing.T, err error) []Problem {
	t.Helper()
	var ve *ValidationError
	if !errors.As(err, &ve) {
		t.Fatalf("error %v (%T) is not a *ValidationError", err, err)
	}
	return ve.Problems
}

func TestInvalidStudyFiles(t *testing.T) {
	files, err := filepath.Glob(filepath.Join(invalidDir, "*.json"))
	if err != nil {
		t.Fatal(err)
	}
	if len(files) < 10 {
		t.Fatalf("%d invalid study files, want at least 10", len(files))
	}
	seen := map[string]bool{}
	for _, f := range files {
		name := strings.TrimSuffix(filepath.Base(f), ".json")
		seen[name] = true
		t.Run(name, func(t *testing.T) {
			want, ok := invalidCases[name]
			if !ok {
				t.Fatalf("%s has no entry in invalidCases", f)
			}
			data := readFile(t, f)
			for run := 0; run < 2; run++ { // a second run proves the result repeats exactly
				s, err := LoadStudy(data)
				if err == nil {
					t.Fatalf("LoadStudy accepted %s as %q", f, s.Name)
				}
				ps := problemsOf(t, err)
				if len(ps) != 1 {
					t.Fatalf("got %d problems, want exactly 1:\n%v", len(ps), err)
				}
				if ps[0].Path != want.path {
					t.Errorf("path = %q, want %q (problem %q)", ps[0].Path, want.path, ps[0].Problem)
				}
				if !strings.Contains(ps[0].Problem, want.fragment) {
					t.Errorf("problem = %q, want it to contain %q", ps[0].Problem, want.fragment)
				}
			}
		})
	}
	for name := range invalidCases {
		if !seen[name] {
			t.Errorf("invalidCases has %q but %s/%s.json does not exist", name, invalidDir, name)
		}
	}
}

func TestMinimalStudy(t *testing.T) {
	s, err := LoadStudy(readFile(t, "../testdata/studies/minimal.json"))
	if err != nil {
		t.Fatal(err)
	}
	if p := s.Validate(); len(p) != 0 {
		t.Fatalf("Validate after LoadStudy: %v", p)
	}
	ds, err := s.ExpandedDesigns()
	if err != nil {
		t.Fatal(err)
	}
	if len(ds) != 1 || len(s.Hypotheses) != 2 {
		t.Fatalf("got %d designs, %d hypotheses; want 1, 2", len(ds), len(s.Hypotheses))
	}
	// 20 participants × 2 generators × 2 candidates.
	if got := s.TotalFits(); got != 80 {
		t.Errorf("TotalFits = %d, want 80", got)
	}
	if got := ValidateSchema(readFile(t, "../testdata/studies/minimal.json")); len(got) != 0 {
		t.Errorf("ValidateSchema: %v", got)
	}
}

// validStudy is a defaults-filled study that passes every check; cases
// below break it in one place.
func validStudy() *Study {
	s := &Study{
		Name:    "berth-watch (invented scenario)",
		Designs: []Design{{Name: "harbour-radio", Participants: 40}},
		Hypotheses: []Hypothesis{
			{Name: "steady", Family: "constant", Params: map[string]Param{"level": {Min: fptr(0.2), Max: fptr(1.8)}}},
			{Name: "ramp", Family: "linear", Params: map[string]Param{"slope": {Min: fptr(0), Max: fptr(2)}}},
		},
	}
	s.Replication.GroupSizes = []int{10, 20}
	s.FillDefaults()
	return s
}

func TestValidStudyHasNoProblems(t *testing.T) {
	if p := validStudy().Validate(); len(p) != 0 {
		t.Fatalf("Validate: %v", p)
	}
	// Every family with every parameter, free and fixed, generating
	// distributions of each kind: the defaults and the specs agree.
	s := validStudy()
	s.Hypotheses = []Hypothesis{
		{Name: "c", Family: "constant", Params: map[string]Param{"level": {Value: fptr(1)}}},
		{Name: "l", Family: "linear", Params: map[string]Param{"slope": {Min: fptr(0), Max: fptr(3)}, "low": {Value: fptr(0.2)}, "high": {Min: fptr(1), Max: fptr(2)}}},
		{Name: "e", Family: "exponential", Params: map[string]Param{"rate": {Min: fptr(0.1), Max: fptr(5), Generate: &Generate{Dist: "loguniform"}}, "horizon": {Value: fptr(1.2)}}},
		{Name: "s", Family: "saturating", Params: map[string]Param{"tau": {Min: fptr(0.05), Max: fptr(1), Generate: &Generate{Dist: "normal", Mean: 0.3, SD: 0.1}}}},
		{Name: "g", Family: "logistic", Params: map[string]Param{"midpoint": {Min: fptr(-0.2), Max: fptr(1.2)}, "width": {Value: fptr(0.1)}}},
		{Name: "h", Family: "hazard", Params: map[string]Param{"weber": {Min: fptr(0.05), Max: fptr(0.5), Generate: &Generate{Dist: "uniform"}}, "window": {Value: fptr(0.2)}}},
	}
	s.Designs[0].Measures = []string{"rt", "accuracy", "eeg"}
	s.Designs[0].Vary = []Variation{{Field: "cti_ms", Values: []json.RawMessage{json.RawMessage(`[300,600]`), json.RawMessage(`[600, 1200, 1800]`)}}}
	if p := s.Validate(); len(p) != 0 {
		t.Fatalf("Validate: %v", p)
	}
}

func TestValidateProblems(t *testing.T) {
	raw := func(s string) json.RawMessage { return json.RawMessage(s) }
	cases := []struct {
		name        string
		edit        func(s *Study)
		path, fragm string
	}{
		{"items below streams", func(s *Study) { s.Designs[0].Streams, s.Designs[0].Items = 4, 3 }, "designs[0].items", "items must be in [streams, 32] = [4, 32], got 3"},
		{"validity above one", func(s *Study) { s.Designs[0].Validity = 1.01 }, "designs[0].validity", "[0.333, 1] with streams = 3 (the default), got 1.01"},
		{"validity at chance is allowed to float precision", func(s *Study) { s.Designs[0].Validity = 0.3333333333 }, "", ""},
		{"cti empty", func(s *Study) { s.Designs[0].CTIms, s.Designs[0].CTIWeights = nil, nil }, "designs[0].cti_ms", "cti_ms must list at least one CTI"},
		{"cti negative", func(s *Study) { s.Designs[0].CTIms[2] = -900 }, "designs[0].cti_ms[2]", "cti_ms[2] must be > 0, got -900"},
		{"cti repeated", func(s *Study) { s.Designs[0].CTIms[3] = 300 }, "designs[0].cti_ms", "cti_ms[0] and cti_ms[3] are both 300"},
		{"cti weight negative", func(s *Study) { s.Designs[0].CTIWeights[1] = -1 }, "designs[0].cti_weights[1]", "cti_weights[1] must be >= 0, got -1"},
		{"cti weights sum to zero", func(s *Study) { s.Designs[0].CTIWeights = []float64{0, 0, 0, 0} }, "designs[0].cti_weights", "sum to more than 0"},
		{"trials zero", func(s *Study) { s.Designs[0].TrialsPerCTI = 0 }, "designs[0].trials_per_cti", "trials_per_cti must be in 1..10000, got 0"},
		{"trials too many", func(s *Study) { s.Designs[0].TrialsPerCTI = 10001 }, "designs[0].trials_per_cti", "in 1..10000, got 10001"},
		{"participants too many", func(s *Study) { s.Designs[0].Participants = 10001 }, "designs[0].participants", "participants must be in 1..10000, got 10001"},
		{"measures empty", func(s *Study) { s.Designs[0].Measures = nil }, "designs[0].measures", "at least one of rt, accuracy, eeg"},
		{"measure unknown", func(s *Study) { s.Designs[0].Measures = []string{"rt", "erp"} }, "designs[0].measures[1]", `measures[1] must be one of rt, accuracy, eeg, got "erp"`},
		{"epoch zero", func(s *Study) { s.Designs[0].EpochMs = 0 }, "designs[0].epoch_ms", "epoch_ms must be in 1..1000, got 0"},
		{"epoch too long", func(s *Study) { s.Designs[0].EpochMs = 2000 }, "designs[0].epoch_ms", "in 1..1000, got 2000"},
		{"presentation not a multiple", func(s *Study) { s.Designs[0].PresentationMs = 420 }, "designs[0].presentation_ms", "presentation_ms must be a whole multiple of epoch_ms = 50 (the default), got 420"},
		{"cue not a multiple", func(s *Study) { s.Designs[0].CueMs = 120 }, "designs[0].cue_ms", "cue_ms must be a whole multiple of epoch_ms = 50 (the default), got 120"},
		{"cue negative", func(s *Study) { s.Designs[0].CueMs = -50 }, "designs[0].cue_ms", "cue_ms must be > 0, got -50"},
		{"eeg bin not a multiple", func(s *Study) { s.Designs[0].EEGBinMs = 75 }, "designs[0].eeg_bin_ms", "whole multiple of epoch_ms = 50 (the default), got 75"},
		{"eeg bin wide without eeg is fine", func(s *Study) { s.Designs[0].EEGBinMs = 500 }, "", ""},
		{"item fidelity at chance", func(s *Study) { s.Designs[0].Agent.ItemFidelity = 0.125 }, "designs[0].agent.item_fidelity", "item_fidelity must be in (1/items, 1] = (0.125, 1], got 0.125"},
		{"marker at chance", func(s *Study) { s.Designs[0].Agent.MarkerReliability = 0.5 }, "designs[0].agent.marker_reliability", "marker_reliability must be in (0.5, 1], got 0.5"},
		{"gain levels", func(s *Study) { s.Designs[0].Agent.GainLevels = 65 }, "designs[0].agent.gain_levels", "gain_levels must be in 2..64, got 65"},
		{"gain min zero", func(s *Study) { s.Designs[0].Agent.GainMin = 0 }, "designs[0].agent.gain_min", "gain_min must be > 0, got 0"},
		{"iterations", func(s *Study) { s.Designs[0].Agent.IterationsPerEpoch = 257 }, "designs[0].agent.iterations_per_epoch", "iterations_per_epoch must be in 1..256, got 257"},
		{"time constant", func(s *Study) { s.Designs[0].Agent.TimeConstant = 0.5 }, "designs[0].agent.time_constant", "time_constant must be >= 1, got 0.5"},
		{"criterion one", func(s *Study) { s.Designs[0].Agent.Criterion = 1 }, "designs[0].agent.criterion", "criterion must be in (1/items, 1) = (0.125, 1), got 1"},
		{"choice temperature", func(s *Study) { s.Designs[0].Agent.ChoiceTemperature = math.NaN() }, "designs[0].agent.choice_temperature", "choice_temperature must be > 0, got NaN"},
		{"precision sd", func(s *Study) { s.Designs[0].Agent.PrecisionSD = -0.1 }, "designs[0].agent.precision_sd", "precision_sd must be >= 0 (gain units; 0 = no trial-to-trial variability), got -0.1"},
		{"prior dist unknown", func(s *Study) { s.Designs[0].Measurement.RTBase = Prior{Dist: "gamma"} }, "designs[0].measurement.rt_base.dist", `rt_base dist must be one of fixed, normal, uniform, lognormal, got "gamma"`},
		{"normal prior without sd", func(s *Study) { s.Designs[0].Measurement.RTBase = Prior{Dist: "normal", Mean: 250} }, "designs[0].measurement.rt_base", "rt_base: dist normal needs sd > 0, got 0"},
		{"normal prior min above max", func(s *Study) {
			s.Designs[0].Measurement.EEGGain = Prior{Dist: "normal", Mean: 2, SD: 1, Min: fptr(3), Max: fptr(1)}
		}, "designs[0].measurement.eeg_gain", "eeg_gain: min must be < max, got min = 3, max = 1"},
		{"uniform prior without max", func(s *Study) { s.Designs[0].Measurement.EEGSD = Prior{Dist: "uniform", Min: fptr(0.3)} }, "designs[0].measurement.eeg_sd", "eeg_sd: dist uniform needs max"},
		{"uniform sd prior from zero", func(s *Study) { s.Designs[0].Measurement.EEGSD = Prior{Dist: "uniform", Min: fptr(0), Max: fptr(1)} }, "designs[0].measurement.eeg_sd.min", "eeg_sd min must be > 0 (eeg_sd must be > 0), got 0"},
		{"lognormal sigma zero", func(s *Study) { s.Designs[0].Measurement.RTSD = Prior{Dist: "lognormal", Mu: 4} }, "designs[0].measurement.rt_sd", "rt_sd: dist lognormal needs sigma > 0, got 0"},
		{"fixed lapse of one", func(s *Study) { s.Designs[0].Measurement.Lapse = Prior{Dist: "fixed", Value: 1} }, "designs[0].measurement.lapse.value", "lapse value must be in [0, 1), got 1"},
		{"fixed lapse of zero is fine", func(s *Study) { s.Designs[0].Measurement.Lapse = Prior{Dist: "fixed", Value: 0} }, "", ""},
		{"normal lapse prior open above", func(s *Study) {
			s.Designs[0].Measurement.Lapse = Prior{Dist: "normal", Mean: 0.02, SD: 0.01, Min: fptr(0)}
		}, "designs[0].measurement.lapse.max", "lapse: a normal prior on lapse must be truncated with max < 1"},
		{"rt scale fixed at zero", func(s *Study) { s.Designs[0].Measurement.RTScale = Prior{Dist: "fixed", Value: 0} }, "designs[0].measurement.rt_scale.value", "rt_scale value must be > 0, got 0"},
		{"ar prior reaching one", func(s *Study) { s.Designs[0].Measurement.EEGAR = Prior{Dist: "uniform", Min: fptr(0), Max: fptr(1)} }, "designs[0].measurement.eeg_ar.max", "eeg_ar max must be < 1"},
		{"designs none", func(s *Study) { s.Designs = nil }, "designs", "designs must have 1..16 entries, got 0"},
		{"designs too many", func(s *Study) {
			for i := 0; i < 16; i++ {
				d := s.Designs[0].clone()
				d.Name = "copy-" + strconv.Itoa(i)
				s.Designs = append(s.Designs, d)
			}
		}, "designs", "designs must have 1..16 entries, got 17"},
		{"hypotheses too many", func(s *Study) {
			for i := 0; i < 11; i++ {
				s.Hypotheses = append(s.Hypotheses, Hypothesis{Name: "c" + strconv.Itoa(i), Family: "constant", Params: map[string]Param{"level": {Value: fptr(1)}}})
			}
		}, "hypotheses", "hypotheses must have 2..12 entries, got 13"},
		{"hypothesis name empty", func(s *Study) { s.Hypotheses[1].Name = "" }, "hypotheses[1].name", "name must not be empty"},
		{"param without range", func(s *Study) { s.Hypotheses[1].Params["slope"] = Param{Min: fptr(0)} }, "hypotheses[1].params.slope", "slope needs value (fixed) or min and max (free); missing max"},
		{"param empty", func(s *Study) { s.Hypotheses[1].Params["slope"] = Param{} }, "hypotheses[1].params.slope", "missing min and max"},
		{"slope negative", func(s *Study) { s.Hypotheses[1].Params["slope"] = Param{Value: fptr(-1)} }, "hypotheses[1].params.slope.value", "slope value must be >= 0, got -1"},
		{"level zero", func(s *Study) { s.Hypotheses[0].Params["level"] = Param{Value: fptr(0)} }, "hypotheses[0].params.level.value", "level value must be > 0, got 0"},
		{"window zero", func(s *Study) {
			s.Hypotheses[1] = Hypothesis{Name: "h", Family: "hazard", Params: map[string]Param{"weber": {Value: fptr(0.2)}, "window": {Value: fptr(0)}}}
		}, "hypotheses[1].params.window.value", "window value must be > 0, got 0"},
		{"horizon max negative", func(s *Study) {
			s.Hypotheses[1] = Hypothesis{Name: "e", Family: "exponential", Params: map[string]Param{"rate": {Value: fptr(1)}, "horizon": {Min: fptr(-1), Max: fptr(-0.5)}}}
		}, "hypotheses[1].params.horizon.min", "horizon min must be > 0, got -1"},
		{"logistic needs two", func(s *Study) { s.Hypotheses[1] = Hypothesis{Name: "g", Family: "logistic"} }, "hypotheses[1].params", "family logistic needs parameters midpoint, width"},
		{"generate dist unknown", func(s *Study) {
			s.Hypotheses[1].Params["slope"] = Param{Min: fptr(0), Max: fptr(2), Generate: &Generate{Dist: "beta"}}
		}, "hypotheses[1].params.slope.generate.dist", `generate dist must be one of uniform, normal, loguniform, got "beta"`},
		{"generate normal sd zero", func(s *Study) {
			s.Hypotheses[1].Params["slope"] = Param{Min: fptr(0), Max: fptr(2), Generate: &Generate{Dist: "normal", Mean: 1}}
		}, "hypotheses[1].params.slope.generate", "generate: dist normal needs sd > 0, got 0"},
		{"low and high ranges overlap", func(s *Study) {
			s.Hypotheses[1].Params["low"] = Param{Min: fptr(0.2), Max: fptr(1.2)}
			s.Hypotheses[1].Params["high"] = Param{Min: fptr(1), Max: fptr(2)}
		}, "hypotheses[1].params.low", "low must stay below high: low can reach 1.2 but high can be as small as 1"},
		{"high at gain min", func(s *Study) { s.Hypotheses[1].Params["high"] = Param{Value: fptr(0.1)} }, "hypotheses[1].params.high", `high must be > low; low is omitted, so it is gain_min = 0.1 of design "harbour-radio"`},
		{"high above a second design's gain max", func(s *Study) {
			d := s.Designs[0].clone()
			d.Name, d.Agent.GainMax = "narrow", 1.5
			s.Designs = append(s.Designs, d)
			s.Hypotheses[1].Params["high"] = Param{Value: fptr(1.8)}
		}, "hypotheses[1].params.high", `high = 1.8 must be within [gain_min, gain_max] of every design; design "narrow" has [0.1, 1.5]`},
		{"group size one", func(s *Study) { s.Replication.GroupSizes = []int{1, 10} }, "replication.group_sizes[0]", "group_sizes[0] must be >= 2, got 1"},
		{"group sizes empty", func(s *Study) { s.Replication.GroupSizes = nil }, "replication.group_sizes", "at least one group size"},
		{"group size above a variant's participants", func(s *Study) {
			s.Designs[0].Vary = []Variation{{Field: "participants", Values: []json.RawMessage{raw("40"), raw("15")}}}
		}, "replication.group_sizes[1]", `group_sizes[1] = 20 must be <= participants of every design; design "harbour-radio/participants=15" has 15`},
		{"replicates", func(s *Study) { s.Replication.Replicates = 100001 }, "replication.replicates", "replicates must be in 1..100000, got 100001"},
		{"target rate", func(s *Study) { s.Replication.TargetRate = 1.5 }, "replication.target_rate", "target_rate must be in (0, 1], got 1.5"},
		{"vary values empty", func(s *Study) { s.Designs[0].Vary = []Variation{{Field: "streams"}} }, "designs[0].vary[0].values", "values must have at least 1 entry, got 0"},
		{"vary value null", func(s *Study) {
			s.Designs[0].Vary = []Variation{{Field: "validity", Values: []json.RawMessage{raw("null")}}}
		}, "designs[0].vary[0].values[0]", "values[0] (validity) must be a number, got null"},
		{"vary value of the wrong type", func(s *Study) {
			s.Designs[0].Vary = []Variation{{Field: "cti_ms", Values: []json.RawMessage{raw("[300, 450.5]")}}}
		}, "designs[0].vary[0].values[0]", "values[0] (cti_ms) must be an array of whole numbers in plain digits, got [300,450.5]"},
		{"vary label empty", func(s *Study) {
			s.Designs[0].Vary = []Variation{{Field: "validity", Values: []json.RawMessage{raw("0.5")}, Labels: []string{""}}}
		}, "designs[0].vary[0].labels[0]", "labels[0] must not be empty"},
		{"variant name taken by another design", func(s *Study) {
			d := s.Designs[0].clone()
			d.Name = "harbour-radio/loud"
			s.Designs = append(s.Designs, d)
			s.Designs[0].Vary = []Variation{{Field: "validity", Values: []json.RawMessage{raw("0.9")}, Labels: []string{"loud"}}}
		}, "designs[1].name", `name "harbour-radio/loud" is used by designs[0].vary[0].values[0] too`},
		{"variant breaks the eeg bin", func(s *Study) {
			s.Designs[0].Measures = []string{"rt", "eeg"}
			s.Designs[0].Vary = []Variation{{Field: "cti_ms", Values: []json.RawMessage{raw("[50, 600]")}}}
		}, "designs[0].vary[0].values[0]", `variant "harbour-radio/cti_ms=[50,600]": eeg_bin_ms must be <= the shortest CTI (50 ms)`},
		{"variant of explicit weights needs weights of its length", func(s *Study) {
			s.Designs[0].CTIWeights = []float64{1, 2, 2, 1}
			s.Designs[0].Vary = []Variation{{Field: "cti_ms", Values: []json.RawMessage{raw("[300, 600]")}}}
		}, "designs[0].vary[0].values[0]", "cti_weights must have one weight per CTI (2 in cti_ms), got 4"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			s := validStudy()
			tc.edit(s)
			got := s.Validate()
			if tc.fragm == "" {
				if len(got) != 0 {
					t.Fatalf("want no problems, got %v", got)
				}
				return
			}
			for _, p := range got {
				if p.Path == tc.path && strings.Contains(p.Problem, tc.fragm) {
					if again := s.Validate(); !slices.Equal(again, got) {
						t.Errorf("second Validate differs:\n%v\n%v", got, again)
					}
					return
				}
			}
			t.Errorf("want %s: ...%s..., got %v", tc.path, tc.fragm, got)
		})
	}
}

func TestLoadStudyReportsEverythingOnce(t *testing.T) {
	// Two schema-only problems (streams range, a repeated CTI), one semantic
	// problem (CTI not a multiple of epoch_ms), a problem both find
	// (unknown parameter) and one only the semantic pass finds (tau range).
	data := []byte(`{
	  "designs": [{"streams": 7, "cti_ms": [300, 625, 300]}],
	  "hypotheses": [
	    {"family": "linear", "params": {"slope": {"value": 1}, "slop": {"value": 2}}},
	    {"family": "saturating", "params": {"tau": {"min": 1, "max": 0.5}}}
	  ],
	  "replication": {"group_sizes": [10]}
	}`)
	_, err := LoadStudy(data)
	got := problemsOf(t, err)
	want := []Problem{
		{"designs[0].cti_ms", "cti_ms must not repeat a value: cti_ms[0] and cti_ms[2] are both 300"},
		{"designs[0].cti_ms[1]", "cti_ms[1] must be a whole multiple of epoch_ms = 50 (the default), got 625"},
		{"designs[0].streams", "streams must be in 2..6, got 7"},
		{"hypotheses[0].params", `parameter "slop" is not allowed for family linear; allowed: slope, low, high`},
		{"hypotheses[1].params.tau", "tau min must be < max, got min = 1, max = 0.5"},
	}
	if d := cmp.Diff(want, got); d != "" {
		t.Errorf("problems (-want +got):\n%s", d)
	}
	lines := strings.Split(err.Error(), "\n")
	if len(lines) != len(want) || lines[2] != "designs[0].streams: streams must be in 2..6, got 7" {
		t.Errorf("Error() lines = %q", lines)
	}
}

func TestNotJSONNamesLineAndColumn(t *testing.T) {
	cases := []struct{ name, data, want string }{
		{"bad token", "{\n  \"designs\": [}\n", "line 2, column 15"},
		{"trailing value", `{"designs": []} {}`, "data follows the study object"},
		{"empty", "", "ends before the study object is complete"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			_, err := LoadStudy([]byte(tc.data))
			ps := problemsOf(t, err)
			if len(ps) != 1 || ps[0].Path != "" || !strings.Contains(ps[0].Problem, tc.want) {
				t.Fatalf("got %v, want one problem containing %q", ps, tc.want)
			}
		})
	}
}

func TestDecodeProblemPaths(t *testing.T) {
	// Values the schema accepts (integers written with an exponent or a
	// fraction of zero) that encoding/json will not put into an int.
	cases := []struct{ name, data, path string }{
		{"array element", `{"designs": [{"cti_ms": [300, 6e2]}], "hypotheses": []}`, "designs[0].cti_ms[1]"},
		{"object field", `{"designs": [{"name": "a"}, {"items": 8.0}], "hypotheses": []}`, "designs[1].items"},
		{"nested", `{"designs": [{"agent": {"gain_levels": 1E1}}], "hypotheses": []}`, "designs[0].agent.gain_levels"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			_, err := DecodeStudy([]byte(tc.data))
			if err == nil {
				t.Fatal("DecodeStudy accepted the value")
			}
			p := decodeProblem([]byte(tc.data), err)
			if p.Path != tc.path || !strings.Contains(p.Problem.Problem, "whole number in plain digits") {
				t.Errorf("got %v, want path %q", p.Problem, tc.path)
			}
		})
	}
}

func TestPathOrderAndCover(t *testing.T) {
	paths := []string{"replication", "designs[10].name", "", "designs[2].streams", "designs[2]", `hypotheses[0].params["a.b"]`, "hypotheses[0].params.tau"}
	sort.SliceStable(paths, func(i, j int) bool { return comparePaths(paths[i], paths[j]) < 0 })
	want := []string{"", "designs[2]", "designs[2].streams", "designs[10].name", `hypotheses[0].params["a.b"]`, "hypotheses[0].params.tau", "replication"}
	if d := cmp.Diff(want, paths); d != "" {
		t.Errorf("order (-want +got):\n%s", d)
	}
	if got := splitPath(`a.b[2]["x.y"].c`); !slices.Equal(got, []string{"a", "b", "[2]", `["x.y"]`, "c"}) {
		t.Errorf("splitPath = %q", got)
	}
	schema := []located{
		{Problem: Problem{Path: "designs[0].measurement.rt_sd"}, kind: kindSchema},
		{Problem: Problem{Path: "designs[0].cti_ms"}, kind: kindSchemaArray},
	}
	for path, want := range map[string]bool{
		"designs[0].measurement.rt_sd":     true,  // same place
		"designs[0].measurement.rt_sd.min": true,  // a field of the object the schema spoke of
		"designs[0].measurement":           true,  // the object holding it
		"designs[0].measurement.rt_sd.x.y": false, // deeper: a separate problem
		"designs[0].cti_ms":                true,
		"designs[0].cti_ms[1]":             false, // array-length problems say nothing of elements
		"designs[0].streams":               false,
	} {
		if got := newCoverage(schema).covers(Problem{Path: path}); got != want {
			t.Errorf("covered(%q) = %v, want %v", path, got, want)
		}
	}
}

func TestExpand(t *testing.T) {
	d := validStudy().Designs[0]
	d.Vary = []Variation{
		{Field: "cti_ms", Values: []json.RawMessage{json.RawMessage(`[300, 600]`)}},
		{Field: "streams", Values: []json.RawMessage{json.RawMessage(`5`)}, Labels: []string{"five-channels"}},
		{Field: "measures", Values: []json.RawMessage{json.RawMessage(`["rt","eeg"]`)}},
	}
	ds, err := d.Expand()
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, v := range ds {
		names = append(names, v.Name)
		if v.Vary != nil {
			t.Errorf("%s keeps its vary blocks", v.Name)
		}
	}
	if d := cmp.Diff([]string{"harbour-radio/cti_ms=[300,600]", "harbour-radio/five-channels", "harbour-radio/measures=[rt,eeg]"}, names); d != "" {
		t.Errorf("names (-want +got):\n%s", d)
	}
	// Equal default weights follow the CTI set's length.
	if !slices.Equal(ds[0].CTIms, []int{300, 600}) || !slices.Equal(ds[0].CTIWeights, []float64{1, 1}) {
		t.Errorf("cti variant: cti_ms %v, weights %v", ds[0].CTIms, ds[0].CTIWeights)
	}
	// The default cue reliability 4/(3L+1) follows streams: 4/16 for L = 5.
	if ds[1].Streams != 5 || math.Abs(ds[1].Agent.CueReliability-0.25) > 1e-15 {
		t.Errorf("streams variant: streams %d, cue_reliability %g", ds[1].Streams, ds[1].Agent.CueReliability)
	}
	if ds[0].Streams != 3 || math.Abs(ds[0].Agent.CueReliability-0.4) > 1e-15 {
		t.Errorf("other variants keep the design's streams: %d, %g", ds[0].Streams, ds[0].Agent.CueReliability)
	}
	// Variants share nothing with the design.
	ds[2].Measures[0] = "accuracy"
	*ds[2].Measurement.RTSD.Min = 1
	if d.Measures[0] != "rt" || *d.Measurement.RTSD.Min != 40 {
		t.Error("a variant shares memory with its design")
	}
	// An explicit cue reliability is kept.
	d.Agent.CueReliability = 0.6
	ds, err = d.Expand()
	if err != nil {
		t.Fatal(err)
	}
	if ds[1].Agent.CueReliability != 0.6 {
		t.Errorf("explicit cue_reliability became %g", ds[1].Agent.CueReliability)
	}
	// No vary blocks: the design itself.
	d.Vary = nil
	if ds, err := d.Expand(); err != nil || len(ds) != 1 || ds[0].Name != "harbour-radio" {
		t.Errorf("Expand without vary = %v, %v", ds, err)
	}
}

func TestExpandErrors(t *testing.T) {
	s := validStudy()
	s.Designs = append(s.Designs, s.Designs[0].clone())
	s.Designs[1].Name = "second"
	s.Designs[1].Vary = []Variation{
		{Field: "epoch_ms", Values: []json.RawMessage{json.RawMessage(`25`)}},
		{Field: "participants", Values: []json.RawMessage{json.RawMessage(`"many"`)}},
	}
	_, err := s.ExpandedDesigns()
	got := problemsOf(t, err)
	want := []Problem{
		{"designs[1].vary[0].field", `field must be one of cti_ms, cti_weights, trials_per_cti, measures, validity, participants, streams, items, presentation_ms, got "epoch_ms"`},
		{"designs[1].vary[1].values[0]", `values[0] (participants) must be a whole number in plain digits, got "many"`},
	}
	if d := cmp.Diff(want, got); d != "" {
		t.Errorf("problems (-want +got):\n%s", d)
	}
}

func TestBudget(t *testing.T) {
	s := validStudy()
	s.Designs[0].Participants = 10000
	s.Replication.GroupSizes = []int{10}
	s.Designs[0].Vary = []Variation{{Field: "trials_per_cti", Values: []json.RawMessage{json.RawMessage("10"), json.RawMessage("20"), json.RawMessage("30")}}}
	for i := 0; i < 10; i++ {
		s.Hypotheses = append(s.Hypotheses, Hypothesis{Name: "c" + strconv.Itoa(i), Family: "constant", Params: map[string]Param{"level": {Value: fptr(1)}}})
	}
	// 3 variants × 10000 participants × 12² hypothesis pairs.
	if f := s.TotalFits(); f != 4_320_000 {
		t.Fatalf("TotalFits = %d, want 4320000", f)
	}
	if p := s.Validate(); len(p) != 0 {
		t.Fatalf("4,320,000 fits is within the limit, got %v", p)
	}
	s.Designs[0].Vary[0].Values = append(s.Designs[0].Vary[0].Values, json.RawMessage("40"))
	want := []Problem{{"", "the study needs 5,760,000 fits (participants × hypotheses² summed over designs, 4 designs with vary blocks expanded); the limit is 5,000,000"}}
	if d := cmp.Diff(want, s.Validate()); d != "" {
		t.Errorf("(-want +got):\n%s", d)
	}
}

func TestTotalFitsSaturates(t *testing.T) {
	s := validStudy()
	s.Designs[0].Participants = math.MaxInt / 2
	if got := s.TotalFits(); got != math.MaxInt {
		t.Errorf("TotalFits = %d, want MaxInt", got)
	}
	if got := thousands(1234567); got != "1,234,567" {
		t.Errorf("thousands = %q", got)
	}
}

// TestSchemaMatchesGo checks that the schema and the Go tables describe the
// same file: family parameters, enums, and the fixed-or-free rule.
func TestSchemaMatchesGo(t *testing.T) {
	doc := loadSchema().doc
	defs := doc.(map[string]any)["$defs"].(map[string]any)
	hyp := defs["hypothesis"].(map[string]any)
	// The family branches are built from the family table; check that the
	// built schema enforces each family's required parameters: a
	// hypothesis missing one is rejected at its params path, and one with
	// every required parameter passes.
	// One branch per family with a fixed parameter list; knots has one
	// requiring knots_s and one per knot count.
	if got, want := len(hyp["allOf"].([]any)), len(Families)-1+1+MaxKnots-MinKnots+1; got != want {
		t.Errorf("schema has %d family branches, want %d", got, want)
	}
	for _, f := range families {
		var required []string
		params := map[string]any{}
		h := Hypothesis{Family: f.Name}
		if f.UsesKnots {
			h.KnotsS = []float64{0.1, 0.2, 0.3}
		}
		for _, p := range f.Params(h) {
			if p.Required() {
				required = append(required, p.Name)
				params[p.Name] = map[string]any{"min": 0.1, "max": 0.9}
			}
		}
		if len(required) == 0 {
			t.Errorf("family %s has no required parameter", f.Name)
		}
		study := func(params map[string]any) []byte {
			first := map[string]any{"name": "a", "family": f.Name, "params": params}
			if h.KnotsS != nil {
				first["knots_s"] = h.KnotsS
			}
			b, err := json.Marshal(map[string]any{"name": "x", "seed": 1,
				"designs":    []any{map[string]any{"name": "d", "cti_ms": []int{300}}},
				"hypotheses": []any{first, map[string]any{"name": "b", "family": "constant", "params": map[string]any{"level": map[string]any{"value": 1}}}}})
			if err != nil {
				t.Fatal(err)
			}
			return b
		}
		if probs := ValidateSchema(study(params)); len(probs) != 0 {
			t.Errorf("family %s with %v: schema problems %v, want none", f.Name, required, probs)
		}
		delete(params, required[0])
		probs := ValidateSchema(study(params))
		if len(probs) != 1 || probs[0].Path != "hypotheses[0].params" || !strings.Contains(probs[0].Problem, required[0]) {
			t.Errorf("family %s without %s: schema problems %v, want one at hypotheses[0].params naming it", f.Name, required[0], probs)
		}
		params["no_such"] = map[string]any{"value": 1}
		params[required[0]] = map[string]any{"value": 1}
		probs = ValidateSchema(study(params))
		if len(probs) != 1 || !strings.Contains(probs[0].Problem, "no_such") {
			t.Errorf("family %s with an unknown parameter: schema problems %v, want one naming it", f.Name, probs)
		}
	}
	enum := func(v any) []string {
		var out []string
		for _, e := range v.(map[string]any)["enum"].([]any) {
			out = append(out, e.(string))
		}
		return out
	}
	checks := []struct {
		name      string
		schema, g []string
	}{
		{"family", enum(hyp["properties"].(map[string]any)["family"]), Families},
		{"measures", enum(defs["measures"].(map[string]any)["items"]), Measures},
		{"vary field", enum(defs["variation"].(map[string]any)["properties"].(map[string]any)["field"]), VaryFields},
		{"prior dist", enum(defs["prior"].(map[string]any)["properties"].(map[string]any)["dist"]), strings.Split(priorDists, ", ")},
		{"generate dist", enum(defs["generate"].(map[string]any)["properties"].(map[string]any)["dist"]), strings.Split(generateDists, ", ")},
		{"ranking objective", enum(defs["ranking"].(map[string]any)["properties"].(map[string]any)["objective"]), RankingObjectives},
	}
	for _, c := range checks {
		if !slices.Equal(c.schema, c.g) {
			t.Errorf("%s: schema %v, Go %v", c.name, c.schema, c.g)
		}
	}
	if d := defs["param"].(map[string]any)["then"].(map[string]any)["description"]; d != fixedAndFreeText {
		t.Errorf("param description %q differs from fixedAndFreeText", d)
	}
	var vf []string
	for _, b := range defs["variation"].(map[string]any)["allOf"].([]any) {
		vf = append(vf, b.(map[string]any)["if"].(map[string]any)["properties"].(map[string]any)["field"].(map[string]any)["const"].(string))
	}
	if !slices.Equal(vf, VaryFields) {
		t.Errorf("vary value schemas for %v, want %v", vf, VaryFields)
	}
}

// TestSchemaDefaultsMatchGo checks that each "default N" a design field's
// description states is what FillDefaults fills in.
func TestSchemaDefaultsMatchGo(t *testing.T) {
	defs := loadSchema().doc.(map[string]any)["$defs"].(map[string]any)
	var d Design
	d.FillDefaults()
	enc, _ := json.Marshal(d)
	var filled map[string]any
	if err := json.Unmarshal(enc, &filled); err != nil {
		t.Fatal(err)
	}
	agentFilled := filled["agent"].(map[string]any)
	re := regexp.MustCompile(`default (-?[0-9.]+)\.`)
	check := func(where string, props map[string]any, values map[string]any) {
		n := 0
		for name, p := range props {
			pm := p.(map[string]any)
			if ref, ok := pm["$ref"].(string); ok {
				pm = defs[strings.TrimPrefix(ref, "#/$defs/")].(map[string]any)
			}
			desc, _ := pm["description"].(string)
			m := re.FindStringSubmatch(desc)
			if m == nil {
				continue
			}
			n++
			want, _ := strconv.ParseFloat(m[1], 64)
			got, ok := values[name].(float64)
			if !ok || math.Abs(got-want) > 1e-12 {
				t.Errorf("%s.%s: schema says default %s, FillDefaults gives %v", where, name, m[1], values[name])
			}
		}
		if n == 0 {
			t.Errorf("%s: no defaults found in descriptions", where)
		}
	}
	check("design", defs["design"].(map[string]any)["properties"].(map[string]any), filled)
	check("agent", defs["agent"].(map[string]any)["properties"].(map[string]any), agentFilled)
}

func TestSchemaRejectsExplicitZeros(t *testing.T) {
	// Omitting a field takes its default; writing 0 is a mistake the
	// decoder alone would hide by filling the default in.
	data := []byte(`{"designs": [{"trials_per_cti": 0, "validity": 0}], "hypotheses": [
	  {"family": "constant", "params": {"level": {"value": 1}}},
	  {"family": "constant", "params": {"level": {"value": 2}}}]}`)
	got := ValidateSchema(data)
	want := []Problem{
		{"designs[0].trials_per_cti", "trials_per_cti must be in 1..10000, got 0"},
		{"designs[0].validity", "validity must be in (0, 1], got 0"},
	}
	if d := cmp.Diff(want, got); d != "" {
		t.Errorf("(-want +got):\n%s", d)
	}
}

// TestStudyRoundTrip guards the re-encoding of a defaults-filled study: a
// fixed prior at 0 keeps its value, and the encoded study loads again to
// the same value.
func TestStudyRoundTrip(t *testing.T) {
	js := `{"name": "rt", "seed": 5,
	  "designs": [{"name": "d", "measurement": {"lapse": {"dist": "fixed", "value": 0}, "eeg_offset": {"dist": "fixed", "value": 0}}}],
	  "hypotheses": [{"name": "a", "family": "constant", "params": {"level": {"value": 1}}},
	                 {"name": "b", "family": "linear", "params": {"slope": {"min": 0.5, "max": 2}}}]}`
	s, err := LoadStudy([]byte(js))
	if err != nil {
		t.Fatal(err)
	}
	enc, err := json.Marshal(s)
	if err != nil {
		t.Fatal(err)
	}
	s2, err := LoadStudy(enc)
	if err != nil {
		t.Fatalf("re-encoded study does not load: %v\n%s", err, enc)
	}
	enc2, _ := json.Marshal(s2)
	if string(enc) != string(enc2) {
		t.Errorf("round trip changed the study:\n%s\n%s", enc, enc2)
	}
}

// TestOverBudgetFlag: a study whose one fault is its compute budget is
// flagged as such; a study with another fault besides is not.
func TestOverBudgetFlag(t *testing.T) {
	data, err := os.ReadFile(filepath.Join(invalidDir, "budget-over-limit.json"))
	if err != nil {
		t.Fatal(err)
	}
	_, err = LoadStudy(data)
	var ve *ValidationError
	if !errors.As(err, &ve) || !ve.OverBudget {
		t.Fatalf("budget-over-limit: err = %v, want a ValidationError with OverBudget", err)
	}
	_, err = LoadStudy(bytes.Replace(data, []byte(`"seed"`), []byte(`"seed": 1, "bogus"`), 1))
	if errors.As(err, &ve) && ve.OverBudget {
		t.Errorf("a study with an unknown field is flagged over budget: %v", err)
	}
}

func TestFits(t *testing.T) {
	for _, tc := range []struct{ p, g, c, want int }{
		{6, 3, 3, 54}, {10, 1, 6, 60}, {0, 3, 3, 0}, {-2, 3, 3, 0},
		{math.MaxInt / 2, 3, 3, math.MaxInt}, {3, math.MaxInt, 2, math.MaxInt},
	} {
		if got := Fits(tc.p, tc.g, tc.c); got != tc.want {
			t.Errorf("Fits(%d, %d, %d) = %d, want %d", tc.p, tc.g, tc.c, got, tc.want)
		}
	}
	ds := []Design{{Participants: 6}, {Participants: 4}}
	if got := DesignsFits(ds, 3); got != 90 {
		t.Errorf("DesignsFits = %d, want 90", got)
	}
	if got := DesignsFits([]Design{{Participants: math.MaxInt / 4}, {Participants: math.MaxInt / 4}}, 2); got != math.MaxInt {
		t.Errorf("DesignsFits overflow = %d, want MaxInt", got)
	}
}

func TestDefaultGroupSizes(t *testing.T) {
	for _, tc := range []struct {
		pool int
		want []int
	}{
		{100, []int{5, 10, 20, 50}}, {200, []int{5, 10, 20, 40, 100}}, {20, []int{5, 10}}, {30, []int{5, 10, 15}}, {12, []int{6}},
		{10, []int{5}}, {9, []int{4}}, {4, []int{2}}, {3, []int{2}}, {2, []int{2}},
	} {
		if got := DefaultGroupSizes(tc.pool); !slices.Equal(got, tc.want) {
			t.Errorf("DefaultGroupSizes(%d) = %v, want %v", tc.pool, got, tc.want)
		}
	}
}

// TestSmallPoolNoReplicationBlock: a study of 20 participants without a
// replication block used to be rejected for a default group size of 40
// the user never wrote; the default now follows the smallest pool,
// including a vary block over participants.
func TestSmallPoolNoReplicationBlock(t *testing.T) {
	s, err := LoadStudy([]byte(`{"name": "harbour (invented)", "seed": 1,
	  "designs": [{"name": "d", "cti_ms": [300, 600], "participants": 20},
	              {"name": "e", "cti_ms": [300, 600], "participants": 40,
	               "vary": [{"field": "participants", "values": [30, 12]}]}],
	  "hypotheses": [{"name": "a", "family": "constant", "params": {"level": {"min": 0.2, "max": 1.5}}},
	                 {"name": "b", "family": "linear", "params": {"slope": {"min": 0, "max": 2}}}]}`))
	if err != nil {
		t.Fatal(err)
	}
	if want := []int{6}; !slices.Equal(s.Replication.GroupSizes, want) {
		t.Errorf("group_sizes = %v, want %v (half of the smallest pool, 12)", s.Replication.GroupSizes, want)
	}
	if s.Ranking.Objective != ObjectiveCheapestReaching || s.Ranking.Target != 0.8 || s.Designs[0].ITIms != 1000 {
		t.Errorf("defaults: ranking %+v, iti_ms %d", s.Ranking, s.Designs[0].ITIms)
	}
}

func TestRankingAndITIProblems(t *testing.T) {
	s := validStudy()
	s.Ranking = Ranking{Objective: "cheapest", Target: 1.5}
	s.Designs[0].ITIms = -3
	got := map[string]string{}
	for _, p := range s.Validate() {
		got[p.Path] = p.Problem
	}
	for path, want := range map[string]string{
		"ranking.objective": "objective must be one of information, information_per_minute, worst_recovery, cheapest_reaching, got \"cheapest\"",
		"ranking.target":    "target must be in (0, 1], got 1.5",
		"designs[0].iti_ms": "iti_ms must be in 1..60000, got -3",
	} {
		if got[path] != want {
			t.Errorf("%s: got %q, want %q", path, got[path], want)
		}
	}
}
