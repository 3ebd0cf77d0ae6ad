package worker

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"strings"
	"testing"
	"time"

	"github.com/google/go-cmp/cmp"
	"github.com/hibiken/asynq"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"

	"discrimen/models"
	"discrimen/recovery"
	"discrimen/worker/workertest"
)

// dbOffset keeps this package's tests on their own Redis database.
const dbOffset = 0

// tinyStudy: 2 hypotheses × 8 participants, 32 fits.
const tinyStudy = workertest.TinyStudy

// mediumStudy (270 fits) is long enough to cancel or interrupt mid-run.
const mediumStudy = workertest.MediumStudy

func load(t testing.TB, js string) *models.Study {
	t.Helper()
	s, err := models.LoadStudy([]byte(js))
	if err != nil {
		t.Fatal(err)
	}
	return s
}

type rig struct {
	redis  *workertest.Redis
	cfg    Config
	client *Client
}

func newRig(t testing.TB, mod func(*Config)) *rig {
	t.Helper()
	r := workertest.New(t, dbOffset)
	cfg := Config{Redis: r.Opt, Concurrency: 2, PollInterval: 50 * time.Millisecond, ShutdownTimeout: 5 * time.Second}
	if mod != nil {
		mod(&cfg)
	}
	c, err := NewClient(cfg)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		if err := c.Close(); err != nil {
			t.Errorf("closing the client: %v", err)
		}
	})
	return &rig{redis: r, cfg: c.cfg, client: c}
}

func (r *rig) server(t testing.TB, mod func(*Config)) *Server {
	t.Helper()
	cfg := r.cfg
	if mod != nil {
		mod(&cfg)
	}
	s, err := NewServer(cfg)
	if err != nil {
		t.Fatal(err)
	}
	if err := s.Start(); err != nil {
		t.Fatal(err)
	}
	return s
}

func (r *rig) submit(t testing.TB, owner, js string) Status {
	t.Helper()
	st, err := r.client.Submit(context.Background(), owner, []byte(js), load(t, js))
	if err != nil {
		t.Fatal(err)
	}
	return st
}

// wait polls until the study's state satisfies ok or the timeout passes.
func (r *rig) wait(t testing.TB, owner, id string, timeout time.Duration, ok func(Status) bool) Status {
	t.Helper()
	deadline := time.Now().Add(timeout)
	for {
		st, err := r.client.Status(context.Background(), owner, id)
		if err != nil {
			t.Fatal(err)
		}
		if ok(st) {
			return st
		}
		if time.Now().After(deadline) {
			t.Fatalf("study %s: still %s (%d/%d fits) after %v", id, st.State, st.Done, st.Total, timeout)
		}
		time.Sleep(20 * time.Millisecond)
	}
}

func final(s Status) bool { return s.State.Final() }

func (r *rig) checkReport(t testing.TB, owner, id, js string) {
	t.Helper()
	wantJSON, wantCSV := expected(t, js)
	gotJSON, err := r.client.Report(context.Background(), owner, id, ReportJSON)
	if err != nil {
		t.Fatal(err)
	}
	if d := cmp.Diff(string(wantJSON), string(withoutTiming(t, gotJSON))); d != "" {
		t.Fatalf("report.json differs from the in-process run (-want +got):\n%.3000s", d)
	}
	gotCSV, err := r.client.Report(context.Background(), owner, id, FitsCSV)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(wantCSV, gotCSV) {
		t.Fatalf("fits.csv differs from the in-process run (%d vs %d bytes)", len(wantCSV), len(gotCSV))
	}
	for _, f := range workertest.ExpectedTables(t, js) {
		k, ok := reportKindOf(f.Name)
		if !ok {
			t.Fatalf("no report kind for %s", f.Name)
		}
		got, err := r.client.Report(context.Background(), owner, id, k)
		if err != nil {
			t.Fatalf("%s: %v", f.Name, err)
		}
		if !bytes.Equal(f.Data, got) {
			t.Fatalf("%s differs from the in-process run (%d vs %d bytes)", f.Name, len(f.Data), len(got))
		}
	}
	html, err := r.client.Report(context.Background(), owner, id, ReportHTML)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Contains(html, []byte("<html")) {
		t.Fatalf("report.html does not look like HTML: %.200q", html)
	}
}

