package api

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"net/http"
	"net/http/httptest"
	"strconv"
	"strings"
	"testing"
	"time"

	"discrimen/models"
	"discrimen/worker"
)

// TestSizeCapRefused: a 20,000-value vary block is refused with 422 and one
// field naming the block, the cap and the count, not expanded.
func TestSizeCapRefused(t *testing.T) {
	r := newRig(t, nil)
	vals := make([]string, 20000)
	for i := range vals {
		vals[i] = strconv.Itoa(2 + i%50)
	}
	body := strings.Replace(tinyStudy, `"participants": 8`, `"participants": 8, "vary": [{"field": "participants", "values": [`+strings.Join(vals, ",")+`]}]`, 1)
	p := r.do("POST", "/v1/studies", r.keys["harbour"], []byte(body))
	if p.code != http.StatusUnprocessableEntity {
		t.Fatalf("status %d, want 422: %.300s", p.code, p.body)
	}
	e := p.errorBody(t)
	want := []Field{{Path: "designs[0].vary[0].values", Problem: "a vary block may have at most 100 values, got 20000"}}
	if e.Code != codeOverSize || len(e.Fields) != 1 || e.Fields[0] != want[0] {
		t.Fatalf("error %+v, want code %s with fields %v", e, codeOverSize, want)
	}
	if len(p.body) > 1000 {
		t.Errorf("the error is %d bytes; one problem should take a few hundred", len(p.body))
	}
}

// TestReportCapAtSubmit: a study whose report would exceed the cap is
// refused at submit with both numbers, and nothing is stored.
func TestReportCapAtSubmit(t *testing.T) {
	r := newRig(t, func(c *Config) { c.MaxReportBytes = 150_000 })
	study, err := models.LoadStudy([]byte(tinyStudy))
	if err != nil {
		t.Fatal(err)
	}
	estimate := worker.EstimateReportBytes(study, len(tinyStudy))
	if estimate <= 150_000 {
		t.Fatalf("the tiny study's estimate %d is under the test's cap", estimate)
	}
	p := r.do("POST", "/v1/studies", r.keys["harbour"], []byte(tinyStudy))
	if p.code != http.StatusUnprocessableEntity {
		t.Fatalf("status %d, want 422: %s", p.code, p.body)
	}
	e := p.errorBody(t)
	if e.Code != codeOverReport || !strings.Contains(e.Message, fmt.Sprintf("estimated at %d bytes, over this server's cap of 150000 bytes", estimate)) {
		t.Fatalf("error %+v", e)
	}
	list := r.do("GET", "/v1/studies", r.keys["harbour"], nil)
	var lb listBody
	if err := json.Unmarshal(list.body, &lb); err != nil || len(lb.Studies) != 0 {
		t.Fatalf("after a refused submit the key lists %s", list.body)
	}
}

