package recovery

import (
	"context"
	"os"
	"path/filepath"
	"testing"

	"discrimen/models"
)

// loadTestdataStudy reads a study of testdata/studies and cuts every
// design to n participants per generator.
func loadTestdataStudy(t testing.TB, name string, n int) *models.Study {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("..", "testdata", "studies", name))
	if err != nil {
		t.Fatal(err)
	}
	s, err := models.LoadStudy(b)
	if err != nil {
		t.Fatal(err)
	}
	for i := range s.Designs {
		s.Designs[i].Participants = n
		for j := range s.Designs[i].Vary {
			if s.Designs[i].Vary[j].Field == "participants" {
				s.Designs[i].Vary = append(s.Designs[i].Vary[:j], s.Designs[i].Vary[j+1:]...)
				break
			}
		}
	}
	s.Replication.GroupSizes = models.DefaultGroupSizes(n)
	s.Replication.Replicates = 20
	return s
}

// TestNoSearchBelowTruth: on every study in testdata, at 10 participants
// per generator, no self-fit ends below the ln L of the generating
// parameters (measurement terms fitted) by more than 1e-6.
func TestNoSearchBelowTruth(t *testing.T) {
	if testing.Short() {
		t.Skip("runs every testdata study")
	}
	paths, err := filepath.Glob("../testdata/studies/*.json")
	if err != nil || len(paths) < 4 {
		t.Fatalf("testdata studies: %v, %d found", err, len(paths))
	}
	for _, path := range paths {
		name := filepath.Base(path)
		t.Run(name, func(t *testing.T) {
			s := loadTestdataStudy(t, name, 10)
			r, err := Run(context.Background(), s, Options{})
			if err != nil {
				t.Fatal(err)
			}
			for _, d := range r.Designs {
				ff := d.FitFailures
				if ff.TruthChecked != 10*len(r.Hypotheses) {
					t.Errorf("%s: %d self-fits checked, want %d", d.Name, ff.TruthChecked, 10*len(r.Hypotheses))
				}
				if ff.BelowTruth != 0 {
					t.Errorf("%s: %d of %d self-fits below the truth (largest gap %.3g)", d.Name, ff.BelowTruth, ff.TruthChecked, float64(ff.MaxTruthGap))
				}
			}
		})
	}
}
