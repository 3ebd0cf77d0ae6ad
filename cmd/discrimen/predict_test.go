package main

import (
	"bytes"
	"encoding/json"
	"errors"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"
)

func runPredict(args ...string) (code int, stdout, stderr string) {
	var out, errOut bytes.Buffer
	code = cmdPredict(args, &out, &errOut)
	return code, out.String(), errOut.String()
}

// demoHypotheses are the embedded demo study's hypotheses, in file order.
var demoHypotheses = []string{"steady-watch", "linear-ramp", "late-surge", "early-lift", "lamp-switch", "timed-expectation"}

// TestPredictHTML: --html writes the page and the table still goes to
// stdout; with --format json the JSON goes to stdout instead.
func TestPredictHTML(t *testing.T) {
	dir := t.TempDir()
	cases := []struct {
		name, format string
		stdoutHas    string
	}{
		{"table", "table", "design lamp-behaviour-eeg: 3 streams, 8 items"},
		{"json", "json", `"design": "lamp-behaviour-eeg"`},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			file := filepath.Join(dir, tc.name+".html")
			code, out, errOut := runPredict("--design", "lamp-behaviour-eeg", "--format", tc.format, "--html", file)
			if code != 0 {
				t.Fatalf("exit %d, stderr %q", code, errOut)
			}
			if !strings.Contains(out, tc.stdoutHas) {
				t.Errorf("stdout lacks %q:\n%s", tc.stdoutHas, out)
			}
			page, err := os.ReadFile(file)
			if err != nil {
				t.Fatal(err)
			}
			p := string(page)
			if !strings.HasPrefix(p, "<!DOCTYPE html>") || !strings.HasSuffix(strings.TrimSpace(p), "</html>") {
				t.Fatal("--html did not write a whole HTML page")
			}
			// RT, accuracy, misdirected, and one neural panel per CTI
			// (the demo design has four).
			if n := strings.Count(p, "<svg "); n != 3+4 {
				t.Errorf("page has %d charts, want 7", n)
			}
			for _, h := range demoHypotheses {
				if !strings.Contains(p, h) {
					t.Errorf("page lacks hypothesis %q", h)
				}
			}
			if !strings.Contains(p, "lamp-behaviour-eeg") || !strings.Contains(p, "An invented scenario.") {
				t.Error("page lacks the design name or the invented-scenario note")
			}
		})
	}
	// A page that cannot be written is an error naming the flag.
	code, _, errOut := runPredict("--html", filepath.Join(dir, "no-such-dir", "p.html"))
	if code != 1 || !strings.Contains(errOut, "--html") {
		t.Errorf("unwritable --html: exit %d, stderr %q; want exit 1 naming --html", code, errOut)
	}
}

// predictJSON is the shape `discrimen predict --format json` prints.
type predictJSON struct {
	Design     string `json:"design"`
	Hypotheses []struct {
		Name   string             `json:"name"`
		Family string             `json:"family"`
		Params map[string]float64 `json:"params"`
		CTIms  []int              `json:"cti_ms"`
		Valid  struct {
			RTms     []float64 `json:"rt_ms"`
			Accuracy []float64 `json:"accuracy"`
		} `json:"valid"`
		Invalid struct {
			RTms        []float64 `json:"rt_ms"`
			Accuracy    []float64 `json:"accuracy"`
			Misdirected []float64 `json:"misdirected"`
		} `json:"invalid"`
		Neural struct {
			BinMs int         `json:"bin_ms"`
			ByCTI [][]float64 `json:"by_cti"`
		} `json:"neural"`
		Censored struct {
			Valid   []float64 `json:"valid"`
			Invalid []float64 `json:"invalid"`
		} `json:"censored"`
	} `json:"hypotheses"`
}

