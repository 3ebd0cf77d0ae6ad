package worker

import (
	"context"
	"testing"
	"time"

	"github.com/hibiken/asynq"
	"github.com/prometheus/client_golang/prometheus/testutil"
)

// idleServer is a Server that is never started, for calling its handlers
// and watchdog passes directly; its Redis client is closed at the end.
func idleServer(t *testing.T, r *rig, mod func(*Config)) *Server {
	t.Helper()
	cfg := r.cfg
	if mod != nil {
		mod(&cfg)
	}
	s, err := NewServer(cfg)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		if err := s.st.close(); err != nil {
			t.Errorf("closing the idle server's client: %v", err)
		}
	})
	return s
}

// TestReplanAfterCrashedSubmit: an api that died after storing a study but
// before enqueueing its plan (and before indexing it) leaves an unplanned
// entry; a worker's watchdog plans it, puts it back in the owner's list,
// and the study reaches done with the in-process report. An entry whose
// study was never stored is dropped.
func TestReplanAfterCrashedSubmit(t *testing.T) {
	r := newRig(t, func(c *Config) { c.ReplanAfter = 200 * time.Millisecond; c.WatchdogInterval = 50 * time.Millisecond })
	ctx := context.Background()
	now := time.Now()
	id := newStudyID(now)
	if err := r.client.st.markUnplanned(ctx, id, now); err != nil {
		t.Fatal(err)
	}
	if err := r.client.st.create(ctx, id, "harbour", "crashed", []byte(tinyStudy), load(t, tinyStudy).TotalFits(), now); err != nil {
		t.Fatal(err)
	}
	if err := r.client.st.unindex(ctx, "harbour", id); err != nil {
		t.Fatal(err)
	}
	never := newStudyID(now)
	if err := r.client.st.markUnplanned(ctx, never, now); err != nil {
		t.Fatal(err)
	}
	srv := r.server(t, nil)
	defer srv.Shutdown()
	st := r.wait(t, "harbour", id, time.Minute, final)
	if st.State != Done {
		t.Fatalf("replanned study %s: %s", st.State, st.Error)
	}
	r.checkReport(t, "harbour", id, tinyStudy)
	if n := testutil.ToFloat64(srv.m.replanned); n != 1 {
		t.Fatalf("discrimen_replanned_studies_total = %v, want 1", n)
	}
	list, _, err := r.client.List(ctx, "harbour", "", 10)
	if err != nil {
		t.Fatal(err)
	}
	if len(list) != 1 || list[0].ID != id {
		t.Fatalf("owner's list %v, want the replanned study", list)
	}
	for deadline := time.Now().Add(5 * time.Second); ; time.Sleep(20 * time.Millisecond) {
		n, err := r.redis.Client(t).ZCard(ctx, unplannedKey).Result()
		if err != nil {
			t.Fatal(err)
		}
		if n == 0 {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("%d unplanned entries left 5 s after the study finished, want 0", n)
		}
	}
}