// TestSubmitToReport runs a study through the queue and compares its
// report with the in-process run's.
func TestSubmitToReport(t *testing.T) {
	reg := prometheus.NewRegistry()
	r := newRig(t, func(c *Config) { c.ShardFits = 6; c.Registerer = reg })
	srv := r.server(t, func(c *Config) { c.Registerer = reg })
	defer srv.Shutdown()
	st := r.submit(t, "harbour", tinyStudy)
	if st.State != Queued || st.Total != 2*2*8 {
		t.Fatalf("after submit: %s with %d fits, want queued with 32", st.State, st.Total)
	}
	st = r.wait(t, "harbour", st.ID, time.Minute, final)
	if st.State != Done {
		t.Fatalf("study ended %s: %s", st.State, st.Error)
	}
	// 6 fits per shard over 2 candidates = 3 participants: 8 → 3+3+2 per generator.
	if st.Shards != 6 || st.ShardsDone != 6 || st.Done != st.Total || st.Assemblies != 1 {
		t.Fatalf("done study: shards %d/%d, fits %d/%d, assemblies %d; want 6/6, 32/32, 1", st.ShardsDone, st.Shards, st.Done, st.Total, st.Assemblies)
	}
	if st.Finished.Before(st.Created) || st.Started.Before(st.Created) {
		t.Fatalf("times out of order: created %v started %v finished %v", st.Created, st.Started, st.Finished)
	}
	r.checkReport(t, "harbour", st.ID, tinyStudy)
	runs, err := r.client.Runs(context.Background(), st.ID)
	if err != nil {
		t.Fatal(err)
	}
	for i := 0; i < 6; i++ {
		if runs[i] != 1 {
			t.Fatalf("shard %d ran %d times, want 1 (runs %v)", i, runs[i], runs)
		}
	}
	if n := testutil.ToFloat64(srv.m.shards[shardStored]); n != 6 {
		t.Fatalf("discrimen_shards_total{outcome=stored} = %v, want 6", n)
	}
	if n := testutil.ToFloat64(srv.m.fits); n != 32 {
		t.Fatalf("discrimen_fits_total = %v, want 32", n)
	}
	want := `
# HELP discrimen_studies Studies kept in Redis, by state (a snapshot at most 5 s old).
# TYPE discrimen_studies gauge
discrimen_studies{state="canceled"} 0
discrimen_studies{state="done"} 1
discrimen_studies{state="failed"} 0
discrimen_studies{state="queued"} 0
discrimen_studies{state="running"} 0
`
	if err := testutil.GatherAndCompare(reg, strings.NewReader(want), "discrimen_studies"); err != nil {
		t.Fatal(err)
	}
	if n, err := testutil.GatherAndCount(reg, "discrimen_queue_tasks", "discrimen_shard_duration_seconds", "discrimen_fit_duration_seconds"); err != nil || n != (1+ShareQueues)*6+2 {
		t.Fatalf("queue and duration series: %d (%v), want %d", n, err, (1+ShareQueues)*6+2)
	}
}

