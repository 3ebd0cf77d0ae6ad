package main

import (
	"bytes"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// collectedStudyFile is an invented scenario: a watch officer listening
// for berth numbers on radio channels.
const collectedStudyFile = `{
  "name": "berth-watch-cli (invented scenario)",
  "seed": 3,
  "designs": [{"name": "two-waits", "cti_ms": [300, 600], "trials_per_cti": 30, "participants": 5, "measures": ["rt", "accuracy", "eeg"]}],
  "hypotheses": [
    {"name": "steady-lamp", "family": "constant", "params": {"level": {"min": 0.2, "max": 1.8}}},
    {"name": "rising-watch", "family": "linear", "params": {"slope": {"min": 0, "max": 2}}}
  ],
  "replication": {"group_sizes": [2]}
}`

func runCmd(args ...string) (int, string, string) {
	var out, errOut bytes.Buffer
	code := dispatch(args, &out, &errOut)
	return code, out.String(), errOut.String()
}

// TestExportThenFit runs the commands end to end: run, export, fit with
// the recovery report; fit.json holds the documented shape.
func TestExportThenFit(t *testing.T) {
	dir := t.TempDir()
	study := filepath.Join(dir, "study.json")
	if err := os.WriteFile(study, []byte(collectedStudyFile), 0o644); err != nil {
		t.Fatal(err)
	}
	if code, _, errOut := runCmd("run", study, "--out", filepath.Join(dir, "run"), "--quiet"); code != 0 {
		t.Fatalf("run: %d %s", code, errOut)
	}
	ex := filepath.Join(dir, "ex")
	if code, _, errOut := runCmd("export", study, "--design", "two-waits", "--generator", "rising-watch", "--participants", "3", "--out", ex); code != 0 {
		t.Fatalf("export: %d %s", code, errOut)
	}
	out := filepath.Join(dir, "fit")
	code, stdout, errOut := runCmd("fit", study, "--design", "two-waits", "--trials", filepath.Join(ex, "trials.csv"), "--eeg", filepath.Join(ex, "eeg.csv"),
		"--recovery", filepath.Join(dir, "run", "report.json"), "--out", out)
	if code != 0 {
		t.Fatalf("fit: %d %s", code, errOut)
	}
	if !strings.Contains(stdout, "BMS: ") {
		t.Errorf("stdout %q", stdout)
	}
	for _, f := range []string{"fit.json", "fit.html", "fit_candidates.csv", "fit_candidates.json", "fit_params.csv", "fit_params.json", "fit_checks.csv", "fit_checks.json", "fit_group.csv", "fit_group.json"} {
		if _, err := os.Stat(filepath.Join(out, f)); err != nil {
			t.Errorf("no %s", f)
		}
	}
	b, err := os.ReadFile(filepath.Join(out, "fit.json"))
	if err != nil {
		t.Fatal(err)
	}
	var fit struct {
		Participants []struct {
			Participant string              `json:"participant"`
			Winner      map[string][]string `json:"winner"`
			Fits        []struct {
				Candidate string  `json:"candidate"`
				LogL      float64 `json:"logl"`
				K, N      int
				AIC       float64 `json:"aic"`
				AICc      float64 `json:"aicc"`
				BIC       float64 `json:"bic"`
				Params    map[string]struct {
					Estimate float64 `json:"estimate"`
					Interval struct {
						Low, High float64
					} `json:"interval"`
				} `json:"params"`
			} `json:"fits"`
		} `json:"participants"`
		Group struct {
			ExpectedFrequencies map[string]float64 `json:"expected_frequencies"`
			Exceedance          map[string]float64 `json:"exceedance"`
			ProtectedExceedance map[string]float64 `json:"protected_exceedance"`
			OmnibusRisk         float64            `json:"omnibus_risk"`
		} `json:"group"`
	}
	if err := json.Unmarshal(b, &fit); err != nil {
		t.Fatal(err)
	}
	if len(fit.Participants) != 3 || fit.Participants[2].Participant != "2" || len(fit.Participants[0].Winner["bic"]) == 0 || len(fit.Participants[0].Fits) != 2 {
		t.Fatalf("fit.json shape: %+v", fit.Participants)
	}
	f := fit.Participants[0].Fits[1]
	if f.Candidate != "rising-watch" || f.K == 0 || f.N == 0 || f.Params["slope"].Interval.High < f.Params["slope"].Interval.Low {
		t.Errorf("fit %+v", f)
	}
	sum := fit.Group.ExpectedFrequencies["steady-lamp"] + fit.Group.ExpectedFrequencies["rising-watch"]
	if sum < 1-1e-9 || sum > 1+1e-9 || len(fit.Group.ProtectedExceedance) != 2 {
		t.Errorf("group %+v", fit.Group)
	}
}

// TestFitBadDataWritesNothing: a file that does not parse leaves the
// output directory absent and names the file, the row and the column.
func TestFitBadDataWritesNothing(t *testing.T) {
	dir := t.TempDir()
	study := filepath.Join(dir, "study.json")
	os.WriteFile(study, []byte(collectedStudyFile), 0o644)
	trials := filepath.Join(dir, "trials.tsv")
	os.WriteFile(trials, []byte("subj\tcti_ms\tcue\treport\tRT\ns1\t300\tvalid\ttarget\t401\ns1\t300\tinvalid\tnowhere\tNA\n"), 0o644)
	out := filepath.Join(dir, "fit")
	code, _, errOut := runCmd("fit", study, "--design", "two-waits", "--trials", trials, "--columns", "participant=subj,rt_ms=RT", "--out", out)
	if code != 1 {
		t.Fatalf("exit %d", code)
	}
	want := "discrimen fit: the data do not parse; nothing was written:\ntrials.tsv: row 2, column report: \"nowhere\" is not one of target, cued, other\n"
	if errOut != want {
		t.Errorf("stderr\n got %q\nwant %q", errOut, want)
	}
	if _, err := os.Stat(out); !os.IsNotExist(err) {
		t.Errorf("the output directory exists: %v", err)
	}
	code, _, errOut = runCmd("fit", study, "--design", "two-waits", "--trials", trials, "--columns", "subject=subj", "--out", out)
	if code != 1 || errOut != "discrimen fit: --columns: unknown column \"subject\" (the format's columns are participant, cti_ms, cue, report, rt_ms, bin_start_ms, value)\n" {
		t.Errorf("%d %q", code, errOut)
	}
}
