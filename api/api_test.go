package api

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/google/go-cmp/cmp"

	"discrimen/models"
	"discrimen/worker"
	"discrimen/worker/workertest"
)

// TestSubmitPollReport: submit → poll → report through HTTP, the report
// equal to the in-process run's.
func TestSubmitPollReport(t *testing.T) {
	r := newRig(t, nil)
	key := r.keys["harbour"]
	p := r.do("POST", "/v1/studies", key, []byte(tinyStudy))
	if p.code != http.StatusAccepted {
		t.Fatalf("POST: %d %s", p.code, p.body)
	}
	var sub submitBody
	if err := json.Unmarshal(p.body, &sub); err != nil {
		t.Fatal(err)
	}
	if sub.StatusURL != "/v1/studies/"+sub.ID || sub.ReportURL != "/v1/studies/"+sub.ID+"/report" || p.header.Get("Location") != sub.StatusURL {
		t.Fatalf("POST answer %+v, Location %q", sub, p.header.Get("Location"))
	}
	st := r.wait("harbour", sub.ID, time.Minute, final)
	if st.Status != worker.Done || st.Progress.Done != 32 || st.Progress.Total != 32 || st.Finished == nil || st.Error != nil || st.ETASeconds != nil {
		t.Fatalf("final status %+v", st)
	}
	wantJSON, wantCSV := expected(t, tinyStudy)
	tables := map[string][]byte{}
	for _, f := range workertest.ExpectedTables(t, tinyStudy) {
		tables[f.Name] = f.Data
	}
	if !bytes.Equal(tables["fits.csv"], wantCSV) {
		t.Fatal("fits.csv of ExpectedTables differs from Expected's")
	}
	for _, tc := range []struct {
		name, path, accept, ctype string
	}{
		{"default is JSON", "/report", "", "application/json"},
		{"JSON by Accept", "/report", "application/json", "application/json"},
		{"HTML by Accept", "/report", "text/html,application/xhtml+xml;q=0.9,*/*;q=0.8", "text/html; charset=utf-8"},
		{"HTML path", "/report.html", "", "text/html; charset=utf-8"},
		{"fits", "/fits.csv", "", "text/csv; charset=utf-8"},
		{"fits sidecar", "/fits.json", "", "application/json"},
		{"params", "/params.csv", "", "text/csv; charset=utf-8"},
		{"params sidecar", "/params.json", "", "application/json"},
		{"measurement", "/measurement.csv", "", "text/csv; charset=utf-8"},
		{"measurement sidecar", "/measurement.json", "", "application/json"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			p := r.do("GET", sub.StatusURL+tc.path, key, nil, "Accept", tc.accept)
			if p.code != http.StatusOK || p.header.Get("Content-Type") != tc.ctype {
				t.Fatalf("%d %q, want 200 %q", p.code, p.header.Get("Content-Type"), tc.ctype)
			}
			switch {
			case tables[strings.TrimPrefix(tc.path, "/")] != nil:
				if want := tables[strings.TrimPrefix(tc.path, "/")]; !bytes.Equal(want, p.body) {
					t.Fatalf("%s differs from discrimen run's (%d vs %d bytes)", tc.path, len(want), len(p.body))
				}
				if tc.ctype != "application/json" && p.header.Get("Content-Disposition") != `attachment; filename="`+sub.ID+"-"+strings.TrimPrefix(tc.path, "/")+`"` {
					t.Fatalf("%s: Content-Disposition %q", tc.path, p.header.Get("Content-Disposition"))
				}
			case tc.ctype == "application/json":
				if d := cmp.Diff(string(wantJSON), string(withoutTiming(t, p.body))); d != "" {
					t.Fatalf("report.json differs from discrimen run's (-want +got):\n%.2000s", d)
				}
			case tc.path == "/fits.csv":
				if !bytes.Equal(wantCSV, p.body) {
					t.Fatalf("fits.csv differs from discrimen run's (%d vs %d bytes)", len(wantCSV), len(p.body))
				}
			default:
				if !bytes.Contains(p.body, []byte("<html")) || p.header.Get("Content-Security-Policy") == "" {
					t.Fatalf("HTML report: %.100q, CSP %q", p.body, p.header.Get("Content-Security-Policy"))
				}
			}
		})
	}
	if p := r.do("GET", sub.StatusURL+"/report", key, nil, "Accept", "image/png"); p.code != http.StatusNotAcceptable {
		t.Fatalf("Accept image/png: %d, want 406", p.code)
	}
}

