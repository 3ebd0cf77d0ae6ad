package recovery

import (
	"context"
	"testing"

	"discrimen/internal/golden"
)

// TestGoldenReport guards every number of a small study's report.json
// and its tables with their sidecars (timing removed) against unnoticed change. After a
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
	golden.Check(t, "small-report.json", got)
	files, err := r.TableFiles()
	if err != nil {
		t.Fatal(err)
	}
	for _, f := range files {
		golden.Check(t, "small-"+f.Name, f.Data)
	}
}
