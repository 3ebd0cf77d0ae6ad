// Package golden holds what the golden-file tests of recovery and pages
// share: the small study both render, and the comparison with a file in
// the calling package's testdata/golden (rewritten under -update). It is
// imported by tests only.
package golden

import (
	"bytes"
	"flag"
	"os"
	"path/filepath"
	"testing"
)

var update = flag.Bool("update", false, "rewrite the golden files in testdata/golden")

// SmallStudy is the invented study behind the golden report.json,
// fits.csv and report.html: three hypotheses, one design of six
// participants per generator with every measure.
const SmallStudy = `{
  "name": "small (invented)", "seed": 7,
  "designs": [{"name": "d", "cti_ms": [300, 600, 900], "trials_per_cti": 30, "participants": 6,
               "measures": ["rt", "accuracy", "eeg"]}],
  "hypotheses": [
    {"name": "flat", "family": "constant", "params": {"level": {"min": 0.3, "max": 1.5}}},
    {"name": "ramp", "family": "linear", "params": {"slope": {"min": 0.5, "max": 3}}},
    {"name": "switch", "family": "logistic", "params": {"midpoint": {"min": 0.2, "max": 0.8}, "width": {"min": 0.05, "max": 0.3}}}
  ],
  "replication": {"group_sizes": [3, 6], "replicates": 20}
}`

// Check compares got with testdata/golden/name, line by line, or rewrites
// the file under -update.
func Check(t *testing.T, name string, got []byte) {
	t.Helper()
	path := filepath.Join("testdata", "golden", name)
	if *update {
		if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(path, got, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("%v (run with -update to create it)", err)
	}
	if bytes.Equal(got, want) {
		return
	}
	gl, wl := bytes.Split(got, []byte("\n")), bytes.Split(want, []byte("\n"))
	for i := 0; i < len(gl) && i < len(wl); i++ {
		if !bytes.Equal(gl[i], wl[i]) {
			t.Fatalf("%s differs from %s at line %d:\n  want %.300s\n  got  %.300s\n(run with -update after a deliberate change)", name, path, i+1, wl[i], gl[i])
		}
	}
	t.Fatalf("%s differs from %s in length (%d vs %d lines)", name, path, len(gl), len(wl))
}