// TestReportBeforeDone: 409 with where the study is.
func TestReportBeforeDone(t *testing.T) {
	r := newRig(t, nil)
	id := r.submit("harbour", slowStudy)
	for _, path := range []string{"/report", "/report.html", "/fits.csv", "/params.csv", "/measurement.csv", "/fits.json", "/params.json", "/measurement.json"} {
		p := r.do("GET", "/v1/studies/"+id+path, r.keys["harbour"], nil)
		if p.code != http.StatusConflict {
			t.Fatalf("%s before done: %d %s, want 409", path, p.code, p.body)
		}
		if e := p.errorBody(t); e.Code != codeNotFinished || !strings.Contains(e.Message, "of 270 fits") {
			t.Fatalf("%s before done: %+v", path, e)
		}
	}
	r.do("DELETE", "/v1/studies/"+id, r.keys["harbour"], nil)
}

// TestBadBodies: every bad body gets its code and field paths.
func TestBadBodies(t *testing.T) {
	r := newRig(t, func(c *Config) { c.MaxBodyBytes = 4 << 10; c.MaxFits = 1000 })
	big := strings.Replace(tinyStudy, `"name": "berth-watch tiny (invented)"`, `"name": "`+strings.Repeat("x", 5000)+`"`, 1)
	for _, tc := range []struct {
		name        string
		body        string
		ctype       string
		code        int
		errCode     string
		paths       []string // every one must appear among the fields
		msgContains string
	}{
		{name: "malformed JSON", body: `{"designs": [`, code: 400, errCode: codeInvalidStudy, paths: []string{""}},
		{name: "wrong type", body: strings.Replace(tinyStudy, `"participants": 8`, `"participants": "eight"`, 1),
			code: 400, errCode: codeInvalidStudy, paths: []string{"designs[0].participants"}},
		{name: "out of range, twice", body: strings.Replace(strings.Replace(tinyStudy, `"streams": 2`, `"streams": 9`, 1), `"trials_per_cti": 20`, `"trials_per_cti": -1`, 1),
			code: 400, errCode: codeInvalidStudy, paths: []string{"designs[0].streams", "designs[0].trials_per_cti"}},
		{name: "unknown family", body: strings.Replace(tinyStudy, `"family": "linear"`, `"family": "wobbly"`, 1),
			code: 400, errCode: codeInvalidStudy, paths: []string{"hypotheses[1].family"}},
		{name: "oversize", body: big, code: 413, errCode: codeBodyTooLarge, msgContains: "4096 bytes"},
		{name: "over the compute cap", body: strings.Replace(tinyStudy, `"participants": 8`, `"participants": 300`, 1),
			code: 422, errCode: codeOverBudget, paths: []string{"designs[0].participants"}, msgContains: "needs 1200 fits (participants × hypotheses² summed over designs); this server's cap is 1000"},
		{name: "over the study file's own limit", body: strings.Replace(tinyStudy, `"participants": 8`, `"participants": 8, "vary": [{"field": "participants", "values": [`+manyParticipants(9871, 9935)+`]}, {"field": "participants", "values": [`+manyParticipants(9936, 10000)+`]}]`, 1),
			code: 422, errCode: codeOverBudget, paths: []string{""}, msgContains: "the limit is 5,000,000"},
		{name: "not JSON media", body: tinyStudy, ctype: "text/plain", code: 415, errCode: codeUnsupportedMedia},
	} {
		t.Run(tc.name, func(t *testing.T) {
			hdr := []string{}
			if tc.ctype != "" {
				hdr = []string{"Content-Type", tc.ctype}
			}
			p := r.do("POST", "/v1/studies", r.keys["harbour"], []byte(tc.body), hdr...)
			if p.code != tc.code {
				t.Fatalf("status %d, want %d: %s", p.code, tc.code, p.body)
			}
			e := p.errorBody(t)
			if e.Code != tc.errCode || !strings.Contains(e.Message, tc.msgContains) {
				t.Fatalf("error %+v, want code %s with %q", e, tc.errCode, tc.msgContains)
			}
			got := map[string]bool{}
			for _, f := range e.Fields {
				got[f.Path] = true
				if f.Problem == "" {
					t.Errorf("field %q has no problem text", f.Path)
				}
			}
			for _, want := range tc.paths {
				if !got[want] {
					t.Errorf("no field %q among %+v", want, e.Fields)
				}
			}
		})
	}
	// Nothing was queued.
	if p := r.do("GET", "/v1/studies", r.keys["harbour"], nil); !bytes.Contains(p.body, []byte(`"studies": []`)) {
		t.Fatalf("studies after bad bodies: %s", p.body)
	}
}