// TestQuotas: a key over its in-flight quotas gets 429 with Retry-After and
// the numbers; another key is not held back; the stored-bytes quota is 422.
func TestQuotas(t *testing.T) {
	t.Run("studies in flight", func(t *testing.T) {
		r := newRig(t, func(c *Config) { c.MaxStudiesInFlight = 1 })
		first := r.submit("harbour", slowStudy)
		p := r.do("POST", "/v1/studies", r.keys["harbour"], []byte(tinyStudy))
		if p.code != http.StatusTooManyRequests || p.header.Get("Retry-After") != "30" {
			t.Fatalf("second study: %d Retry-After %q, want 429 30: %s", p.code, p.header.Get("Retry-After"), p.body)
		}
		if e := p.errorBody(t); e.Code != codeOverQuota || !strings.Contains(e.Message, "quota of 1 studies in flight (queued or running): 1 in use, this study adds 1") {
			t.Fatalf("error %+v", e)
		}
		other := r.submit("pilot", tinyStudy)
		r.do("DELETE", "/v1/studies/"+first, r.keys["harbour"], nil)
		// Canceled is final: the key is under its quota again.
		again := r.submit("harbour", tinyStudy)
		r.wait("harbour", again, time.Minute, final)
		r.wait("pilot", other, time.Minute, final)
	})
	t.Run("fits in flight", func(t *testing.T) {
		r := newRig(t, func(c *Config) { c.MaxFitsInFlight = 300 })
		first := r.submit("harbour", slowStudy) // 270 fits
		p := r.do("POST", "/v1/studies", r.keys["harbour"], []byte(tinyStudy))
		if p.code != http.StatusTooManyRequests {
			t.Fatalf("second study: %d, want 429: %s", p.code, p.body)
		}
		if e := p.errorBody(t); e.Code != codeOverQuota || !strings.Contains(e.Message, "quota of 300 fits in flight: 270 in use, this study adds 32") {
			t.Fatalf("error %+v", e)
		}
		r.do("DELETE", "/v1/studies/"+first, r.keys["harbour"], nil)
	})
	t.Run("stored bytes", func(t *testing.T) {
		r := newRig(t, func(c *Config) { c.MaxStoredBytes = 250_000 })
		first := r.submit("harbour", tinyStudy)
		r.wait("harbour", first, time.Minute, final)
		// The first study's files are counted at their real size.
		u, err := r.client.Usage(t.Context(), "harbour")
		if err != nil {
			t.Fatal(err)
		}
		var stored int64
		for _, k := range []string{"/report", "/report.html", "/fits.csv"} {
			stored += int64(len(r.do("GET", "/v1/studies/"+first+k, r.keys["harbour"], nil).body))
		}
		if want := stored + int64(len(tinyStudy)); u.StoredBytes != want || u.StudiesInFlight != 0 || u.FitsInFlight != 0 {
			t.Fatalf("usage %+v, want %d stored bytes and nothing in flight", u, want)
		}
		p := r.do("POST", "/v1/studies", r.keys["harbour"], []byte(tinyStudy))
		if p.code != http.StatusUnprocessableEntity {
			t.Fatalf("second study: %d, want 422: %s", p.code, p.body)
		}
		if e := p.errorBody(t); e.Code != codeOverStorage || !strings.Contains(e.Message, fmt.Sprintf("quota of 250000 stored bytes: its studies store %d", u.StoredBytes)) {
			t.Fatalf("error %+v", e)
		}
	})
}

// TestIdempotencyKey: a retry with the same key and body gets the first
// study (200, same id); another body under the key is 422; keys are per
// API key.
func TestIdempotencyKey(t *testing.T) {
	r := newRig(t, nil)
	post := func(owner, key, body string) reply {
		return r.do("POST", "/v1/studies", r.keys[owner], []byte(body), "Idempotency-Key", key)
	}
	idOf := func(p reply) string {
		var s submitBody
		if err := json.Unmarshal(p.body, &s); err != nil {
			t.Fatalf("%s: %v", p.body, err)
		}
		return s.ID
	}
	first := post("harbour", `"berth-7-watch-1"`, tinyStudy)
	if first.code != http.StatusAccepted {
		t.Fatalf("first: %d %s", first.code, first.body)
	}
	id := idOf(first)
	retry := post("harbour", `"berth-7-watch-1"`, tinyStudy)
	if retry.code != http.StatusOK || idOf(retry) != id || retry.header.Get("Location") != statusURL(id) {
		t.Fatalf("retry: %d %s, want 200 with id %s", retry.code, retry.body, id)
	}
	// The bare form of the same key is the same key.
	if p := post("harbour", `berth-7-watch-1`, tinyStudy); p.code != http.StatusOK || idOf(p) != id {
		t.Fatalf("bare key: %d %s", p.code, p.body)
	}
	other := strings.Replace(tinyStudy, `"seed": 11`, `"seed": 12`, 1)
	p := post("harbour", `"berth-7-watch-1"`, other)
	if p.code != http.StatusUnprocessableEntity || p.errorBody(t).Code != codeKeyReused {
		t.Fatalf("another body: %d %s, want 422 %s", p.code, p.body, codeKeyReused)
	}
	// Another API key has its own keys.
	p = post("pilot", `"berth-7-watch-1"`, tinyStudy)
	if p.code != http.StatusAccepted || idOf(p) == id {
		t.Fatalf("another API key: %d %s, want a new study", p.code, p.body)
	}
	r.wait("harbour", id, time.Minute, final)
	r.wait("pilot", idOf(p), time.Minute, final)
	// After the study is done the retry still finds it.
	if p := post("harbour", `"berth-7-watch-1"`, tinyStudy); p.code != http.StatusOK || idOf(p) != id {
		t.Fatalf("retry after done: %d %s", p.code, p.body)
	}
	var lb listBody
	if err := json.Unmarshal(r.do("GET", "/v1/studies", r.keys["harbour"], nil).body, &lb); err != nil || len(lb.Studies) != 1 {
		t.Fatalf("harbour has %d studies, want 1", len(lb.Studies))
	}
	for _, bad := range []string{`""`, strings.Repeat("k", 256), `"a\qb"`, "tab\there"} {
		p := post("harbour", bad, tinyStudy)
		if p.code != http.StatusBadRequest || p.errorBody(t).Code != codeBadKey || p.errorBody(t).Fields[0].Path != "Idempotency-Key" {
			t.Errorf("key %q: %d %s, want 400 %s", bad, p.code, p.body, codeBadKey)
		}
	}
}

