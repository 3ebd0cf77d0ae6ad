package main

import (
	"bytes"
	"context"
	"fmt"
	"path/filepath"
	"regexp"
	"strings"
	"syscall"
	"testing"
	"time"

	"discrimen/api"
	"discrimen/models"
	"discrimen/worker"
	"discrimen/worker/workertest"
)

// killStudy: 270 fits in shards of 10 participants, so a worker killed
// after two shards dies mid-study.
const killStudy = workertest.MediumStudy

// TestWorkerKilled: a worker process killed with SIGKILL mid-study loses
// nothing, and its lost shard reruns within 30 s: worker B's watchdog sees
// that A stopped beating (after 5 beats of 2 s) and requeues A's running
// shard, where asynq alone would wait about a minute for A's lease to
// expire. Meanwhile the status may read recovering, and its progress never
// counts the lost shard's partial fits twice.
func TestWorkerKilled(t *testing.T) {
	if testing.Short() {
		t.Skip("waits about 10 s for the watchdog to find the lost shard")
	}
	r := workertest.New(t, dbOffset)
	ctx := context.Background()
	client, err := worker.NewClient(worker.Config{Redis: r.Opt})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		if err := client.Close(); err != nil {
			t.Errorf("closing the client: %v", err)
		}
	})
	workerArgs := []string{"worker", "--redis", r.URL, "--concurrency", "1", "--shard-fits", "30", "--metrics-listen", ""}
	a := startChild(t, "worker A", workerArgs...)
	a.waitFor(t, regexpMust(`msg="worker ready"`), 30*time.Second)
	study, err := models.LoadStudy([]byte(killStudy))
	if err != nil {
		t.Fatal(err)
	}
	st, err := client.Submit(ctx, "harbour", []byte(killStudy), study)
	if err != nil {
		t.Fatal(err)
	}
	// Kill A once it has stored two shards and is into its third.
	deadline := time.Now().Add(time.Minute)
	for {
		s, err := client.Status(ctx, "harbour", st.ID)
		if err != nil {
			t.Fatal(err)
		}
		runs, err := client.Runs(ctx, st.ID)
		if err != nil {
			t.Fatal(err)
		}
		if s.ShardsDone >= 2 && len(runs) > s.ShardsDone {
			break
		}
		if s.State.Final() || time.Now().After(deadline) {
			t.Fatalf("study %s with %d/%d shards before the kill", s.State, s.ShardsDone, s.Shards)
		}
		time.Sleep(5 * time.Millisecond)
	}
	if err := a.cmd.Process.Signal(syscall.SIGKILL); err != nil {
		t.Fatal(err)
	}
	<-a.done
	killed, err := client.Status(ctx, "harbour", st.ID)
	if err != nil {
		t.Fatal(err)
	}
	killedAt := time.Now()
	lostRuns, err := client.Runs(ctx, st.ID)
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("killed worker A at %d/%d shards", killed.ShardsDone, killed.Shards)
	b := startChild(t, "worker B", workerArgs...)
	deadline = time.Now().Add(60 * time.Second)
	var rerun time.Duration
	recovering := 0
	for {
		s, err := client.Status(ctx, "harbour", st.ID)
		if err != nil {
			t.Fatal(err)
		}
		if s.State == worker.Recovering {
			recovering++
		}
		if s.Done > s.Total {
			t.Fatalf("progress %d of %d fits: counted twice", s.Done, s.Total)
		}
		if rerun == 0 {
			runs, err := client.Runs(ctx, st.ID)
			if err != nil {
				t.Fatal(err)
			}
			for i, n := range lostRuns {
				if runs[i] > n {
					rerun = time.Since(killedAt)
				}
			}
		}
		if s.State.Final() {
			st = s
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("study still %s at %d/%d shards %v after the kill", s.State, s.ShardsDone, s.Shards, 60*time.Second)
		}
		time.Sleep(10 * time.Millisecond)
	}
	t.Logf("the lost shard reran %.1f s after the kill, the study was done %.1f s after it; %d status reads said recovering",
		rerun.Seconds(), time.Since(killedAt).Seconds(), recovering)
	if rerun == 0 || rerun > 30*time.Second {
		t.Fatalf("the lost shard reran %v after the kill, want within 30 s", rerun)
	}
	if st.State != worker.Done || st.Assemblies != 1 {
		t.Fatalf("after the kill: %s (%s), %d assemblies", st.State, st.Error, st.Assemblies)
	}
	// No shard counted twice: one stored entry per shard, and their fits add
	// up to the study's exactly.
	if st.ShardsDone != st.Shards || st.Done != st.Total || st.Total != 270 {
		t.Fatalf("stored %d of %d shards holding %d fits, want %d", st.ShardsDone, st.Shards, st.Done, st.Total)
	}
	runs, err := client.Runs(ctx, st.ID)
	if err != nil {
		t.Fatal(err)
	}
	again := 0
	for _, n := range runs {
		if n > 1 {
			again++
		}
	}
	if again == 0 {
		t.Fatalf("no shard ran twice, so the kill did not land mid-shard (runs %v)", runs)
	}
	wantJSON, wantCSV := expectedReport(t, killStudy)
	gotJSON, err := client.Report(ctx, "harbour", st.ID, worker.ReportJSON)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(wantJSON, stripTiming(t, gotJSON)) {
		t.Fatal("report.json after the kill differs from discrimen run's")
	}
	gotCSV, err := client.Report(ctx, "harbour", st.ID, worker.FitsCSV)
	if err != nil || !bytes.Equal(wantCSV, gotCSV) {
		t.Fatalf("fits.csv after the kill differs from discrimen run's (%v)", err)
	}
	if code := b.stop(t, 40*time.Second); code != 0 {
		t.Fatalf("worker B exited %d after SIGTERM, want 0", code)
	}
}