// TestAuth: no key 401, a wrong key 401, another key's study 404, unknown
// study 404; the public endpoints need no key.
func TestAuth(t *testing.T) {
	r := newRig(t, nil)
	id := r.submit("harbour", tinyStudy)
	for _, tc := range []struct {
		name, method, path, key string
		code                    int
	}{
		{"no key", "GET", "/v1/studies/" + id, "", 401},
		{"unknown key", "GET", "/v1/studies/" + id, "dsk_not-a-key", 401},
		{"no key on the list", "GET", "/v1/studies", "", 401},
		{"no key to submit", "POST", "/v1/studies", "", 401},
		{"another key's status", "GET", "/v1/studies/" + id, r.keys["pilot"], 404},
		{"another key's report", "GET", "/v1/studies/" + id + "/report", r.keys["pilot"], 404},
		{"another key's fits", "GET", "/v1/studies/" + id + "/fits.csv", r.keys["pilot"], 404},
		{"another key's cancel", "DELETE", "/v1/studies/" + id, r.keys["pilot"], 404},
		{"unknown study", "GET", "/v1/studies/0123456789abcdef0123456789ab", r.keys["harbour"], 404},
		{"malformed id", "GET", "/v1/studies/..%2f..", r.keys["harbour"], 404},
		{"owner", "GET", "/v1/studies/" + id, r.keys["harbour"], 200},
		{"healthz", "GET", "/healthz", "", 200},
		{"readyz", "GET", "/readyz", "", 200},
		{"metrics", "GET", "/metrics", "", 200},
		{"openapi", "GET", "/v1/openapi.json", "", 200},
	} {
		t.Run(tc.name, func(t *testing.T) {
			var body []byte
			if tc.method == "POST" {
				body = []byte(tinyStudy)
			}
			p := r.do(tc.method, tc.path, tc.key, body)
			if p.code != tc.code {
				t.Fatalf("%s %s: %d %s, want %d", tc.method, tc.path, p.code, p.body, tc.code)
			}
			if tc.code == 401 && p.header.Get("WWW-Authenticate") == "" {
				t.Fatal("401 without WWW-Authenticate")
			}
			if tc.code >= 400 && p.errorBody(t).Code == "" {
				t.Fatalf("error without a code: %s", p.body)
			}
		})
	}
	// The other key's list does not show the study.
	if p := r.do("GET", "/v1/studies", r.keys["pilot"], nil); bytes.Contains(p.body, []byte(id)) {
		t.Fatalf("pilot's list shows harbour's study: %s", p.body)
	}
	// No key appears in any log line; the owner's name does.
	logs := r.logs.String()
	for name, k := range r.keys {
		if strings.Contains(logs, k) {
			t.Fatalf("the key of %s appears in the logs", name)
		}
	}
	if !strings.Contains(logs, "owner=harbour") {
		t.Fatalf("logs do not name the owner:\n%.500s", logs)
	}
}

// TestRateLimit: over the rate, 429 with Retry-After; another key is not
// affected.
func TestRateLimit(t *testing.T) {
	r := newRig(t, func(c *Config) { c.Rate = 0.5; c.Burst = 3 })
	for i := 0; i < 3; i++ {
		if p := r.do("GET", "/v1/studies", r.keys["harbour"], nil); p.code != 200 {
			t.Fatalf("request %d within the burst: %d", i, p.code)
		}
	}
	p := r.do("GET", "/v1/studies", r.keys["harbour"], nil)
	if p.code != http.StatusTooManyRequests {
		t.Fatalf("over the burst: %d, want 429", p.code)
	}
	after, err := strconv.Atoi(p.header.Get("Retry-After"))
	if err != nil || after < 1 || after > 2 {
		t.Fatalf("Retry-After %q, want 1-2 s at 0.5 requests per second", p.header.Get("Retry-After"))
	}
	if e := p.errorBody(t); e.Code != codeRateLimited {
		t.Fatalf("429 body %+v", e)
	}
	if p := r.do("GET", "/v1/studies", r.keys["pilot"], nil); p.code != 200 {
		t.Fatalf("another key: %d, want 200", p.code)
	}
	if p := r.do("GET", "/healthz", "", nil); p.code != 200 {
		t.Fatalf("healthz while limited: %d", p.code)
	}
}

