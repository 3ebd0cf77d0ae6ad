package worker

import (
	"context"
	"errors"
	"sync/atomic"
	"testing"
	"time"

	"github.com/redis/go-redis/v9"
)

// TestSweepFailsStudiesWithArchivedTasks guards the case asynq does not
// report: a task archived after its lease ran out on the last retry. The
// sweep marks its study failed with a reason, once, and leaves finished
// studies alone.
func TestSweepFailsStudiesWithArchivedTasks(t *testing.T) {
	r := newRig(t, nil)
	st := r.submit(t, "harbour", tinyStudy)
	s, err := NewServer(r.cfg) // not started: nothing takes the plan task
	if err != nil {
		t.Fatal(err)
	}
	defer s.Shutdown() // never started: closes the Redis client
	if err := s.inspector.ArchiveTask(r.cfg.controlQueue(), planTaskID(st.ID)); err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	if n := s.sweepArchived(ctx); n != 1 {
		t.Fatalf("sweep failed %d studies, want 1", n)
	}
	got, err := r.client.Status(ctx, "harbour", st.ID)
	if err != nil {
		t.Fatal(err)
	}
	if got.State != Failed || got.Error == "" {
		t.Fatalf("status = %s (%q), want failed with a reason", got.State, got.Error)
	}
	if n := s.sweepArchived(ctx); n != 0 {
		t.Errorf("second sweep failed %d studies, want 0", n)
	}
}

// closedCalls counts the Redis commands that met a closed client.
type closedCalls struct{ n atomic.Int64 }

func (c *closedCalls) DialHook(next redis.DialHook) redis.DialHook { return next }

func (c *closedCalls) ProcessHook(next redis.ProcessHook) redis.ProcessHook {
	return func(ctx context.Context, cmd redis.Cmder) error {
		err := next(ctx, cmd)
		if errors.Is(err, redis.ErrClosed) {
			c.n.Add(1)
		}
		return err
	}
}

func (c *closedCalls) ProcessPipelineHook(next redis.ProcessPipelineHook) redis.ProcessPipelineHook {
	return func(ctx context.Context, cmds []redis.Cmder) error {
		err := next(ctx, cmds)
		if errors.Is(err, redis.ErrClosed) {
			c.n.Add(int64(len(cmds)))
		}
		return err
	}
}

// TestShutdownJoinsSweeper: Shutdown waits for a sweep in progress before
// it closes the Redis client, so the sweep's last call still gets an
// answer and nothing in the server meets a closed client. The sweep here
// is slow on purpose: it goes on for 300 ms after its context ends, longer
// than asynq's own shutdown takes, so a Shutdown that did not wait would
// close the client under it.
func TestShutdownJoinsSweeper(t *testing.T) {
	r := newRig(t, nil)
	s, err := NewServer(r.cfg)
	if err != nil {
		t.Fatal(err)
	}
	var closed closedCalls
	s.st.rdb.AddHook(&closed)
	s.sweepEvery = time.Millisecond
	started := make(chan struct{})
	finished := make(chan error, 1)
	var calls atomic.Int64
	s.sweep = func(ctx context.Context) {
		if calls.Add(1) > 1 {
			return
		}
		close(started)
		<-ctx.Done()
		time.Sleep(300 * time.Millisecond)
		finished <- s.st.ping(context.Background())
	}
	if err := s.Start(); err != nil {
		t.Fatal(err)
	}
	select {
	case <-started:
	case <-time.After(10 * time.Second):
		t.Fatal("the sweeper did not run within 10 s")
	}
	begun := time.Now()
	s.Shutdown()
	select {
	case err := <-finished:
		if err != nil {
			t.Fatalf("the sweep's Redis call after Shutdown began: %v, want an answer", err)
		}
	default:
		t.Fatalf("Shutdown returned after %v with the sweeper still running", time.Since(begun))
	}
	// Anything left running would meet the closed client within this wait.
	time.Sleep(200 * time.Millisecond)
	if n := closed.n.Load(); n != 0 {
		t.Fatalf("%d Redis commands met the closed client", n)
	}
	if err := s.st.ping(context.Background()); !errors.Is(err, redis.ErrClosed) {
		t.Fatalf("ping after Shutdown: %v, want redis.ErrClosed (the client is closed)", err)
	}
	if n := closed.n.Load(); n != 1 {
		t.Fatalf("the hook counted %d commands on the closed client, want the 1 ping: it cannot see them", n)
	}
	s.Shutdown() // a second call does nothing
}
