package api

import (
	"bytes"
	"encoding/json"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"sync"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"

	"discrimen/worker"
	"discrimen/worker/workertest"
)

// dbOffset keeps this package's tests on their own Redis database (the
// worker package uses offset 0, cmd/discrimen offset 2).
const dbOffset = 1

// tinyStudy: 2 hypotheses × 8 participants, 32 fits.
const tinyStudy = workertest.TinyStudy

// slowStudy runs long enough (about 3 s on one core) to be seen running.
const slowStudy = workertest.MediumStudy

type rig struct {
	t       testing.TB
	redis   *workertest.Redis
	wcfg    worker.Config
	client  *worker.Client
	api     *Server
	http    *httptest.Server
	keys    map[string]string // name → key
	keyFile string
	logs    *syncBuffer
}

type syncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}

// newRig starts a worker and the API on a loopback port, with keys
// "harbour" and "pilot".
func newRig(t testing.TB, mod func(*Config), names ...string) *rig {
	t.Helper()
	return newRigOn(t, workertest.New(t, dbOffset), mod, names...)
}

// newRigOn is newRig on a given Redis.
func newRigOn(t testing.TB, redis *workertest.Redis, mod func(*Config), names ...string) *rig {
	t.Helper()
	if len(names) == 0 {
		names = []string{"harbour", "pilot"}
	}
	r := &rig{t: t, redis: redis, keys: map[string]string{}, logs: &syncBuffer{}}
	r.keyFile = filepath.Join(t.TempDir(), "keys")
	if err := os.WriteFile(r.keyFile, nil, 0o600); err != nil {
		t.Fatal(err)
	}
	for _, n := range names {
		k, h := NewKey()
		if err := AppendKey(r.keyFile, n, h); err != nil {
			t.Fatal(err)
		}
		r.keys[n] = k
	}
	r.wcfg = worker.Config{Redis: r.redis.Opt, Concurrency: 2, ShardFits: 16, PollInterval: 50 * time.Millisecond, ShutdownTimeout: 5 * time.Second}
	srv, err := worker.NewServer(r.wcfg)
	if err != nil {
		t.Fatal(err)
	}
	if err := srv.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(srv.Shutdown)
	r.start(mod)
	return r
}

// start (re)starts the API half on a new port.
func (r *rig) start(mod func(*Config)) {
	t := r.t
	t.Helper()
	reg := prometheus.NewRegistry()
	wcfg := r.wcfg
	wcfg.Registerer = reg
	c, err := worker.NewClient(wcfg)
	if err != nil {
		t.Fatal(err)
	}
	keys, err := LoadKeys(r.keyFile)
	if err != nil {
		t.Fatal(err)
	}
	cfg := Config{Backend: c, Keys: keys, Rate: 1000, Burst: 1000, Registerer: reg, Gatherer: reg,
		Logger: slog.New(slog.NewTextHandler(r.logs, &slog.HandlerOptions{Level: slog.LevelDebug}))}
	if mod != nil {
		mod(&cfg)
	}
	a, err := New(cfg)
	if err != nil {
		t.Fatal(err)
	}
	r.client, r.api = c, a
	r.http = httptest.NewServer(a)
	t.Cleanup(func() { r.stop() })
}

func (r *rig) stop() {
	if r.http != nil {
		r.http.Close()
		if err := r.client.Close(); err != nil {
			r.t.Errorf("closing the worker client: %v", err)
		}
		r.http = nil
	}
}

type reply struct {
	code   int
	header http.Header
	body   []byte
}

func (p reply) errorBody(t testing.TB) Error {
	t.Helper()
	var e struct {
		Error Error `json:"error"`
	}
	if err := json.Unmarshal(p.body, &e); err != nil {
		t.Fatalf("error body %q: %v", p.body, err)
	}
	return e.Error
}

// do sends one request; key "" sends none, headers are name, value pairs.
func (r *rig) do(method, path, key string, body []byte, headers ...string) reply {
	r.t.Helper()
	var rd io.Reader
	if body != nil {
		rd = bytes.NewReader(body)
	}
	req, err := http.NewRequest(method, r.http.URL+path, rd)
	if err != nil {
		r.t.Fatal(err)
	}
	if key != "" {
		req.Header.Set("Authorization", "Bearer "+key)
	}
	if body != nil {
		req.Header.Set("Content-Type", "application/json")
	}
	for i := 0; i+1 < len(headers); i += 2 {
		req.Header.Set(headers[i], headers[i+1])
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		r.t.Fatal(err)
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if err != nil {
		r.t.Fatal(err)
	}
	return reply{code: resp.StatusCode, header: resp.Header, body: b}
}

func (r *rig) submit(owner, js string) string {
	r.t.Helper()
	p := r.do("POST", "/v1/studies", r.keys[owner], []byte(js))
	if p.code != http.StatusAccepted {
		r.t.Fatalf("submit: %d %s", p.code, p.body)
	}
	var s submitBody
	if err := json.Unmarshal(p.body, &s); err != nil {
		r.t.Fatal(err)
	}
	return s.ID
}

func (r *rig) statusOf(owner, id string) statusBody {
	r.t.Helper()
	p := r.do("GET", "/v1/studies/"+id, r.keys[owner], nil)
	if p.code != http.StatusOK {
		r.t.Fatalf("status: %d %s", p.code, p.body)
	}
	var s statusBody
	if err := json.Unmarshal(p.body, &s); err != nil {
		r.t.Fatal(err)
	}
	return s
}

func (r *rig) wait(owner, id string, timeout time.Duration, ok func(statusBody) bool) statusBody {
	r.t.Helper()
	deadline := time.Now().Add(timeout)
	for {
		s := r.statusOf(owner, id)
		if ok(s) {
			return s
		}
		if time.Now().After(deadline) {
			r.t.Fatalf("study %s still %s (%d/%d) after %v", id, s.Status, s.Progress.Done, s.Progress.Total, timeout)
		}
		time.Sleep(25 * time.Millisecond)
	}
}

func final(s statusBody) bool { return s.Status.Final() }

func mustRequest(t testing.TB, method, path string) *http.Request {
	t.Helper()
	req, err := http.NewRequest(method, path, nil)
	if err != nil {
		t.Fatal(err)
	}
	return req
}

// The in-process report every queue path must reproduce.
var (
	expected      = workertest.Expected
	withoutTiming = workertest.WithoutTiming
)
