package recovery

import (
	"os"
	"strings"
	"testing"
)

// TestRoundTripDemo is TestRoundTripMatchesRun on the demo study (six
// hypotheses, both designs, 16 participants per generator): every
// generator's own candidate keeps the run's ln L and estimates, and every
// participant keeps the run's winners under every criterion.
func TestRoundTripDemo(t *testing.T) {
	if testing.Short() {
		t.Skip("fits 1,152 datasets twice (about 5 s)")
	}
	b, _ := os.ReadFile("../testdata/studies/radio-watch.json")
	js := strings.ReplaceAll(string(b), `"participants": 100`, `"participants": 16`)
	js = strings.Replace(js, `"group_sizes": [10, 20, 40]`, `"group_sizes": [4]`, 1)
	s := mustStudy(t, js)
	rep, err := Run(t.Context(), s, Options{Workers: 2})
	if err != nil {
		t.Fatal(err)
	}
	for di, dname := range []string{"lamp-behaviour", "lamp-behaviour-eeg"} {
		c, err := CompileDesign(t.Context(), s, dname, 2)
		if err != nil {
			t.Fatal(err)
		}
		P := 16
		bad, selfBad, total := 0, 0, 0
		for gi, h := range s.Hypotheses {
			files, _ := Export(s, dname, h.Name, P)
			var eeg *DataFile
			if len(files) == 6 {
				eeg = &DataFile{"eeg.csv", files[2].Data}
			}
			data, err := ParseCollected(&c.Designs[0], DataFile{"trials.csv", files[0].Data}, eeg, nil)
			if err != nil {
				t.Fatal(err)
			}
			cf, err := c.FitCollected(t.Context(), data, FitOptions{Workers: 2})
			if err != nil {
				t.Fatal(err)
			}
			for p := range P {
				run := rep.Fits[di][gi*P+p].Fits
				total++
				self := cf.Participants[p].Fits[gi]
				if !close9(float64(self.LogL), run[gi].LogL) {
					selfBad++
				}
				for i, name := range run[gi].Names {
					if !close9(float64(self.Params[name].Estimate), run[gi].Params[i]) {
						selfBad++
					}
				}
				rw := winners(run)
				for _, cr := range Criteria {
					if strings.Join(rw[cr], ",") != strings.Join(cf.Participants[p].Winner[cr], ",") {
						bad++
						t.Errorf("%s %s participant %d %s: winner %v, run %v", dname, h.Name, p, cr, cf.Participants[p].Winner[cr], rw[cr])
					}
				}
			}
		}
		if selfBad > 0 || bad > 0 || total != 96 {
			t.Errorf("%s: %d participants, %d self-fit figures and %d winners differ from the run", dname, total, selfBad, bad)
		}
	}
}
