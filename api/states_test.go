package api

import (
	"encoding/json"
	"os"
	"slices"
	"testing"

	"discrimen/worker"
)

// TestOpenAPIStates: the document's State enum lists exactly the states a
// status can report: every stored state and recovering.
func TestOpenAPIStates(t *testing.T) {
	b, err := os.ReadFile("openapi.json")
	if err != nil {
		t.Fatal(err)
	}
	var doc struct {
		Components struct {
			Schemas struct {
				State struct {
					Enum []string `json:"enum"`
				} `json:"State"`
			} `json:"schemas"`
		} `json:"components"`
	}
	if err := json.Unmarshal(b, &doc); err != nil {
		t.Fatal(err)
	}
	var want []string
	for _, s := range append(slices.Clone(worker.States), worker.Recovering) {
		want = append(want, string(s))
	}
	got := doc.Components.Schemas.State.Enum
	slices.Sort(want)
	slices.Sort(got)
	if !slices.Equal(want, got) {
		t.Fatalf("openapi.json State enum %v, want %v", got, want)
	}
}