// TestCancelFreesQueue: DELETE stops the study and empties the queue; a
// second DELETE returns it again; a done study cannot be canceled.
func TestCancelFreesQueue(t *testing.T) {
	r := newRig(t, nil)
	key := r.keys["harbour"]
	id := r.submit("harbour", slowStudy)
	r.wait("harbour", id, time.Minute, func(s statusBody) bool { return s.Status == worker.Running && s.Progress.Done > 0 })
	p := r.do("DELETE", "/v1/studies/"+id, key, nil)
	if p.code != 200 {
		t.Fatalf("DELETE: %d %s", p.code, p.body)
	}
	var st statusBody
	if err := json.Unmarshal(p.body, &st); err != nil {
		t.Fatalf("cancel body: %v", err)
	}
	if st.Status != worker.Canceled || st.Finished == nil {
		t.Fatalf("after DELETE: %+v", st)
	}
	deadline := time.Now().Add(10 * time.Second)
	for {
		shards, control, err := r.client.QueueSizes()
		if err != nil {
			t.Fatal(err)
		}
		if shards+control == 0 {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("queue holds %d+%d tasks 10 s after the cancel", shards, control)
		}
		time.Sleep(25 * time.Millisecond)
	}
	if s := r.statusOf("harbour", id); s.Status != worker.Canceled || s.Progress.Done >= s.Progress.Total {
		t.Fatalf("canceled study later: %+v", s)
	}
	if p := r.do("DELETE", "/v1/studies/"+id, key, nil); p.code != 200 {
		t.Fatalf("second DELETE: %d", p.code)
	}
	if p := r.do("GET", "/v1/studies/"+id+"/report", key, nil); p.code != http.StatusConflict {
		t.Fatalf("report of a canceled study: %d, want 409", p.code)
	}
	done := r.submit("harbour", tinyStudy)
	r.wait("harbour", done, time.Minute, final)
	if p := r.do("DELETE", "/v1/studies/"+done, key, nil); p.code != http.StatusConflict || p.errorBody(t).Code != codeAlreadyFinished {
		t.Fatalf("DELETE of a done study: %d %s, want 409", p.code, p.body)
	}
}

// TestRestartServesReport: a new API process on the same Redis serves the
// reports of studies finished before it started.
func TestRestartServesReport(t *testing.T) {
	r := newRig(t, nil)
	id := r.submit("harbour", tinyStudy)
	r.wait("harbour", id, time.Minute, final)
	before := r.do("GET", "/v1/studies/"+id+"/report", r.keys["harbour"], nil)
	r.stop()
	r.start(nil)
	after := r.do("GET", "/v1/studies/"+id+"/report", r.keys["harbour"], nil)
	if after.code != 200 || !bytes.Equal(before.body, after.body) {
		t.Fatalf("after restart: %d, %d bytes (before %d bytes)", after.code, len(after.body), len(before.body))
	}
}

// TestListPages: newest first, paged, with bad query parameters named.
func TestListPages(t *testing.T) {
	r := newRig(t, nil)
	var ids []string
	for range 3 {
		ids = append(ids, r.submit("harbour", tinyStudy))
		time.Sleep(2 * time.Millisecond)
	}
	var got []string
	cursor := ""
	for pages := 0; ; pages++ {
		if pages > 3 {
			t.Fatal("more than 3 pages for 3 studies")
		}
		p := r.do("GET", "/v1/studies?limit=2&cursor="+cursor, r.keys["harbour"], nil)
		var l listBody
		if err := json.Unmarshal(p.body, &l); err != nil || p.code != 200 {
			t.Fatalf("list: %d %s", p.code, p.body)
		}
		for _, s := range l.Studies {
			got = append(got, s.ID)
		}
		if l.NextCursor == nil {
			break
		}
		cursor = *l.NextCursor
	}
	if d := cmp.Diff([]string{ids[2], ids[1], ids[0]}, got); d != "" {
		t.Fatalf("list order (-want +got):\n%s", d)
	}
	for _, q := range []string{"limit=0", "limit=101", "limit=two", "cursor=zz"} {
		p := r.do("GET", "/v1/studies?"+q, r.keys["harbour"], nil)
		param, _, _ := strings.Cut(q, "=")
		if p.code != 400 || len(p.errorBody(t).Fields) != 1 || p.errorBody(t).Fields[0].Path != param {
			t.Fatalf("?%s: %d %s, want 400 naming %s", q, p.code, p.body, param)
		}
	}
}