// TestKeyLayout: every key the service wrote is under the prefix, with the
// study's id as hash tag, and expires within the retention.
func TestKeyLayout(t *testing.T) {
	r := newRig(t, func(c *Config) { c.ShardFits = 16; c.Retention = time.Hour })
	srv := r.server(t, nil)
	defer srv.Shutdown()
	st := r.submit(t, "harbour", tinyStudy)
	r.wait(t, "harbour", st.ID, time.Minute, final)
	rdb := r.redis.Client(t)
	// The assembly marks the study done, then drops its shard data: wait
	// for the second step too (a loaded machine can show the gap).
	for deadline := time.Now().Add(10 * time.Second); ; time.Sleep(10 * time.Millisecond) {
		n, err := rdb.Exists(context.Background(), resultsKey(st.ID), partialKey(st.ID)).Result()
		if err != nil {
			t.Fatal(err)
		}
		if n == 0 {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("shard data of the done study still stored 10 s after it finished")
		}
	}
	keys, err := rdb.Keys(context.Background(), "*").Result()
	if err != nil {
		t.Fatal(err)
	}
	var ours []string
	for _, k := range keys {
		if strings.HasPrefix(k, "asynq:") {
			continue
		}
		ours = append(ours, k)
		if !strings.HasPrefix(k, keyPrefix+"{") {
			t.Errorf("key %q is outside the %q prefix", k, keyPrefix)
			continue
		}
		if strings.HasPrefix(k, keyPrefix+"{"+st.ID+"}:") {
			ttl, err := rdb.TTL(context.Background(), k).Result()
			if err != nil || ttl <= 0 || ttl > time.Hour {
				t.Errorf("key %q has TTL %v (%v), want in (0, 1h]", k, ttl, err)
			}
		} else if k == indexKey || k == ownerKey("harbour") {
			ttl, err := rdb.TTL(context.Background(), k).Result()
			if err != nil || ttl <= time.Hour || ttl > 2*time.Hour {
				t.Errorf("index %q has TTL %v (%v), want in (1h, 2h]", k, ttl, err)
			}
		} else if k == beatsKey {
			ttl, err := rdb.TTL(context.Background(), k).Result()
			if err != nil || ttl <= 0 || ttl > beatsForgotten {
				t.Errorf("%q has TTL %v (%v), want in (0, %v]", k, ttl, err, beatsForgotten)
			}
		} else {
			t.Errorf("key %q is neither the study's, an index nor the live worker's beat", k)
		}
	}
	// The shard results and partial progress are dropped once done.
	want := []string{studyKey(st.ID), inputKey(st.ID), doneKey(st.ID), runsKey(st.ID), workersKey(st.ID),
		ownerKey("harbour"), indexKey, beatsKey}
	for _, k := range ReportKinds {
		want = append(want, reportKey(st.ID, k))
	}
	if d := cmp.Diff(sortedCopy(want), sortedCopy(ours)); d != "" {
		t.Fatalf("keys after a finished study (-want +got):\n%s", d)
	}
}

func sortedCopy(s []string) []string {
	out := append([]string(nil), s...)
	for i := range out {
		for j := i + 1; j < len(out); j++ {
			if out[j] < out[i] {
				out[i], out[j] = out[j], out[i]
			}
		}
	}
	return out
}

// TestStoreShardOverwrites: storing a shard twice keeps one entry, so a
// retry cannot count twice.
func TestStoreShardOverwrites(t *testing.T) {
	r := newRig(t, nil)
	ctx := context.Background()
	st := r.submit(t, "harbour", tinyStudy)
	for i, tc := range []struct {
		index, want int
	}{{0, 1}, {0, 1}, {1, 2}, {0, 2}} {
		n, err := r.client.st.storeShard(ctx, st.ID, tc.index, 6, []byte("x"), "w")
		if err != nil {
			t.Fatal(err)
		}
		if n != tc.want {
			t.Fatalf("store %d (shard %d): %d shards counted, want %d", i, tc.index, n, tc.want)
		}
	}
	got, err := r.client.Status(ctx, "harbour", st.ID)
	if err != nil {
		t.Fatal(err)
	}
	if got.Done != 12 || got.ShardsDone != 2 {
		t.Fatalf("after overwrites: %d fits in %d shards, want 12 in 2", got.Done, got.ShardsDone)
	}
}

