package models_test

import (
	"errors"
	"fmt"

	"discrimen/models"
)

// An invented scenario: a watch officer listens to two radio channels for
// berth numbers, and a cue says which channel will carry the next one.
const watchStudy = `{
  "name": "berth-watch example (invented)", "seed": 3,
  "designs": [{"name": "two-channels", "cti_ms": [300, 900], "participants": 8}],
  "hypotheses": [
    {"name": "steady", "family": "constant", "params": {"level": {"value": 1}}},
    {"name": "rising", "family": "linear", "params": {"slope": {"min": 0.5, "max": 3}}}
  ],
  "replication": {"group_sizes": [4, 8]}
}`

func ExampleLoadStudy() {
	s, err := models.LoadStudy([]byte(watchStudy))
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(s.Name, "—", len(s.Designs), "design,", len(s.Hypotheses), "hypotheses,", s.TotalFits(), "fits")

	// Every problem of a bad file at once, each with its path.
	_, err = models.LoadStudy([]byte(`{"name": "x", "designs": [{"name": "d", "cti_ms": [-5]}], "hypotheses": []}`))
	var ve *models.ValidationError
	if errors.As(err, &ve) {
		for _, p := range ve.Problems {
			fmt.Printf("%s: %s\n", p.Path, p.Problem)
		}
	}
	// Output:
	// berth-watch example (invented) — 1 design, 2 hypotheses, 32 fits
	// designs[0].cti_ms[0]: cti_ms[0] must be in 1..60000, got -5
	// hypotheses: hypotheses must have 2..12 entries, got 0
}

func ExamplePredictDesign() {
	s, err := models.LoadStudy([]byte(watchStudy))
	if err != nil {
		fmt.Println(err)
		return
	}
	// Free parameters are predicted at their generating median unless set.
	preds, err := models.PredictDesign(s, &s.Designs[0], map[string]map[string]float64{"rising": {"slope": 2}})
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, p := range preds {
		for c, cti := range p.CTIms {
			fmt.Printf("%s CTI %d ms: valid RT %.1f ms, invalid accuracy %.2f\n", p.Name, cti, p.Valid.RTms[c], p.Invalid.Accuracy[c])
		}
	}
	// Output:
	// steady CTI 300 ms: valid RT 67.6 ms, invalid accuracy 0.90
	// steady CTI 900 ms: valid RT 67.2 ms, invalid accuracy 0.90
	// rising CTI 300 ms: valid RT 104.7 ms, invalid accuracy 0.90
	// rising CTI 900 ms: valid RT 43.2 ms, invalid accuracy 0.02
}
