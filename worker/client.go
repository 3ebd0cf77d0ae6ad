package worker

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"slices"
	"time"

	"github.com/hibiken/asynq"

	"discrimen/models"
)

// Client submits studies and reads their status and reports. It is what
// the API holds; it runs no fits.
type Client struct {
	cfg       Config
	st        *store
	queue     *asynq.Client
	inspector *asynq.Inspector
	log       *slog.Logger
	now       func() time.Time
}

// NewClient connects to Redis. The connection is made lazily; call Ping to
// check it.
func NewClient(cfg Config) (*Client, error) {
	cfg, st, err := connect(cfg)
	if err != nil {
		return nil, err
	}
	// asynq's client and inspector share the store's connection pool.
	c := &Client{
		cfg: cfg, st: st,
		queue:     asynq.NewClientFromRedisClient(st.rdb),
		inspector: asynq.NewInspectorFromRedisClient(st.rdb),
		log:       cfg.Logger,
		now:       time.Now,
	}
	if cfg.Registerer != nil {
		if err := registerClientMetrics(cfg.Registerer, c); err != nil {
			return nil, errors.Join(err, st.close())
		}
	}
	return c, nil
}

// Close closes the Redis connection.
func (c *Client) Close() error { return c.st.close() }

// Ping checks that Redis answers.
func (c *Client) Ping(ctx context.Context) error { return c.st.ping(ctx) }

// Submit stores a validated study, owned by owner, and enqueues its plan.
// input is the study file as submitted: workers decode it again with
// models.LoadStudy, as `discrimen run` does, so both see the same study.
func (c *Client) Submit(ctx context.Context, owner string, input []byte, s *models.Study) (Status, error) {
	now := c.now()
	id := newStudyID(now)
	// The unplanned entry goes first, so a crash after any later step
	// leaves one for the watchdog (keys.go).
	if err := c.st.markUnplanned(ctx, id, now); err != nil {
		return Status{}, err
	}
	if err := c.st.create(ctx, id, owner, s.Name, input, s.TotalFits(), now); err != nil {
		return Status{}, err
	}
	// A conflict means a watchdog enqueued the plan already (this submit
	// was slower than Config.ReplanAfter): the study is on its way.
	if _, err := c.queue.EnqueueContext(ctx, c.cfg.planTask(id)); err != nil && !errors.Is(err, asynq.ErrTaskIDConflict) {
		// The caller gets the enqueue error either way; the stored study
		// should not read "queued" for ever. Not applied only if it was
		// canceled meanwhile, which is as final.
		if _, serr := c.st.setStatus(ctx, id, []State{Queued}, Failed, "", "error", "could not enqueue the plan", "finished", now.UnixNano()); serr != nil {
			c.log.Warn("marking a study whose plan was not enqueued failed", "study", id, "err", serr)
		}
		return Status{}, fmt.Errorf("worker: enqueueing the plan of %s: %w", id, err)
	}
	return c.st.status(ctx, id, now)
}

// Status reads a study of owner. Another owner's study is ErrNotFound.
func (c *Client) Status(ctx context.Context, owner, id string) (Status, error) {
	if !ValidID(id) {
		return Status{}, ErrNotFound
	}
	s, err := c.st.status(ctx, id, c.now())
	if err != nil {
		return Status{}, err
	}
	if s.Owner != owner || s.Kind != "" {
		return Status{}, ErrNotFound
	}
	return s, nil
}

// List returns up to limit of owner's studies, newest first, starting
// after cursor (an id from a previous page; "" for the first page), and the
// cursor of the next page ("" when this is the last).
func (c *Client) List(ctx context.Context, owner, cursor string, limit int) ([]Status, string, error) {
	if limit < 1 {
		panic("worker: List limit must be at least 1")
	}
	var out []Status
	now := c.now()
	for {
		want := limit + 1 - len(out)
		ids, err := c.st.list(ctx, owner, cursor, want)
		if err != nil {
			return nil, "", err
		}
		for _, id := range ids {
			s, err := c.st.status(ctx, id, now)
			if errors.Is(err, ErrNotFound) {
				// Expired. The page is right without it either way; a
				// failed removal is tried again at the next read.
				if err := c.st.unindex(ctx, owner, id); err != nil {
					c.log.Warn("listing studies", "owner", owner, "err", err)
				}
				continue
			}
			if err != nil {
				return nil, "", err
			}
			if s.Kind != "" {
				continue // a fit of collected data: GET /v1/fits/{id}
			}
			out = append(out, s)
		}
		if len(ids) < want || len(out) > limit {
			break
		}
		cursor = ids[len(ids)-1]
	}
	if len(out) > limit {
		return out[:limit], out[limit-1].ID, nil
	}
	return out, "", nil
}