func predictDemoJSON(t *testing.T, args ...string) (predictJSON, map[string]any) {
	t.Helper()
	code, out, errOut := runPredict(append([]string{"--format", "json"}, args...)...)
	if code != 0 {
		t.Fatalf("exit %d, stderr %q", code, errOut)
	}
	var typed predictJSON
	dec := json.NewDecoder(strings.NewReader(out))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&typed); err != nil {
		t.Fatalf("JSON does not have the documented shape: %v", err)
	}
	var raw map[string]any
	if err := json.Unmarshal([]byte(out), &raw); err != nil {
		t.Fatal(err)
	}
	return typed, raw
}

// TestPredictJSONShape checks every documented key and the lengths that tie
// them to the design (the demo's first design: CTIs 300–1200 ms in 100 ms
// neural bins).
func TestPredictJSONShape(t *testing.T) {
	p, raw := predictDemoJSON(t)
	if p.Design != "lamp-behaviour" {
		t.Errorf("design = %q, want lamp-behaviour (the first)", p.Design)
	}
	var names []string
	for _, h := range p.Hypotheses {
		names = append(names, h.Name)
	}
	if !reflect.DeepEqual(names, demoHypotheses) {
		t.Fatalf("hypotheses %v, want %v", names, demoHypotheses)
	}
	ctis := []int{300, 600, 900, 1200}
	for _, h := range p.Hypotheses {
		if h.Family == "" || len(h.Params) == 0 {
			t.Errorf("%s: family %q, params %v", h.Name, h.Family, h.Params)
		}
		if !reflect.DeepEqual(h.CTIms, ctis) {
			t.Errorf("%s: cti_ms = %v, want %v", h.Name, h.CTIms, ctis)
		}
		for field, n := range map[string]int{
			"valid.rt_ms": len(h.Valid.RTms), "valid.accuracy": len(h.Valid.Accuracy),
			"invalid.rt_ms": len(h.Invalid.RTms), "invalid.accuracy": len(h.Invalid.Accuracy),
			"invalid.misdirected": len(h.Invalid.Misdirected), "neural.by_cti": len(h.Neural.ByCTI),
			"censored.valid": len(h.Censored.Valid), "censored.invalid": len(h.Censored.Invalid),
		} {
			if n != len(ctis) {
				t.Errorf("%s: %s has %d entries, want %d", h.Name, field, n, len(ctis))
			}
		}
		if h.Neural.BinMs != 100 {
			t.Errorf("%s: neural.bin_ms = %d, want 100", h.Name, h.Neural.BinMs)
		}
		for c, bins := range h.Neural.ByCTI {
			if want := ctis[c] / 100; len(bins) != want {
				t.Errorf("%s: neural.by_cti[%d] has %d bins, want %d (CTI / bin)", h.Name, c, len(bins), want)
			}
		}
	}
	// The keys, read untyped, so that a renamed field cannot hide behind
	// the struct's defaults.
	h0 := raw["hypotheses"].([]any)[0].(map[string]any)
	for _, path := range [][]string{{"name"}, {"family"}, {"params"}, {"cti_ms"}, {"valid", "rt_ms"}, {"valid", "accuracy"},
		{"invalid", "rt_ms"}, {"invalid", "accuracy"}, {"invalid", "misdirected"}, {"neural", "bin_ms"}, {"neural", "by_cti"},
		{"censored", "valid"}, {"censored", "invalid"}} {
		var v any = h0
		for _, k := range path {
			m, ok := v.(map[string]any)
			if !ok {
				v = nil
				break
			}
			v = m[k]
		}
		if v == nil {
			t.Errorf("hypotheses[0] has no key %s", strings.Join(path, "."))
		}
	}
}

