package pages

import (
	"context"
	"testing"

	"discrimen/internal/golden"
	"discrimen/models"
	"discrimen/recovery"
)

func mustStudy(t testing.TB, js string) *models.Study {
	t.Helper()
	s, err := models.LoadStudy([]byte(js))
	if err != nil {
		t.Fatal(err)
	}
	return s
}

// TestGoldenReportHTML guards the small study's report.html (timing
// removed) against unnoticed change; -update rewrites it. After a
// deliberate change to the page, rerun with -update and review the diff.
func TestGoldenReportHTML(t *testing.T) {
	r, err := recovery.Run(context.Background(), mustStudy(t, golden.SmallStudy), recovery.Options{Workers: 2})
	if err != nil {
		t.Fatal(err)
	}
	r.Timing = recovery.Timing{}
	b, err := Report(r)
	if err != nil {
		t.Fatal(err)
	}
	golden.Check(t, "small-report.html", b)
}
