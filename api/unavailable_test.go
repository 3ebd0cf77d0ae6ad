package api

import (
	"context"
	"encoding/json"
	"fmt"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/google/go-cmp/cmp"
	"github.com/hibiken/asynq"
	"github.com/redis/go-redis/v9"

	"discrimen/worker"
	"discrimen/worker/workertest"
)

// ownRedis is a redis-server this test starts on a free loopback port,
// persisting to a temporary directory (append-only, fsync on every write)
// so that a kill and a restart keep every study.
type ownRedis struct {
	t    *testing.T
	port int
	dir  string
	cmd  *exec.Cmd
}

func startOwnRedis(t *testing.T) *ownRedis {
	t.Helper()
	if _, err := exec.LookPath("redis-server"); err != nil {
		t.Skip("redis-server is not on PATH")
	}
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	port := ln.Addr().(*net.TCPAddr).Port
	if err := ln.Close(); err != nil {
		t.Fatal(err)
	}
	o := &ownRedis{t: t, port: port, dir: t.TempDir()}
	o.start()
	t.Cleanup(o.kill)
	return o
}

func (o *ownRedis) addr() string { return fmt.Sprintf("127.0.0.1:%d", o.port) }

func (o *ownRedis) start() {
	o.t.Helper()
	o.cmd = exec.Command("redis-server", "--port", fmt.Sprint(o.port), "--bind", "127.0.0.1",
		"--dir", o.dir, "--save", "", "--appendonly", "yes", "--appendfsync", "always",
		"--logfile", filepath.Join(o.dir, "redis.log"))
	if err := o.cmd.Start(); err != nil {
		o.t.Fatal(err)
	}
	c := redis.NewClient(&redis.Options{Addr: o.addr()})
	defer c.Close()
	deadline := time.Now().Add(10 * time.Second)
	for c.Ping(context.Background()).Err() != nil {
		if time.Now().After(deadline) {
			log, _ := os.ReadFile(filepath.Join(o.dir, "redis.log"))
			o.t.Fatalf("redis-server on %s did not answer within 10 s:\n%s", o.addr(), log)
		}
		time.Sleep(20 * time.Millisecond)
	}
}

// kill stops the server at once, as a crash would.
func (o *ownRedis) kill() {
	if o.cmd == nil || o.cmd.Process == nil {
		return
	}
	_ = o.cmd.Process.Kill() // already gone is fine
	_ = o.cmd.Wait()         // the exit status of a killed process is not news
	o.cmd = nil
}

// TestRedisDown: with Redis stopped, every endpoint that needs it answers
// 503 with Retry-After and the ones that do not stay up; after it returns,
// the study submitted before finishes with the report `discrimen run`
// makes.
func TestRedisDown(t *testing.T) {
	if testing.Short() {
		t.Skip("up to a few minutes: waits for asynq's lease recovery")
	}
	own := startOwnRedis(t)
	rd := &workertest.Redis{URL: "redis://" + own.addr() + "/0", Opt: asynq.RedisClientOpt{Addr: own.addr()}}
	r := newRigOn(t, rd, nil)
	key := r.keys["harbour"]
	id := r.submit("harbour", slowStudy)
	r.wait("harbour", id, time.Minute, func(s statusBody) bool { return s.Status == worker.Running })

	own.kill()
	needRedis := []struct{ method, path string }{
		{"POST", "/v1/studies"},
		{"GET", "/v1/studies"},
		{"GET", "/v1/studies/" + id},
		{"DELETE", "/v1/studies/" + id},
		{"GET", "/v1/studies/" + id + "/report"},
		{"GET", "/v1/studies/" + id + "/report.html"},
		{"GET", "/v1/studies/" + id + "/fits.csv"},
		{"GET", "/v1/studies/" + id + "/params.csv"},
		{"GET", "/v1/studies/" + id + "/measurement.csv"},
		{"GET", "/v1/studies/" + id + "/fits.json"},
		{"GET", "/v1/studies/" + id + "/params.json"},
		{"GET", "/v1/studies/" + id + "/measurement.json"},
		{"GET", "/readyz"},
	}
	// Every route of the table is either above or below.
	noRedis := map[string]int{"/healthz": 200, "/v1/openapi.json": 200, "/metrics": 200}
	covered := map[string]bool{}
	for _, rt := range needRedis {
		covered[rt.method+" "+strings.Replace(rt.path, id, "{id}", 1)] = true
	}
	for _, rt := range r.api.routes() {
		if _, ok := noRedis[rt.pattern]; !ok && !covered[rt.method+" "+rt.pattern] {
			t.Errorf("route %s %s is not checked with Redis down", rt.method, rt.pattern)
		}
	}
	for _, rt := range needRedis {
		var body []byte
		if rt.method == "POST" {
			body = []byte(tinyStudy)
		}
		start := time.Now()
		p := r.do(rt.method, rt.path, key, body)
		if p.code != http.StatusServiceUnavailable || p.header.Get("Retry-After") != "5" {
			t.Errorf("%s %s with Redis down: %d Retry-After %q, want 503 5: %s", rt.method, rt.path, p.code, p.header.Get("Retry-After"), p.body)
		}
		if d := time.Since(start); d > 5*time.Second {
			t.Errorf("%s %s took %v with Redis down", rt.method, rt.path, d)
		}
	}
	for path, code := range noRedis {
		if p := r.do("GET", path, "", nil); p.code != code {
			t.Errorf("GET %s with Redis down: %d, want %d", path, p.code, code)
		}
	}

	own.start()
	// Pooled connections to the killed server fail once each: a client
	// polling then gets 503 and retries, as Retry-After says. A shard
	// whose lease ran out during the outage waits for asynq's recovery
	// (about a minute; measured 4-63 s here), hence the long bound.
	deadline := time.Now().Add(3 * time.Minute)
	for {
		p := r.do("GET", "/v1/studies/"+id, key, nil)
		var st statusBody
		if p.code == http.StatusOK {
			if err := json.Unmarshal(p.body, &st); err != nil {
				t.Fatal(err)
			}
			if st.Status.Final() {
				if st.Status != worker.Done {
					t.Fatalf("after Redis returned the study is %s: %v", st.Status, *st.Error)
				}
				break
			}
		} else if p.code != http.StatusServiceUnavailable {
			t.Fatalf("status after Redis returned: %d %s", p.code, p.body)
		}
		if time.Now().After(deadline) {
			t.Fatalf("study %s not done 3 min after Redis returned: %d %s", id, p.code, p.body)
		}
		time.Sleep(50 * time.Millisecond)
	}
	wantJSON, wantCSV := expected(t, slowStudy)
	got := r.do("GET", "/v1/studies/"+id+"/report", key, nil)
	if d := cmp.Diff(string(wantJSON), string(withoutTiming(t, got.body))); d != "" {
		t.Fatalf("report.json after the outage differs from discrimen run's (-want +got):\n%.2000s", d)
	}
	if csv := r.do("GET", "/v1/studies/"+id+"/fits.csv", key, nil); string(csv.body) != string(wantCSV) {
		t.Fatalf("fits.csv after the outage differs from discrimen run's (%d vs %d bytes)", len(csv.body), len(wantCSV))
	}
	if p := r.do("GET", "/readyz", "", nil); p.code != 200 {
		t.Fatalf("readyz after Redis returned: %d", p.code)
	}
}