// TestPredictSet: --set early-lift.tau=0.5 moves that parameter and that
// hypothesis's RTs, and nothing else.
func TestPredictSet(t *testing.T) {
	base, _ := predictDemoJSON(t)
	set, _ := predictDemoJSON(t, "--set", "early-lift.tau=0.5")
	for i, h := range set.Hypotheses {
		b := base.Hypotheses[i]
		if h.Name != "early-lift" {
			if !reflect.DeepEqual(h, b) {
				t.Errorf("%s changed under --set early-lift.tau", h.Name)
			}
			continue
		}
		if !scalar.EqualWithinAbsOrRel(h.Params["tau"], 0.5, 1e-12, 1e-12) {
			t.Errorf("early-lift params.tau = %v, want 0.5", h.Params["tau"])
		}
		// The reference tau is the median of loguniform [0.05, 1], the
		// geometric mean √0.05 ≈ 0.2236.
		if !scalar.EqualWithinAbsOrRel(b.Params["tau"], 0.22360679774997896, 1e-9, 1e-9) {
			t.Errorf("early-lift reference tau = %v, want √0.05", b.Params["tau"])
		}
		moved := false
		for c := range h.Valid.RTms {
			moved = moved || !scalar.EqualWithinAbsOrRel(h.Valid.RTms[c], b.Valid.RTms[c], 1e-9, 1e-9)
		}
		if !moved {
			t.Errorf("early-lift valid RTs %v did not change from %v", h.Valid.RTms, b.Valid.RTms)
		}
		// A slower rise of precision (larger tau) cannot make the agent
		// faster at the shortest CTI.
		if h.Valid.RTms[0] < b.Valid.RTms[0] {
			t.Errorf("valid RT at 300 ms fell from %.1f to %.1f with a slower rise", b.Valid.RTms[0], h.Valid.RTms[0])
		}
	}
}

func TestPredictBadSet(t *testing.T) {
	cases := []struct {
		name, set string
		wantCode  int
		want      []string
	}{
		{"unknown hypothesis", "early-lyft.tau=0.5", 2, []string{`no hypothesis "early-lyft"; hypotheses: steady-watch, linear-ramp, late-surge, early-lift, lamp-switch, timed-expectation`}},
		{"unknown parameter", "early-lift.tua=0.5", 2, []string{`parameter "tua" is not allowed for family saturating; allowed: tau, low, high`}},
		{"not a number", "early-lift.tau=half", 2, []string{`value of early-lift.tau must be a finite number, got "half"`}},
		{"NaN", "early-lift.tau=NaN", 2, []string{`value of early-lift.tau must be a finite number, got "NaN"`}},
		{"out of the family's domain", "early-lift.tau=-1", 2, []string{"--set early-lift: hypotheses[3].params.tau.value: tau value must be > 0, got -1"}},
		{"no parameter", "early-lift=0.5", 2, []string{"HYPOTHESIS.PARAM=VALUE"}},
		{"outside the range", "early-lift.tau=300", 2, []string{"--set early-lift.tau=300: tau must be within its range [0.05, 1] in the study file (hypotheses[3].params.tau)"}},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			code, out, errOut := runPredict("--set", tc.set)
			if code != tc.wantCode {
				t.Fatalf("exit %d, want %d; stderr %q", code, tc.wantCode, errOut)
			}
			if out != "" {
				t.Errorf("stdout = %q, want nothing", out)
			}
			for _, w := range tc.want {
				if !strings.Contains(errOut, w) {
					t.Errorf("stderr lacks %q: %q", w, errOut)
				}
			}
		})
	}
}

// shortWriter accepts n bytes, then fails every write.
type shortWriter struct{ n int }

var errShortWrite = errors.New("disk full")

func (w *shortWriter) Write(p []byte) (int, error) {
	if len(p) > w.n {
		k := w.n
		w.n = 0
		return k, errShortWrite
	}
	w.n -= len(p)
	return len(p), nil
}

// TestPredictTableWriteFails: a table that cannot be written (a full disk,
// a closed pipe) is exit 1 with the reason, not exit 0 with half a table.
func TestPredictTableWriteFails(t *testing.T) {
	var errOut bytes.Buffer
	code := cmdPredict(nil, &shortWriter{n: 300}, &errOut)
	if code != 1 || !strings.Contains(errOut.String(), "disk full") {
		t.Fatalf("exit %d, stderr %q; want 1 naming the write error", code, errOut.String())
	}
}