// TestDuplicateShardAfterDone: a shard task delivered again after the study
// was assembled changes nothing and does not assemble again.
func TestDuplicateShardAfterDone(t *testing.T) {
	r := newRig(t, func(c *Config) { c.ShardFits = 16 })
	srv := r.server(t, nil)
	defer srv.Shutdown()
	st := r.submit(t, "harbour", tinyStudy)
	st = r.wait(t, "harbour", st.ID, time.Minute, final)
	c, err := srv.compiled(context.Background(), st.ID)
	if err != nil {
		t.Fatal(err)
	}
	spec := c.Plan(8)[0]
	if err := srv.handleShard(context.Background(), r.cfg.shardTask(st.ID, "harbour", spec)); err != nil {
		t.Fatal(err)
	}
	if err := srv.handleAssemble(context.Background(), r.cfg.assembleTask(st.ID)); err != nil {
		t.Fatal(err)
	}
	after, err := r.client.Status(context.Background(), "harbour", st.ID)
	if err != nil {
		t.Fatal(err)
	}
	if after.Assemblies != 1 || after.ShardsDone != st.ShardsDone || after.State != Done {
		t.Fatalf("after duplicates: %s, %d assemblies, %d shards; want done, 1, %d", after.State, after.Assemblies, after.ShardsDone, st.ShardsDone)
	}
	if n := testutil.ToFloat64(srv.m.shards[shardDropped]); n != 1 {
		t.Fatalf("dropped shards = %v, want 1", n)
	}
}

// TestCancel stops a running study: the status says canceled, the queue
// empties and no report appears.
func TestCancel(t *testing.T) {
	r := newRig(t, func(c *Config) { c.ShardFits = 9; c.Concurrency = 1 })
	srv := r.server(t, nil)
	defer srv.Shutdown()
	st := r.submit(t, "harbour", mediumStudy)
	r.wait(t, "harbour", st.ID, time.Minute, func(s Status) bool { return s.State == Running && s.ShardsDone >= 1 })
	got, err := r.client.Cancel(context.Background(), "harbour", st.ID)
	if err != nil {
		t.Fatal(err)
	}
	if got.State != Canceled || got.Finished.IsZero() {
		t.Fatalf("after cancel: %s finished %v", got.State, got.Finished)
	}
	deadline := time.Now().Add(10 * time.Second)
	for {
		shards, control, err := r.client.QueueSizes()
		if err != nil {
			t.Fatal(err)
		}
		if shards == 0 && control == 0 {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("queue still holds %d shard and %d control tasks 10 s after cancel", shards, control)
		}
		time.Sleep(20 * time.Millisecond)
	}
	after, err := r.client.Status(context.Background(), "harbour", st.ID)
	if err != nil {
		t.Fatal(err)
	}
	if after.State != Canceled || after.ShardsDone >= after.Shards {
		t.Fatalf("after cancel: %s with %d/%d shards", after.State, after.ShardsDone, after.Shards)
	}
	if _, err := r.client.Report(context.Background(), "harbour", st.ID, ReportJSON); !errors.Is(err, ErrNotDone) {
		t.Fatalf("report of a canceled study: %v, want ErrNotDone", err)
	}
	if again, err := r.client.Cancel(context.Background(), "harbour", st.ID); err != nil || again.State != Canceled {
		t.Fatalf("second cancel: %v, %v; want canceled, nil", again.State, err)
	}
}

// TestCancelFinished: a done study cannot be canceled.
func TestCancelFinished(t *testing.T) {
	r := newRig(t, func(c *Config) { c.ShardFits = 16 })
	srv := r.server(t, nil)
	defer srv.Shutdown()
	st := r.submit(t, "harbour", tinyStudy)
	r.wait(t, "harbour", st.ID, time.Minute, final)
	got, err := r.client.Cancel(context.Background(), "harbour", st.ID)
	if !errors.Is(err, ErrFinished) || got.State != Done {
		t.Fatalf("cancel of a done study: %s, %v; want done, ErrFinished", got.State, err)
	}
}