// speedStudy: 3 hypotheses × 200 participants, 1800 fits in 15 shards.
const speedStudy = `{
  "name": "berth-watch throughput (invented)", "seed": 8,
  "designs": [{"name": "three-channels", "cti_ms": [300, 600, 900], "trials_per_cti": 30, "participants": 200}],
  "hypotheses": [
    {"name": "steady-lamp", "family": "constant", "params": {"level": {"min": 0.2, "max": 1.8}}},
    {"name": "rising-watch", "family": "linear", "params": {"slope": {"min": 0, "max": 2}}},
    {"name": "late-switch", "family": "logistic", "params": {"midpoint": {"min": 0.2, "max": 0.8}, "width": {"min": 0.05, "max": 0.3}}}
  ],
  "replication": {"group_sizes": [5, 10], "replicates": 20}
}`

// runWorkers runs speedStudy through the api at base with n `worker`
// processes of one slot each (GOMAXPROCS=1, as if each had a machine of its
// own core), checks that the report is discrimen run's and that its timing
// block counts n workers, and returns the time from submission to done.
func runWorkers(tb testing.TB, r *workertest.Redis, base, key string, n int, wantJSON, wantCSV []byte) time.Duration {
	tb.Helper()
	var ws []*child
	for i := 0; i < n; i++ {
		w := startChildEnv(tb, fmt.Sprintf("worker %d/%d", i+1, n), []string{"GOMAXPROCS=1"},
			"worker", "--redis", r.URL, "--concurrency", "1", "--metrics-listen", "")
		w.waitFor(tb, regexpMust(`msg="worker ready"`), 30*time.Second)
		ws = append(ws, w)
	}
	st, d := submitAndWait(tb, base, key, speedStudy, 3*time.Minute)
	if st.Status != "done" {
		tb.Fatalf("%d worker(s): study ended %s: %v", n, st.Status, st.Error)
	}
	code, body := httpDo(tb, "GET", base+"/v1/studies/"+st.ID+"/report", key, nil)
	if code != 200 || !bytes.Equal(wantJSON, stripTiming(tb, body)) {
		tb.Fatalf("%d worker(s): report.json differs from discrimen run's (%d)", n, code)
	}
	if code, body := httpDo(tb, "GET", base+"/v1/studies/"+st.ID+"/fits.csv", key, nil); code != 200 || !bytes.Equal(wantCSV, body) {
		tb.Fatalf("%d worker(s): fits.csv differs from discrimen run's (%d)", n, code)
	}
	if !strings.Contains(string(body), fmt.Sprintf(`"workers": %d`, n)) {
		tb.Errorf("%d worker(s): timing block does not count %d workers", n, n)
	}
	for _, w := range ws {
		if code := w.stop(tb, 40*time.Second); code != 0 {
			tb.Fatalf("%s exited %d after SIGTERM", w.name, code)
		}
	}
	return d
}

// startSpeedAPI starts an `api` process for runWorkers and returns it, its
// address and a key.
func startSpeedAPI(tb testing.TB, r *workertest.Redis) (*child, string, string) {
	tb.Helper()
	keys := filepath.Join(tb.TempDir(), "keys")
	key, hash := api.NewKey()
	if err := api.AppendKey(keys, "harbour", hash); err != nil {
		tb.Fatal(err)
	}
	srv := startChild(tb, "api", "api", "--redis", r.URL, "--keys", keys, "--listen", "127.0.0.1:0", "--rate", "100")
	return srv, srv.waitFor(tb, listeningRE, 30*time.Second)[1], key
}

// TestTwoWorkersSameReport: through an `api` process, one worker and two
// workers each give discrimen run's report, and the timing block counts
// them. How much faster two are is BenchmarkTwoWorkers's (a timed test
// would fail whenever the machine is busy).
func TestTwoWorkersSameReport(t *testing.T) {
	if testing.Short() {
		t.Skip("runs a 1800-fit study twice through worker processes")
	}
	r := workertest.New(t, dbOffset)
	srv, base, key := startSpeedAPI(t, r)
	wantJSON, wantCSV := expectedReport(t, speedStudy)
	for _, n := range []int{1, 2} {
		d := runWorkers(t, r, base, key, n, wantJSON, wantCSV)
		t.Logf("%d worker(s): %.2f s", n, d.Seconds())
	}
	if code := srv.stop(t, 20*time.Second); code != 0 {
		t.Fatalf("api exited %d after SIGTERM", code)
	}
}

// BenchmarkTwoWorkers reports the speed-up of two one-core workers over
// one on speedStudy (1800 fits), the faster of b.N rounds each:
//
//	go test ./cmd/discrimen -run '^$' -bench TwoWorkers -benchtime 2x
func BenchmarkTwoWorkers(b *testing.B) {
	r := workertest.New(b, dbOffset)
	srv, base, key := startSpeedAPI(b, r)
	wantJSON, wantCSV := expectedReport(b, speedStudy)
	best := map[int]time.Duration{}
	for range b.N {
		for _, n := range []int{1, 2} {
			if d := runWorkers(b, r, base, key, n, wantJSON, wantCSV); best[n] == 0 || d < best[n] {
				best[n] = d
			}
		}
	}
	b.ReportMetric(best[1].Seconds(), "s-one-worker")
	b.ReportMetric(best[2].Seconds(), "s-two-workers")
	b.ReportMetric(best[1].Seconds()/best[2].Seconds(), "speed-up")
	if code := srv.stop(b, 20*time.Second); code != 0 {
		b.Fatalf("api exited %d after SIGTERM", code)
	}
}

func regexpMust(s string) *regexp.Regexp { return regexp.MustCompile(s) }