// Cancel stops a study: its status becomes canceled, its pending tasks are
// deleted from the queue and running shards stop at their next check.
// Canceling a canceled study is not an error; a done or failed one is
// ErrFinished.
func (c *Client) Cancel(ctx context.Context, owner, id string) (Status, error) {
	s, err := c.Status(ctx, owner, id)
	if err != nil {
		return Status{}, err
	}
	now := c.now()
	ok, err := c.st.setStatus(ctx, id, []State{Queued, Running}, Canceled, "", "finished", now.UnixNano())
	if err != nil {
		return Status{}, err
	}
	if !ok {
		s, err = c.Status(ctx, owner, id)
		if err != nil {
			return Status{}, err
		}
		if s.State == Canceled {
			return s, nil
		}
		return s, ErrFinished
	}
	// The study is canceled from here on: a task left in the queue drops
	// itself when it sees the final state.
	if err := dropTasks(ctx, c.inspector, c.cfg, id, owner, s.Shards); err != nil {
		c.log.Warn("dropping a canceled study's tasks", "study", id, "err", err)
	}
	if err := c.st.finish(ctx, id, owner); err != nil {
		return Status{}, err
	}
	return c.st.status(ctx, id, now)
}

// dropTasks deletes a study's tasks that wait in the queues. Running tasks
// cannot be deleted; they see the final status at their next check. A task
// that is not there (done, never enqueued) or running is expected; any
// other failure is returned, with ctx's error if it ended the loop early.
func dropTasks(ctx context.Context, in *asynq.Inspector, cfg Config, id, owner string, shards int) error {
	return dropQueued(ctx, in, cfg, owner, planTaskID(id), func(i int) string { return shardTaskID(id, i) }, shards)
}

// dropQueued deletes a plan task and shards shard tasks of one owner, as
// dropTasks describes; studies and fit jobs differ only in their task IDs.
func dropQueued(ctx context.Context, in *asynq.Inspector, cfg Config, owner, planID string, shardID func(int) string, shards int) error {
	var errs []error
	drop := func(queue, task string) {
		err := in.DeleteTask(queue, task)
		if err == nil || errors.Is(err, asynq.ErrTaskNotFound) || errors.Is(err, asynq.ErrQueueNotFound) {
			return
		}
		// asynq refuses to delete an active task with an error it does not
		// export; ask for the task's state instead of matching the text.
		if info, ierr := in.GetTaskInfo(queue, task); ierr == nil && info.State == asynq.TaskStateActive {
			return
		}
		errs = append(errs, fmt.Errorf("deleting task %s: %w", task, err))
	}
	drop(cfg.controlQueue(), planID)
	i := 0
	for ; i < shards && ctx.Err() == nil; i++ {
		drop(cfg.shareQueue(owner), shardID(i))
	}
	if i < shards {
		errs = append(errs, fmt.Errorf("stopped after %d of %d shard tasks: %w", i, shards, ctx.Err()))
	}
	return errors.Join(errs...)
}

// Report returns a finished study's report file; ErrNotDone before then.
func (c *Client) Report(ctx context.Context, owner, id string, k ReportKind) ([]byte, error) {
	s, err := c.Status(ctx, owner, id)
	if err != nil {
		return nil, err
	}
	if s.State != Done {
		return nil, ErrNotDone
	}
	return c.st.report(ctx, id, k)
}

// Runs returns how many times each shard of a study was started (a shard
// retried after a crash shows 2 or more). It is for tests and operators.
func (c *Client) Runs(ctx context.Context, id string) (map[int]int, error) {
	return c.st.runs(ctx, id)
}

// QueueSizes returns the number of tasks waiting or running in the shard
// queues (all owners together) and the control queue.
func (c *Client) QueueSizes() (shards, control int, err error) {
	for i, q := range c.cfg.queues() {
		info, err := queueInfo(c.inspector, q)
		if err != nil {
			return 0, 0, err
		}
		n := info.Pending + info.Active + info.Scheduled + info.Retry
		if i == 0 {
			control = n
		} else {
			shards += n
		}
	}
	return shards, control, nil
}

// queueInfo reads one queue's counts; a queue asynq has not made yet (no
// task was ever sent to it) reads as empty. GetQueueInfo reports that case
// with an error asynq does not export (not ErrQueueNotFound, unlike its
// other calls), so the list of queues decides.
func queueInfo(in *asynq.Inspector, q string) (*asynq.QueueInfo, error) {
	info, err := in.GetQueueInfo(q)
	if err == nil {
		return info, nil
	}
	names, lerr := in.Queues()
	if lerr != nil {
		return nil, fmt.Errorf("worker: queue %s: %w", q, errors.Join(err, lerr))
	}
	if !slices.Contains(names, q) {
		return &asynq.QueueInfo{Queue: q}, nil
	}
	return nil, fmt.Errorf("worker: queue %s: %w", q, err)
}