// TestShutdownRequeues: a worker shut down mid-shard puts the shard back;
// another worker finishes the study with the same report.
func TestShutdownRequeues(t *testing.T) {
	// One shard per generator, 30 participants each: long enough that the
	// shutdown lands mid-shard.
	r := newRig(t, func(c *Config) { c.ShardFits = 270; c.Concurrency = 1 })
	a := r.server(t, func(c *Config) { c.ShutdownTimeout = time.Millisecond; c.Identity = "a" })
	st := r.submit(t, "harbour", mediumStudy)
	r.wait(t, "harbour", st.ID, time.Minute, func(s Status) bool { return s.State == Running && s.Done > s.ShardsDone*90 })
	a.Shutdown()
	mid, err := r.client.Status(context.Background(), "harbour", st.ID)
	if err != nil {
		t.Fatal(err)
	}
	if mid.State.Final() {
		t.Fatalf("study %s before the second worker started", mid.State)
	}
	b := r.server(t, func(c *Config) { c.Identity = "b" })
	defer b.Shutdown()
	st = r.wait(t, "harbour", st.ID, 2*time.Minute, final)
	if st.State != Done || st.ShardsDone != st.Shards || st.Assemblies != 1 {
		t.Fatalf("after restart: %s, %d/%d shards, %d assemblies", st.State, st.ShardsDone, st.Shards, st.Assemblies)
	}
	runs, err := r.client.Runs(context.Background(), st.ID)
	if err != nil {
		t.Fatal(err)
	}
	total := 0
	for _, n := range runs {
		total += n
	}
	if total <= st.Shards {
		t.Fatalf("%d shard runs for %d shards: the interrupted shard was not run again (runs %v)", total, st.Shards, runs)
	}
	r.checkReport(t, "harbour", st.ID, mediumStudy)
}

// TestFailedStudy: a study whose stored file does not load fails with the
// reason, and its tasks leave the queue.
func TestFailedStudy(t *testing.T) {
	r := newRig(t, nil)
	srv := r.server(t, nil)
	defer srv.Shutdown()
	ctx := context.Background()
	id := newStudyID(time.Now())
	// Bypass Submit's caller-side validation: designs is missing.
	if err := r.client.st.create(ctx, id, "harbour", "broken", []byte(`{"name": "broken", "hypotheses": []}`), 1, time.Now()); err != nil {
		t.Fatal(err)
	}
	if _, err := r.client.queue.Enqueue(r.cfg.planTask(id)); err != nil {
		t.Fatal(err)
	}
	st := r.wait(t, "harbour", id, 30*time.Second, final)
	if st.State != Failed || !strings.Contains(st.Error, "designs") {
		t.Fatalf("broken study: %s with error %q; want failed naming designs", st.State, st.Error)
	}
}

// TestOwnersAndPages: another owner's study is not found, and listing
// pages through an owner's studies newest first.
func TestOwnersAndPages(t *testing.T) {
	r := newRig(t, nil)
	ctx := context.Background()
	var ids []string
	for range 5 {
		ids = append(ids, r.submit(t, "harbour", tinyStudy).ID)
		time.Sleep(2 * time.Millisecond) // ids order by millisecond
	}
	other := r.submit(t, "pilot", tinyStudy)
	if _, err := r.client.Status(ctx, "harbour", other.ID); !errors.Is(err, ErrNotFound) {
		t.Fatalf("another owner's study: %v, want ErrNotFound", err)
	}
	if _, err := r.client.Cancel(ctx, "harbour", other.ID); !errors.Is(err, ErrNotFound) {
		t.Fatalf("canceling another owner's study: %v, want ErrNotFound", err)
	}
	if _, err := r.client.Status(ctx, "harbour", "not-an-id"); !errors.Is(err, ErrNotFound) {
		t.Fatalf("malformed id: %v, want ErrNotFound", err)
	}
	var got []string
	cursor := ""
	pages := 0
	for {
		page, next, err := r.client.List(ctx, "harbour", cursor, 2)
		if err != nil {
			t.Fatal(err)
		}
		pages++
		for _, s := range page {
			got = append(got, s.ID)
		}
		if next == "" {
			break
		}
		cursor = next
	}
	want := []string{ids[4], ids[3], ids[2], ids[1], ids[0]}
	if d := cmp.Diff(want, got); d != "" || pages != 3 {
		t.Fatalf("paged list in %d pages (want 3) (-want +got):\n%s", pages, d)
	}
}

