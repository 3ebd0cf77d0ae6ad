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
// finished stays as it is. It returns the number of studies it failed.
func (s *Server) sweepArchived(ctx context.Context) int {
	failed := 0
	for _, q := range []string{s.cfg.controlQueue(), s.cfg.Queue} {
		for page := 1; ; page++ {
			tasks, err := s.inspector.ListArchivedTasks(q, asynq.PageSize(100), asynq.Page(page))
			if err != nil {
				if !errors.Is(err, asynq.ErrQueueNotFound) {
					s.log.Warn("sweep: listing archived tasks", "queue", q, "err", err)
				}
				break
			}
			for _, t := range tasks {
				var p struct {
					Study string `json:"study"`
				}
				if json.Unmarshal(t.Payload, &p) != nil || !ValidID(p.Study) {
					continue
				}
				st, err := s.st.status(ctx, p.Study, time.Now())
				if err != nil || st.State.Final() {
					continue
				}
				msg := "a " + t.Type + " task was abandoned after its last retry"
				if t.LastErr != "" {
					msg += ": " + t.LastErr
				}
				s.fail(ctx, p.Study, msg)
				failed++
			}
			if len(tasks) < 100 {
				break
			}
		}
	}
	return failed
}

// sweepLoop runs sweepArchived every sweepInterval until ctx ends.
func (s *Server) sweepLoop(ctx context.Context) {
	t := time.NewTicker(sweepInterval)
	defer t.Stop()
	for {
		select {
		case <-ctx.Done():
			return
		case <-t.C:
			s.sweepArchived(ctx)
		}
	}
}