// TestRoutingErrors: unknown paths and methods answer in JSON.
func TestRoutingErrors(t *testing.T) {
	r := newRig(t, nil)
	p := r.do("GET", "/v2/nothing", "", nil)
	if p.code != 404 || p.errorBody(t).Code != codeNotFound {
		t.Fatalf("unknown path: %d %s", p.code, p.body)
	}
	p = r.do("PUT", "/v1/studies", r.keys["harbour"], nil)
	if p.code != 405 || p.header.Get("Allow") != "POST, GET" || p.errorBody(t).Code != codeMethodNotAllowed {
		t.Fatalf("PUT /v1/studies: %d Allow %q %s", p.code, p.header.Get("Allow"), p.body)
	}
}

// TestMetrics: HTTP durations by route and code, studies by state and the
// queue's depth appear on /metrics.
func TestMetrics(t *testing.T) {
	r := newRig(t, nil)
	id := r.submit("harbour", tinyStudy)
	r.wait("harbour", id, time.Minute, final)
	r.do("GET", "/v1/studies/0123456789abcdef0123456789ab", r.keys["harbour"], nil)
	p := r.do("GET", "/metrics", "", nil)
	for _, want := range []string{
		`discrimen_http_request_duration_seconds_count{code="202",route="POST /v1/studies"} 1`,
		`discrimen_http_request_duration_seconds_count{code="404",route="GET /v1/studies/{id}"} 1`,
		`discrimen_studies{state="done"} 1`,
		`discrimen_studies{state="running"} 0`,
		`discrimen_queue_tasks{queue="discrimen.share0",state="pending"} 0`,
		`discrimen_queue_latency_seconds{queue="discrimen.control"}`,
		`discrimen_redis_up 1`,
	} {
		if !bytes.Contains(p.body, []byte(want)) {
			t.Errorf("/metrics lacks %s", want)
		}
	}
}

// deadBackend is a Backend whose Redis is gone.
type deadBackend struct{ worker.Client }

func (deadBackend) Ping(context.Context) error { return errors.New("dial tcp: connection refused") }

func TestReadyzWithoutRedis(t *testing.T) {
	a, err := New(Config{Backend: &deadBackend{}, NoAuth: true})
	if err != nil {
		t.Fatal(err)
	}
	rec := httptest.NewRecorder()
	a.ServeHTTP(rec, mustRequest(t, "GET", "/readyz"))
	if rec.Code != 503 || !strings.Contains(rec.Body.String(), codeNotReady) {
		t.Fatalf("readyz without Redis: %d %s", rec.Code, rec.Body.String())
	}
}

// TestNoAuth: without keys every request is the local owner.
func TestNoAuth(t *testing.T) {
	r := newRig(t, func(c *Config) { c.NoAuth = true; c.Keys = nil })
	id := r.submit("nobody", tinyStudy)
	if p := r.do("GET", "/v1/studies/"+id, "", nil); p.code != 200 {
		t.Fatalf("status without a key under NoAuth: %d", p.code)
	}
}

func TestNegotiate(t *testing.T) {
	offers := []string{"application/json", "text/html"}
	for _, tc := range []struct{ name, accept, want string }{
		{"empty", "", "application/json"},
		{"any", "*/*", "application/json"},
		{"html", "text/html", "text/html"},
		{"browser", "text/html,application/xhtml+xml,application/xml;q=0.9,*/*;q=0.8", "text/html"},
		{"json preferred by q", "text/html;q=0.5, application/json", "application/json"},
		{"type wildcard", "text/*", "text/html"},
		{"refused json", "application/json;q=0, */*", "text/html"},
		{"nothing acceptable", "image/png", ""},
		{"garbage ignored", ";;;, text/html", "text/html"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if got := negotiate(tc.accept, offers); got != tc.want {
				t.Fatalf("negotiate(%q) = %q, want %q", tc.accept, got, tc.want)
			}
		})
	}
}