// TestExpiredStudiesLeaveTheList: a study whose keys expired is dropped
// from its owner's list.
func TestExpiredStudiesLeaveTheList(t *testing.T) {
	r := newRig(t, nil)
	ctx := context.Background()
	a := r.submit(t, "harbour", tinyStudy)
	time.Sleep(2 * time.Millisecond)
	b := r.submit(t, "harbour", tinyStudy)
	rdb := r.redis.Client(t)
	if err := rdb.Del(ctx, studyKeys(b.ID)...).Err(); err != nil {
		t.Fatal(err)
	}
	page, next, err := r.client.List(ctx, "harbour", "", 1)
	if err != nil {
		t.Fatal(err)
	}
	if len(page) != 1 || page[0].ID != a.ID || next != "" {
		t.Fatalf("list after expiry: %d studies (first %v), next %q; want only %s", len(page), page, next, a.ID)
	}
	if n, err := rdb.ZCard(ctx, ownerKey("harbour")).Result(); err != nil || n != 1 {
		t.Fatalf("owner index holds %d ids (%v) after the expired one was read, want 1", n, err)
	}
}

// TestETA: a running study gets an estimate; queued and done ones do not.
func TestETA(t *testing.T) {
	r := newRig(t, func(c *Config) { c.ShardFits = 9; c.Concurrency = 1 })
	st := r.submit(t, "harbour", mediumStudy)
	if st.ETA != nil {
		t.Fatalf("queued study has an ETA of %v", *st.ETA)
	}
	srv := r.server(t, nil)
	defer srv.Shutdown()
	// A tenth of the fits, so the estimate does not extrapolate the
	// compile time from a handful of fits (which on a loaded machine gave
	// over 10 minutes).
	mid := r.wait(t, "harbour", st.ID, time.Minute, func(s Status) bool { return s.State == Running && s.Done >= s.Total/10 })
	if mid.ETA == nil || *mid.ETA <= 0 || *mid.ETA > 10*time.Minute {
		t.Fatalf("running study at %d/%d fits: ETA %v, want a positive estimate", mid.Done, mid.Total, mid.ETA)
	}
	done := r.wait(t, "harbour", st.ID, 2*time.Minute, final)
	if done.ETA != nil {
		t.Fatalf("finished study has an ETA of %v", *done.ETA)
	}
}

func TestCompiledCacheEvicts(t *testing.T) {
	cc := newCompiledCache(2)
	builds := 0
	build := func(context.Context) (*recovery.Compiled, error) { builds++; return &recovery.Compiled{}, nil }
	ctx := context.Background()
	for i, tc := range []struct {
		id     string
		builds int
	}{{"a", 1}, {"b", 2}, {"a", 2}, {"c", 3}, {"a", 3}, {"b", 4}} {
		if _, _, _, err := cc.get(ctx, tc.id, build); err != nil {
			t.Fatal(err)
		}
		if builds != tc.builds {
			t.Fatalf("step %d (%s): %d builds, want %d", i, tc.id, builds, tc.builds)
		}
	}
	fail := func(context.Context) (*recovery.Compiled, error) { return nil, errors.New("no") }
	if _, _, _, err := cc.get(ctx, "d", fail); err == nil {
		t.Fatal("a failed build returned no error")
	}
	if _, _, fresh, err := cc.get(ctx, "d", build); err != nil || !fresh {
		t.Fatalf("after a failed build: fresh %v err %v, want a new build", fresh, err)
	}
}

func TestRetryDelay(t *testing.T) {
	for _, tc := range []struct {
		name string
		n    int
		err  error
		want time.Duration
	}{
		{"lease expired retries at once", 3, fmt.Errorf("worker died: %w", asynq.ErrLeaseExpired), 0},
		{"first retry", 0, errors.New("boom"), time.Second},
		{"fourth retry", 3, errors.New("boom"), 8 * time.Second},
		{"capped", 20, errors.New("boom"), 5 * time.Minute},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if got := retryDelay(tc.n, tc.err, nil); got != tc.want {
				t.Fatalf("retryDelay(%d, %v) = %v, want %v", tc.n, tc.err, got, tc.want)
			}
		})
	}
}

// The in-process report every queue path must reproduce.
var (
	expected      = workertest.Expected
	withoutTiming = workertest.WithoutTiming
)

