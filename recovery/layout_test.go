package recovery

import (
	"os"
	"testing"

	"discrimen/models"
)

// TestLayoutPerCTINeural: with precision_sd > 0 every CTI's neural bins
// are stored (each is integrated on its own pieces, model.md §3b); the
// deterministic layout keeps only the longest CTI's, as before.
func TestLayoutPerCTINeural(t *testing.T) {
	data, err := os.ReadFile("../testdata/studies/radio-watch-graded.json")
	if err != nil {
		t.Fatal(err)
	}
	s, err := models.LoadStudy(data)
	if err != nil {
		t.Fatal(err)
	}
	d := s.Designs[1]
	for _, sd := range []float64{0, 0.2} {
		dd := d
		dd.Agent.PrecisionSD = sd
		l, err := models.NewListener(&dd)
		if err != nil {
			t.Fatal(err)
		}
		pr := l.NewPrediction()
		l.Predict(models.Saturating{Low: 0.1, High: 2, Tau: 0.17}, pr, nil)
		lay := newLayoutFor(l, pr)
		wantNeural := 12 // the longest CTI, 1200 ms in 100 ms bins
		if sd > 0 {
			wantNeural = 3 + 6 + 9 + 12
		}
		if got := lay.size(); got != 5*4+wantNeural {
			t.Errorf("sd %g: layout size %d, want %d", sd, got, 5*4+wantNeural)
		}
		flat := make([]float64, lay.size())
		lay.flatten(pr, flat)
		for c, bins := range pr.Neural {
			for b, v := range bins {
				want := v
				if sd == 0 {
					want = pr.Neural[3][b] // a prefix of the longest
				}
				if got := flat[lay.eegAt(c, b)]; got != want {
					t.Errorf("sd %g CTI %d bin %d: stored %g, want %g", sd, dd.CTIms[c], b, got, want)
				}
			}
		}
	}
}