func TestKeysFile(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "keys")
	k1, h1 := NewKey()
	if !strings.HasPrefix(k1, keyPrefix) || len(k1) != len(keyPrefix)+43 || h1 != HashKey(k1) || len(h1) != 64 {
		t.Fatalf("NewKey: %q %q", k1, h1)
	}
	if err := AppendKey(path, "harbour", h1); err != nil {
		t.Fatal(err)
	}
	if err := AppendKey(path, "harbour", h1); err == nil || !strings.Contains(err.Error(), `"harbour"`) {
		t.Fatalf("repeated name: %v", err)
	}
	if err := AppendKey(path, "bad name", h1); err == nil {
		t.Fatal("a name with a space was accepted")
	}
	ring, err := LoadKeys(path)
	if err != nil {
		t.Fatal(err)
	}
	if n, ok := ring.Lookup(k1); !ok || n != "harbour" {
		t.Fatalf("Lookup(k1) = %q, %v", n, ok)
	}
	if _, ok := ring.Lookup(k1 + "x"); ok {
		t.Fatal("a longer key matched")
	}
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if bytes.Contains(data, []byte(k1)) {
		t.Fatal("the keys file holds the key itself")
	}
	fi, err := os.Stat(path)
	if err != nil {
		t.Fatal(err)
	}
	if fi.Mode().Perm() != 0o600 {
		t.Fatalf("keys file mode %v, want 0600", fi.Mode().Perm())
	}
	// A key added later is seen after the file changes.
	k2, h2 := NewKey()
	time.Sleep(10 * time.Millisecond)
	if err := AppendKey(path, "pilot", h2); err != nil {
		t.Fatal(err)
	}
	touch := func(d time.Duration) {
		t.Helper()
		if err := os.Chtimes(path, time.Now().Add(d), time.Now().Add(d)); err != nil {
			t.Fatal(err)
		}
		ring.checked = time.Time{}
	}
	touch(time.Second)
	if n, ok := ring.Lookup(k2); !ok || n != "pilot" {
		t.Fatalf("after reload Lookup(k2) = %q, %v", n, ok)
	}
	// A bad edit keeps the keys loaded before it, and says so once.
	var logs bytes.Buffer
	ring.setLogger(slog.New(slog.NewTextHandler(&logs, nil)))
	if err := os.WriteFile(path, append(data, "pilot\n"...), 0o600); err != nil {
		t.Fatal(err)
	}
	touch(2 * time.Second)
	if n, ok := ring.Lookup(k2); !ok || n != "pilot" {
		t.Fatalf("after a bad edit Lookup(k2) = %q, %v; want the key loaded before it", n, ok)
	}
	touch(3 * time.Second)
	if _, ok := ring.Lookup(k1); !ok {
		t.Fatal("after a second check of the bad edit, k1 no longer works")
	}
	if got := strings.Count(logs.String(), "level=WARN"); got != 1 || !strings.Contains(logs.String(), "want NAME HASH") {
		t.Fatalf("after a bad edit and two checks, %d warnings (want 1 naming the problem):\n%s", got, logs.String())
	}
	for _, tc := range []struct{ name, text, want string }{
		{"one field", "harbour\n", "line 1: want NAME HASH"},
		{"short hash", "harbour abcd\n", "line 1: the hash of \"harbour\" must be 64 hex digits"},
		{"repeat", "# keys\nharbour " + h1 + "\n\nharbour " + h2 + "\n", "line 4: key name \"harbour\" repeats line 2"},
		{"bad name", "har/bour " + h1 + "\n", "line 1: key name \"har/bour\""},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := parseKeys([]byte(tc.text))
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Fatalf("parseKeys: %v, want %q", err, tc.want)
			}
		})
	}
}

func TestIsLoopback(t *testing.T) {
	for _, tc := range []struct {
		addr string
		want bool
	}{{"127.0.0.1:8080", true}, {"localhost:80", true}, {"[::1]:8080", true}, {"0.0.0.0:8080", false}, {":8080", false}, {"10.0.0.5:80", false}} {
		if got := IsLoopback(tc.addr); got != tc.want {
			t.Errorf("IsLoopback(%q) = %v, want %v", tc.addr, got, tc.want)
		}
	}
}

func TestMaxFitsOverStudyLimit(t *testing.T) {
	if _, err := New(Config{Backend: &deadBackend{}, NoAuth: true, MaxFits: models.MaxFits + 1}); err == nil {
		t.Fatal("a cap over models.MaxFits was accepted")
	}
}

// manyParticipants lists 130 distinct participant counts near 10,000: a
// vary block that expands to over 5,000,000 fits with two hypotheses.
// manyParticipants lists the participant counts from..to: two blocks of
// 65 (under the cap of 100 values per block) make 130 variants of 40,000
// fits each, over the study file's limit of 5,000,000.
func manyParticipants(from, to int) string {
	var parts []string
	for n := from; n <= to; n++ {
		parts = append(parts, strconv.Itoa(n))
	}
	return strings.Join(parts, ", ")
}