// TestLostShardRerun: a shard registered as running by a worker that
// stopped beating is claimed by one watchdog pass (a second pass finds
// nothing), its partial progress is dropped, the status reads recovering
// until a live worker reruns it, and the report is the in-process one.
func TestLostShardRerun(t *testing.T) {
	r := newRig(t, func(c *Config) { c.ShardFits = 8 })
	ctx := context.Background()
	st := r.submit(t, "harbour", tinyStudy)
	idle := idleServer(t, r, nil)
	// Plan by hand, then take shard 0 off the queue: it is "running" on a
	// worker, ghost, that died a minute ago.
	if err := r.client.inspector.DeleteTask(r.cfg.controlQueue(), planTaskID(st.ID)); err != nil {
		t.Fatal(err)
	}
	if err := idle.handlePlan(ctx, r.cfg.planTask(st.ID)); err != nil {
		t.Fatal(err)
	}
	if err := r.client.inspector.DeleteTask(r.cfg.shareQueue("harbour"), shardTaskID(st.ID, 0)); err != nil {
		t.Fatal(err)
	}
	c, err := idle.compiled(ctx, st.ID)
	if err != nil {
		t.Fatal(err)
	}
	spec := c.Plan(4)[0]
	dead := time.Now().Add(-time.Minute)
	if err := idle.st.beat(ctx, "ghost", dead); err != nil {
		t.Fatal(err)
	}
	if err := idle.st.addRunning(ctx, runningField(TypeShard, st.ID, 0, "ghost"), runningTask{
		Worker: "ghost", Type: TypeShard, Study: st.ID, Index: 0, Payload: r.cfg.shardTask(st.ID, "harbour", spec).Payload(), Started: dead,
	}); err != nil {
		t.Fatal(err)
	}
	if err := idle.st.countRun(ctx, st.ID, 0); err != nil {
		t.Fatal(err)
	}
	if _, err := idle.st.progress(ctx, st.ID, 0, 3); err != nil {
		t.Fatal(err)
	}
	before, err := r.client.Status(ctx, "harbour", st.ID)
	if err != nil {
		t.Fatal(err)
	}
	if before.State != Running || before.Done != 3 {
		t.Fatalf("before the rescue: %s with %d fits done, want running with the ghost's 3", before.State, before.Done)
	}
	// A watchdog that has only just begun to beat (a start, or Redis back
	// after an outage) does not judge others yet.
	idle.watch(ctx)
	if running, err := idle.st.runningTasks(ctx); err != nil || len(running) != 1 {
		t.Fatalf("after a first watchdog pass: %d running entries (%v), want the ghost's 1 untouched", len(running), err)
	}
	if n, err := idle.rescue(ctx, time.Now()); err != nil || n != 1 {
		t.Fatalf("rescue: %d shards (%v), want 1", n, err)
	}
	if n, err := idle.rescue(ctx, time.Now()); err != nil || n != 0 {
		t.Fatalf("second rescue: %d shards (%v), want 0: the first claimed it", n, err)
	}
	if n := testutil.ToFloat64(idle.m.rescued.WithLabelValues(TypeShard)); n != 1 {
		t.Fatalf("discrimen_rescued_tasks_total{type=study:shard} = %v, want 1", n)
	}
	// The ghost has nothing running any more: its beat is forgotten, so the
	// watchdogs stop reading the running hash for it.
	beats, err := idle.st.beats(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if _, ok := beats["ghost"]; ok || len(beats) != 1 {
		t.Fatalf("beats after the ghost's shard was requeued: %v, want only the idle server's (from its watch pass)", beats)
	}
	after, err := r.client.Status(ctx, "harbour", st.ID)
	if err != nil {
		t.Fatal(err)
	}
	if after.State != Recovering || after.Done != 0 {
		t.Fatalf("after the rescue: %s with %d fits done, want recovering with 0 (the lost partial dropped)", after.State, after.Done)
	}
	if _, err := r.client.inspector.GetTaskInfo(r.cfg.controlQueue(), rerunTaskID(st.ID, 0, 1)); err != nil {
		t.Fatalf("the rerun task is not in the control queue: %v", err)
	}
	srv := r.server(t, nil)
	defer srv.Shutdown()
	done := r.wait(t, "harbour", st.ID, time.Minute, final)
	if done.State != Done || done.Done != done.Total || done.ShardsDone != done.Shards || done.Assemblies != 1 {
		t.Fatalf("after the rerun: %s, %d/%d fits, %d/%d shards, %d assemblies", done.State, done.Done, done.Total, done.ShardsDone, done.Shards, done.Assemblies)
	}
	runs, err := r.client.Runs(ctx, st.ID)
	if err != nil {
		t.Fatal(err)
	}
	if runs[0] != 2 {
		t.Fatalf("shard 0 started %d times, want 2 (the ghost's and the rerun)", runs[0])
	}
	r.checkReport(t, "harbour", st.ID, tinyStudy)
	// A late duplicate of the original task (asynq's lease recovery) finds
	// the shard stored and changes nothing.
	before2, err := r.client.Report(ctx, "harbour", st.ID, ReportJSON)
	if err != nil {
		t.Fatal(err)
	}
	if err := srv.handleShard(ctx, asynq.NewTask(TypeShard, r.cfg.shardTask(st.ID, "harbour", spec).Payload())); err != nil {
		t.Fatal(err)
	}
	after2, err := r.client.Report(ctx, "harbour", st.ID, ReportJSON)
	if err != nil {
		t.Fatal(err)
	}
	if string(before2) != string(after2) {
		t.Fatal("a duplicate shard after the rerun changed the report")
	}
}

// TestLostPlanRerun: a plan whose worker died mid-plan is rerun from the
// control queue; the study reaches done with the in-process report.
func TestLostPlanRerun(t *testing.T) {
	r := newRig(t, nil)
	ctx := context.Background()
	st := r.submit(t, "harbour", tinyStudy)
	idle := idleServer(t, r, nil)
	if err := r.client.inspector.DeleteTask(r.cfg.controlQueue(), planTaskID(st.ID)); err != nil {
		t.Fatal(err)
	}
	dead := time.Now().Add(-time.Minute)
	if err := idle.st.beat(ctx, "ghost", dead); err != nil {
		t.Fatal(err)
	}
	plan := r.cfg.planTask(st.ID)
	if err := idle.st.addRunning(ctx, runningField(TypePlan, st.ID, -1, "ghost"), runningTask{
		Worker: "ghost", Type: TypePlan, Study: st.ID, Index: -1, Payload: plan.Payload(), Started: dead,
	}); err != nil {
		t.Fatal(err)
	}
	if n, err := idle.rescue(ctx, time.Now()); err != nil || n != 1 {
		t.Fatalf("rescue: %d tasks (%v), want 1", n, err)
	}
	srv := r.server(t, nil)
	defer srv.Shutdown()
	done := r.wait(t, "harbour", st.ID, time.Minute, final)
	if done.State != Done || done.Assemblies != 1 {
		t.Fatalf("after the plan's rerun: %s (%s), %d assemblies", done.State, done.Error, done.Assemblies)
	}
	r.checkReport(t, "harbour", st.ID, tinyStudy)
	running, err := srv.st.runningTasks(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if len(running) != 0 {
		t.Fatalf("%d running entries once the study is done, want 0: %v", len(running), running)
	}
}