// TestProgressAfterFinishExpires guards a leak: a running shard's poller
// can write its progress just after the study finished and finish deleted
// the partial hash. The entry it writes then must still expire.
func TestProgressAfterFinishExpires(t *testing.T) {
	r := newRig(t, func(c *Config) { c.Retention = time.Hour })
	ctx := context.Background()
	st := r.submit(t, "harbour", tinyStudy)
	if ok, err := r.client.st.setStatus(ctx, st.ID, []State{Queued}, Canceled, "", "finished", time.Now().UnixNano()); err != nil || !ok {
		t.Fatalf("cancel: %v, %v", ok, err)
	}
	if err := r.client.st.finish(ctx, st.ID, "harbour"); err != nil {
		t.Fatal(err)
	}
	state, err := r.client.st.progress(ctx, st.ID, 2, 5)
	if err != nil || state != Canceled {
		t.Fatalf("progress after finish: %q, %v; want canceled", state, err)
	}
	rdb := r.redis.Client(t)
	ttl, err := rdb.TTL(ctx, partialKey(st.ID)).Result()
	if err != nil || ttl <= 0 || ttl > time.Hour {
		t.Fatalf("partial hash TTL %v (%v), want in (0, 1h]", ttl, err)
	}
	// A study that is gone reads as not found, and its stray entry expires too.
	gone := newStudyID(time.Now())
	if _, err := r.client.st.progress(ctx, gone, 0, 1); !errors.Is(err, ErrNotFound) {
		t.Fatalf("progress of a missing study: %v, want ErrNotFound", err)
	}
	if ttl, err := rdb.TTL(ctx, partialKey(gone)).Result(); err != nil || ttl <= 0 {
		t.Fatalf("stray partial hash TTL %v (%v), want positive", ttl, err)
	}
	// A status that does not parse is an error naming it.
	if err := rdb.HSet(ctx, studyKey(st.ID), "status", "paused").Err(); err != nil {
		t.Fatal(err)
	}
	if _, err := r.client.st.progress(ctx, st.ID, 2, 6); err == nil || !strings.Contains(err.Error(), `"paused"`) {
		t.Fatalf("progress with status paused: %v, want an error quoting it", err)
	}
}

// TestDropTasks: tasks that are not in the queue are no failure; a context
// that ends the loop early is.
func TestDropTasks(t *testing.T) {
	r := newRig(t, nil)
	id := newStudyID(time.Now())
	if err := dropTasks(context.Background(), r.client.inspector, r.cfg, id, "harbour", 3); err != nil {
		t.Fatalf("dropping tasks that were never enqueued: %v, want nil", err)
	}
	if _, err := r.client.queue.Enqueue(r.cfg.shardTask(id, "harbour", recovery.ShardSpec{Index: 1})); err != nil {
		t.Fatal(err)
	}
	if err := dropTasks(context.Background(), r.client.inspector, r.cfg, id, "harbour", 3); err != nil {
		t.Fatalf("dropping a pending shard task: %v", err)
	}
	if shards, _, err := r.client.QueueSizes(); err != nil || shards != 0 {
		t.Fatalf("shard queue holds %d tasks (%v) after the drop, want 0", shards, err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if err := dropTasks(ctx, r.client.inspector, r.cfg, id, "harbour", 3); err == nil || !strings.Contains(err.Error(), "stopped after 0 of 3") {
		t.Fatalf("dropping with a canceled context: %v, want it to say where it stopped", err)
	}
}

// TestMetricsBeforeAnyTask: before any task was sent, asynq has no queues;
// that is an empty queue, not an unreachable Redis.
func TestMetricsBeforeAnyTask(t *testing.T) {
	reg := prometheus.NewRegistry()
	r := newRig(t, func(c *Config) { c.Registerer = reg })
	want := `
# HELP discrimen_redis_up 1 when the latest snapshot could read Redis.
# TYPE discrimen_redis_up gauge
discrimen_redis_up 1
`
	if err := testutil.GatherAndCompare(reg, strings.NewReader(want), "discrimen_redis_up"); err != nil {
		t.Fatal(err)
	}
	shards, control, err := r.client.QueueSizes()
	if err != nil || shards != 0 || control != 0 {
		t.Fatalf("QueueSizes before any task: %d, %d, %v; want 0, 0, nil", shards, control, err)
	}
}