// blockingBackend waits for the request's context on every call, as a
// Redis that accepts connections but never answers would.
type blockingBackend struct{ errBackend }

func (blockingBackend) Status(ctx context.Context, _, _ string) (worker.Status, error) {
	<-ctx.Done()
	return worker.Status{}, ctx.Err()
}

// TestRequestTimeout: a request whose Redis call does not return is
// answered 503 with Retry-After when RequestTimeout ends it.
func TestRequestTimeout(t *testing.T) {
	a, err := New(Config{Backend: &blockingBackend{}, NoAuth: true, RequestTimeout: 100 * time.Millisecond})
	if err != nil {
		t.Fatal(err)
	}
	start := time.Now()
	rec := httptest.NewRecorder()
	a.ServeHTTP(rec, mustRequest(t, "GET", "/v1/studies/0123456789abcdef0123456789ab"))
	if d := time.Since(start); d < 100*time.Millisecond || d > 5*time.Second {
		t.Errorf("answered after %v, want just after the 100 ms deadline", d)
	}
	if rec.Code != http.StatusServiceUnavailable || rec.Header().Get("Retry-After") != "5" || !strings.Contains(rec.Body.String(), codeUnavailable) {
		t.Fatalf("%d Retry-After %q: %s", rec.Code, rec.Header().Get("Retry-After"), rec.Body.String())
	}
}

// BenchmarkSubmitOverCap measures POST /v1/studies of a 20,000-value vary
// block through the whole handler (auth off, no Redis reached): the body is
// read, parsed and refused with 422.
func BenchmarkSubmitOverCap(b *testing.B) {
	vals := make([]string, 20000)
	for i := range vals {
		vals[i] = strconv.Itoa(2 + i%50)
	}
	body := []byte(strings.Replace(tinyStudy, `"participants": 8`, `"participants": 8, "vary": [{"field": "participants", "values": [`+strings.Join(vals, ",")+`]}]`, 1))
	a, err := New(Config{Backend: &errBackend{err: errors.New("not reached")}, NoAuth: true, Rate: 1e9, Burst: 1 << 30})
	if err != nil {
		b.Fatal(err)
	}
	b.SetBytes(int64(len(body)))
	for b.Loop() {
		rec := httptest.NewRecorder()
		a.ServeHTTP(rec, httptest.NewRequest("POST", "/v1/studies", bytes.NewReader(body)))
		if rec.Code != http.StatusUnprocessableEntity {
			b.Fatalf("status %d: %.300s", rec.Code, rec.Body.String())
		}
	}
}
