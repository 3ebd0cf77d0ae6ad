package main

import (
	"bytes"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"discrimen/models"
)

func runValidate(args ...string) (code int, stdout, stderr string) {
	var out, errOut bytes.Buffer
	code = cmdValidate(args, &out, &errOut)
	return code, out.String(), errOut.String()
}

func TestValidateMinimalStudy(t *testing.T) {
	code, out, errOut := runValidate("../../testdata/studies/minimal.json")
	if code != 0 {
		t.Fatalf("exit %d, stdout %q, stderr %q", code, out, errOut)
	}
	// One design, two hypotheses: 20 participants × 2 generators × 2 candidates.
	want := "ok: berth-watch-minimal (invented scenario) (1 designs, 2 hypotheses, 80 fits)\n"
	if out != want {
		t.Errorf("stdout = %q, want %q", out, want)
	}
	if errOut != "" {
		t.Errorf("stderr = %q, want nothing", errOut)
	}
}

func TestValidateInvalidStudies(t *testing.T) {
	files, err := filepath.Glob("../../testdata/studies/invalid/*.json")
	if err != nil {
		t.Fatal(err)
	}
	if len(files) < 10 {
		t.Fatalf("found %d invalid studies, want at least 10", len(files))
	}
	for _, f := range files {
		t.Run(strings.TrimSuffix(filepath.Base(f), ".json"), func(t *testing.T) {
			code, out, errOut := runValidate(f)
			if code != 1 {
				t.Fatalf("exit %d, want 1; stdout %q", code, out)
			}
			data, err := os.ReadFile(f)
			if err != nil {
				t.Fatal(err)
			}
			// The command prints exactly what LoadStudy found, one per line.
			_, lerr := models.LoadStudy(data)
			var ve *models.ValidationError
			if !errors.As(lerr, &ve) {
				t.Fatalf("LoadStudy error %v is not a *ValidationError", lerr)
			}
			var want strings.Builder
			for _, p := range ve.Problems {
				want.WriteString(p.String() + "\n")
			}
			if out != want.String() {
				t.Errorf("stdout = %q, want %q", out, want.String())
			}
			if !strings.Contains(errOut, f+": 1 problem\n") {
				t.Errorf("stderr = %q, want the count of problems", errOut)
			}
		})
	}
}

func TestValidateOutputLines(t *testing.T) {
	cases := []struct{ file, line string }{
		{"streams-too-many", "designs[0].streams: streams must be in 2..6, got 7\n"},
		{"validity-below-chance", "designs[0].validity: validity must be in [1/streams, 1] = [0.333, 1], got 0.2\n"},
		{"param-unknown", `hypotheses[1].params: parameter "horizonn" is not allowed for family exponential; allowed: rate, horizon, low, high` + "\n"},
		{"budget-over-limit", "the study needs 5,760,000 fits (participants × hypotheses² summed over designs, 4 designs with vary blocks expanded); the limit is 5,000,000\n"},
	}
	for _, tc := range cases {
		t.Run(tc.file, func(t *testing.T) {
			code, out, _ := runValidate("../../testdata/studies/invalid/" + tc.file + ".json")
			if code != 1 || out != tc.line {
				t.Errorf("exit %d, stdout %q; want 1, %q", code, out, tc.line)
			}
		})
	}
}

func TestValidateUsage(t *testing.T) {
	cases := []struct {
		name   string
		args   []string
		code   int
		stderr string
	}{
		{"no file", nil, 2, "usage: discrimen validate STUDY.json"},
		{"two files", []string{"a.json", "b.json"}, 2, "usage: discrimen validate STUDY.json"},
		{"unknown flag", []string{"--strict", "a.json"}, 2, "flag provided but not defined: -strict"},
		{"missing file", []string{"../../testdata/studies/no-such-study.json"}, 2, "no-such-study.json: no such file or directory"},
		{"help", []string{"-h"}, 0, "usage: discrimen validate STUDY.json"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			code, out, errOut := runValidate(tc.args...)
			if code != tc.code {
				t.Errorf("exit %d, want %d", code, tc.code)
			}
			if out != "" {
				t.Errorf("stdout = %q, want nothing", out)
			}
			if !strings.Contains(errOut, tc.stderr) {
				t.Errorf("stderr = %q, want it to contain %q", errOut, tc.stderr)
			}
		})
	}
}

func TestValidateThroughDispatch(t *testing.T) {
	var out, errOut bytes.Buffer
	if code := dispatch([]string{"validate", "../../testdata/studies/minimal.json"}, &out, &errOut); code != 0 {
		t.Fatalf("dispatch exit %d, stderr %q", code, errOut.String())
	}
	if !strings.HasPrefix(out.String(), "ok: ") {
		t.Errorf("stdout = %q", out.String())
	}
}

// TestValidateWarnings: warnings alone exit 0 and are printed as
// "warning: PATH: ..."; with an error besides, the exit is 1 and both are
// printed.
func TestValidateWarnings(t *testing.T) {
	dir := t.TempDir()
	const study = `{"name": "slip (invented)", "designs": [{"name": "d", "participants": 4%s}],
	  "replication": {"group_sizes": [2]},
	  "hypotheses": [{"family": "constant", "params": {"level": {"min": 0.2, "max": 1.8}}},
	    {"family": "logistic", "params": {"midpoint": {"min": 200, "max": 1200}, "width": {"value": 0.1}}}]}`
	write := func(name, extra string) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, []byte(fmt.Sprintf(study, extra)), 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	const warning = `warning: hypotheses[1].params.midpoint: midpoint range [200, 1200] s reaches beyond the longest CTI + response window of any design (2.7 s, design "d"); midpoint is in seconds: were milliseconds written?`
	code, out, errOut := runValidate(write("warn.json", ""))
	if code != 0 || out != warning+"\nok: slip (invented) (1 designs, 2 hypotheses, 16 fits, 1 warning)\n" {
		t.Fatalf("exit %d, stdout %q, stderr %q", code, out, errOut)
	}
	code, out, _ = runValidate(write("both.json", `, "validity": 0.2`))
	if code != 1 || out != "designs[0].validity: validity must be in [1/streams, 1] = [0.333, 1] with streams = 3 (the default), got 0.2\n"+warning+"\n" {
		t.Fatalf("exit %d, stdout %q", code, out)
	}
}
