package main

import (
	"bytes"
	"os"
	"strings"
	"testing"

	"discrimen/models"
)

// TestReadmeStudyIsValid keeps the README's example study true: the first
// JSON block of the README loads without a problem.
func TestReadmeStudyIsValid(t *testing.T) {
	data, err := os.ReadFile("../../README.md")
	if err != nil {
		t.Fatal(err)
	}
	s := string(data)
	i := strings.Index(s, "```json\n")
	if i < 0 {
		t.Fatal("README has no JSON block")
	}
	body := s[i+len("```json\n"):]
	body = body[:strings.Index(body, "```")]
	st, err := models.LoadStudy([]byte(body))
	if err != nil {
		t.Fatalf("README study: %v", err)
	}
	if len(st.Hypotheses) != 3 {
		t.Errorf("README study has %d hypotheses, want 3", len(st.Hypotheses))
	}
	var out, errb bytes.Buffer
	if code := dispatch([]string{"validate", "../../testdata/studies/radio-watch-trials.json"}, &out, &errb); code != 0 {
		t.Errorf("validate radio-watch-trials: exit %d: %s", code, errb.String())
	}
}
