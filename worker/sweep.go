package worker

import (
	"context"
	"encoding/json"
	"errors"
	"time"

	"github.com/hibiken/asynq"
)

// sweepInterval is how often a worker looks for archived tasks.
const sweepInterval = time.Minute

// sweepArchived fails every study with an archived task. asynq archives a
// task whose lease ran out after its last retry without calling the error
// handler (a worker killed on each attempt), which would otherwise leave
// the study "running" for ever. Failing is idempotent: a study already
// finished stays as it is. It returns the number of studies it failed, and
// stops early, between tasks, once ctx ends.
func (s *Server) sweepArchived(ctx context.Context) int {
	failed := 0
	// The old shard queue too (see queueWeights).
	for _, q := range append(s.cfg.queues(), s.cfg.Queue) {
		for page := 1; ctx.Err() == nil; page++ {
			tasks, err := s.inspector.ListArchivedTasks(q, asynq.PageSize(100), asynq.Page(page))
			if err != nil {
				if !errors.Is(err, asynq.ErrQueueNotFound) {
					s.log.Warn("sweep: listing archived tasks", "queue", q, "err", err)
				}
				break
			}
			for _, t := range tasks {
				if ctx.Err() != nil {
					return failed
				}
				var p struct {
					Study string `json:"study"`
				}
				if err := json.Unmarshal(t.Payload, &p); err != nil || !ValidID(p.Study) {
					// Not a task of ours: it names no study to fail.
					s.log.Warn("sweep: an archived task names no study", "queue", q, "task", t.ID, "type", t.Type)
					continue
				}
				rec, err := s.st.record(ctx, p.Study)
				if errors.Is(err, ErrNotFound) {
					continue // expired; its task goes with asynq's own retention
				}
				if err != nil {
					s.log.Warn("sweep: reading a study with an archived task", "study", p.Study, "err", err)
					continue
				}
				if rec.State.Final() {
					continue
				}
				msg := "a " + t.Type + " task was abandoned after its last retry"
				if t.LastErr != "" {
					msg += ": " + t.LastErr
				}
				if s.fail(ctx, p.Study, msg) {
					failed++
				}
			}
			if len(tasks) < 100 {
				break
			}
		}
	}
	return failed
}

// sweepOnce is the sweeper's default work: one sweepArchived.
func (s *Server) sweepOnce(ctx context.Context) {
	if n := s.sweepArchived(ctx); n > 0 {
		s.log.Info("sweep: failed studies with abandoned tasks", "studies", n)
	}
}

// sweepLoop runs s.sweep every s.sweepEvery until ctx ends. Start runs it
// on its own goroutine and Shutdown waits for it to return.
func (s *Server) sweepLoop(ctx context.Context) {
	t := time.NewTicker(s.sweepEvery)
	defer t.Stop()
	for {
		select {
		case <-ctx.Done():
			return
		case <-t.C:
			s.sweep(ctx)
		}
	}
}
