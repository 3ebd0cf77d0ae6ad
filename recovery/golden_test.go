package recovery

import (
	"bytes"
	"context"
	"flag"
	"os"
	"path/filepath"
	"testing"
)

var update = flag.Bool("update", false, "rewrite the golden files in testdata/golden")

// TestGoldenReport guards every number of a small study's report.json
// and fits.csv (timing removed) against unnoticed change. After a
// deliberate change to the science, rerun with -update and review the diff.
func TestGoldenReport(t *testing.T) {
	r, err := Run(context.Background(), mustStudy(t, smallStudy), Options{Workers: 2})
	if err != nil {
		t.Fatal(err)
	}
	if r.Method != CurrentMethod() {
		t.Errorf("report method %+v, want this build's %+v", r.Method, CurrentMethod())
	}
	got := reportBytes(t, r)
	checkGolden(t, "small-report.json", got)
	csv, err := r.FitsCSV()
	if err != nil {
		t.Fatal(err)
	}
	checkGolden(t, "small-fits.csv", csv)
}

// checkGolden compares got with testdata/golden/name, line by line, or
// rewrites the file under -update.
func checkGolden(t *testing.T, name string, got []byte) {
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
	if !bytes.Equal(got, want) {
		gl, wl := bytes.Split(got, []byte("\n")), bytes.Split(want, []byte("\n"))
		for i := 0; i < len(gl) && i < len(wl); i++ {
			if !bytes.Equal(gl[i], wl[i]) {
				t.Fatalf("%s differs from %s at line %d:\n  want %.300s\n  got  %.300s\n(run with -update after a deliberate change)", name, path, i+1, wl[i], gl[i])
			}
		}
		t.Fatalf("%s differs from %s in length (%d vs %d lines)", name, path, len(gl), len(wl))
	}
}
