package api

import (
	"bytes"
	"context"
	"encoding/json"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"

	"discrimen/models"
	"discrimen/worker"
)

// acceptBackend accepts every study without Redis.
type acceptBackend struct{ worker.Client }

func (acceptBackend) SubmitOnce(ctx context.Context, owner, _ string, _ []byte, s *models.Study, _ int64, admit func(context.Context) error) (worker.Status, bool, error) {
	if err := admit(ctx); err != nil {
		return worker.Status{}, false, err
	}
	return worker.Status{ID: "s-1", Owner: owner, Name: s.Name, State: worker.Queued}, false, nil
}

func (acceptBackend) Usage(context.Context, string) (worker.Usage, error) { return worker.Usage{}, nil }

// TestSubmitReturnsWarnings: a study whose logistic midpoint is written in
// milliseconds is accepted (202) with that one warning beside the answer; a
// study without one answers "warnings": [].
func TestSubmitReturnsWarnings(t *testing.T) {
	a, err := New(Config{Backend: &acceptBackend{}, NoAuth: true})
	if err != nil {
		t.Fatal(err)
	}
	post := func(study string) (int, map[string]json.RawMessage) {
		req, err := http.NewRequest("POST", "/v1/studies", strings.NewReader(study))
		if err != nil {
			t.Fatal(err)
		}
		req.Header.Set("Content-Type", "application/json")
		rec := httptest.NewRecorder()
		a.ServeHTTP(rec, req)
		var body map[string]json.RawMessage
		if err := json.Unmarshal(rec.Body.Bytes(), &body); err != nil {
			t.Fatalf("%d %s: %v", rec.Code, rec.Body.String(), err)
		}
		return rec.Code, body
	}
	const slipped = `{"name": "slip (invented)", "designs": [{"participants": 2}],
	  "hypotheses": [{"family": "constant", "params": {"level": {"min": 0.2, "max": 1.8}}},
	    {"family": "logistic", "params": {"midpoint": {"min": 200, "max": 1200}, "width": {"value": 0.1}}}],
	  "replication": {"group_sizes": [2]}}`
	code, body := post(slipped)
	if code != http.StatusAccepted {
		t.Fatalf("POST: %d %v", code, body)
	}
	var warnings []Field
	if err := json.Unmarshal(body["warnings"], &warnings); err != nil {
		t.Fatal(err)
	}
	if len(warnings) != 1 || warnings[0].Path != "hypotheses[1].params.midpoint" || !strings.Contains(warnings[0].Problem, "were milliseconds written?") {
		t.Fatalf("warnings = %+v, want one at hypotheses[1].params.midpoint", warnings)
	}
	clean := strings.Replace(slipped, `"min": 200, "max": 1200`, `"min": 0.2, "max": 1.2`, 1)
	code, body = post(clean)
	if code != http.StatusAccepted || !bytes.Equal(body["warnings"], []byte("[]")) {
		t.Fatalf("clean study: %d warnings %s, want 202 and []", code, body["warnings"])
	}
}
