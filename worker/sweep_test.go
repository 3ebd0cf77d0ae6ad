package worker

import (
	"context"
	"testing"
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
	defer s.rdb.Close()
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
