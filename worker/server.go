package worker

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"os"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/hibiken/asynq"

	"discrimen/models"
	"discrimen/pages"
	"discrimen/recovery"
)

// Server runs the plan, shard and assemble tasks of every study.
//
// Its parts share one Redis client: the store's, which asynq's server,
// client and inspector use too. Shutdown stops them in this order, so that
// nothing calls Redis once the client is closed:
//
//  1. the archive sweeper and the watchdog (watchdog.go): their context is
//     canceled and Shutdown waits for their goroutines to return (a pass
//     in progress stops at its next check);
//  2. asynq's server: it takes no new task, gives running handlers up to
//     ShutdownTimeout to finish (each shard handler joins its progress
//     poller before it returns) and puts the others back on the queue;
//  3. this worker's beat is removed, then the Redis client is closed.
type Server struct {
	cfg       Config
	st        *store
	srv       *asynq.Server
	queue     *asynq.Client
	inspector *asynq.Inspector
	cache     *compiledCache
	m         *serverMetrics
	log       *slog.Logger

	// The sweeper: sweepEvery and sweep are fields so that tests can run
	// it faster or watch it.
	sweepEvery time.Duration
	sweep      func(context.Context)
	stopSweep  context.CancelFunc
	sweeper    sync.WaitGroup

	// beatingSince is when the watchdog's beats last started to succeed
	// (zero after a failed beat); only its goroutine touches it.
	beatingSince time.Time
	// passes counts the watchdog's passes (its goroutine only).
	passes int

	shutdown sync.Once
}

// NewServer prepares a worker; Start begins taking tasks.
func NewServer(cfg Config) (*Server, error) {
	cfg, st, err := connect(cfg)
	if err != nil {
		return nil, err
	}
	s := &Server{
		cfg: cfg, st: st,
		queue:      asynq.NewClientFromRedisClient(st.rdb),
		inspector:  asynq.NewInspectorFromRedisClient(st.rdb),
		cache:      newCompiledCache(cfg.CompiledCache),
		m:          newServerMetrics(),
		log:        cfg.Logger.With("identity", cfg.Identity),
		sweepEvery: sweepInterval,
	}
	s.sweep = s.sweepOnce
	if cfg.Registerer != nil {
		if err := s.m.register(cfg.Registerer); err != nil {
			return nil, errors.Join(err, st.close())
		}
	}
	s.srv = asynq.NewServerFromRedisClient(st.rdb, asynq.Config{
		Concurrency:              cfg.Concurrency,
		Queues:                   queueWeights(cfg),
		StrictPriority:           false,
		RetryDelayFunc:           retryDelay,
		ErrorHandler:             asynq.ErrorHandlerFunc(s.handleError),
		Logger:                   asynqLogger{s.log},
		LogLevel:                 asynq.WarnLevel,
		ShutdownTimeout:          cfg.ShutdownTimeout,
		TaskCheckInterval:        250 * time.Millisecond,
		DelayedTaskCheckInterval: time.Second,
	})
	return s, nil
}

// queueWeights gives every shard queue the same weight, so a worker that
// finds several non-empty shard queues picks among them evenly (asynq
// draws a queue in proportion to its weight at each dequeue and moves on
// to the next when it is empty): each owner's shards get an equal share of
// the workers however long another owner's backlog is. The control queue
// weighs as much as all shard queues together: plans and assemblies are
// short and unblock whole studies, so they are drawn first half of the
// time even when every shard queue is busy.
//
// The queue named Queue itself, where earlier releases put every shard,
// is served too, with weight 1, so that shards enqueued before an upgrade
// still run.
func queueWeights(cfg Config) map[string]int {
	w := map[string]int{cfg.controlQueue(): ShareQueues, cfg.Queue: 1}
	for _, q := range cfg.shareQueues() {
		w[q] = 1
	}
	return w
}

// retryDelay retries a task whose worker died at once (its lease has
// already run out) and backs off exponentially otherwise: 2^n s, at most
// 5 minutes.
func retryDelay(n int, err error, _ *asynq.Task) time.Duration {
	if errors.Is(err, asynq.ErrLeaseExpired) {
		return 0
	}
	return min(time.Second<<min(n, 9), 5*time.Minute)
}

// Start begins taking tasks; it returns at once.
func (s *Server) Start() error {
	mux := asynq.NewServeMux()
	mux.HandleFunc(TypePlan, s.tracked(s.handlePlan))
	mux.HandleFunc(TypeShard, s.tracked(s.handleShard))
	mux.HandleFunc(TypeAssemble, s.tracked(s.handleAssemble))
	mux.HandleFunc(TypeFitPlan, s.tracked(s.handleFitPlan))
	mux.HandleFunc(TypeFitShard, s.tracked(s.handleFitShard))
	mux.HandleFunc(TypeFitAssemble, s.tracked(s.handleFitAssemble))
	s.log.Info("worker starting", "concurrency", s.cfg.Concurrency, "queues", fmt.Sprintf("%s, %s.share0..%d", s.cfg.controlQueue(), s.cfg.Queue, ShareQueues-1))
	ctx, cancel := context.WithCancel(context.Background())
	// The first beat is written before any task is taken, so a running
	// entry of this worker always has a beat to be judged by.
	now, err := s.st.rdb.Time(ctx).Result()
	if err == nil {
		err = s.st.beat(ctx, s.cfg.Identity, now)
	}
	if err != nil {
		cancel()
		return fmt.Errorf("worker: first beat: %w", err)
	}
	if err := s.srv.Start(mux); err != nil {
		cancel()
		return err
	}
	s.stopSweep = cancel
	s.sweeper.Go(func() { s.sweepLoop(ctx) })
	s.sweeper.Go(func() { s.watchdogLoop(ctx) })
	return nil
}

// Shutdown stops the server in the order of the Server's doc comment: the
// sweeper (joined), asynq's server (running shards get up to
// ShutdownTimeout, the rest go back to the queue), then the Redis client.
// Calls after the first do nothing.
func (s *Server) Shutdown() {
	s.shutdown.Do(func() {
		if s.stopSweep != nil {
			s.stopSweep()
		}
		s.sweeper.Wait()
		s.srv.Shutdown()
		// Every handler has returned: this worker runs no shard, and its
		// beat can go.
		ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
		if err := s.st.forgetWorker(ctx, s.cfg.Identity); err != nil {
			s.log.Warn("removing this worker's beat", "err", err)
		}
		cancel()
		if err := s.st.close(); err != nil {
			s.log.Warn("closing the Redis client", "err", err)
		}
		s.log.Info("worker stopped")
	})
}

// permanent marks a failure that a retry cannot fix (a study that does not
// load or compile, a fit that errors): the task is not retried and the
// study fails with this message.
func permanent(format string, args ...any) error {
	return fmt.Errorf("%w: %s", asynq.SkipRetry, fmt.Sprintf(format, args...))
}

// study loads a study's file as submitted.
func (s *Server) study(ctx context.Context, id string) (*models.Study, error) {
	input, err := s.st.input(ctx, id)
	if errors.Is(err, ErrNotFound) {
		return nil, permanent("the study file has expired")
	}
	if err != nil {
		return nil, err
	}
	study, err := models.LoadStudy(input)
	if err != nil {
		return nil, permanent("the study no longer loads: %v", err)
	}
	return study, nil
}

// compiled returns the study's compiled form from the process cache; the
// first compile of a study in any worker records its wall time.
func (s *Server) compiled(ctx context.Context, id string) (*recovery.Compiled, error) {
	c, secs, fresh, err := s.cache.get(ctx, id, func(ctx context.Context) (*recovery.Compiled, error) {
		study, err := s.study(ctx, id)
		if err != nil {
			return nil, err
		}
		c, err := recovery.Compile(ctx, study, s.cfg.CompileWorkers)
		if err != nil {
			return nil, permanent("compiling the study: %v", err)
		}
		return c, nil
	})
	if fresh && err == nil {
		s.m.compileSeconds.Observe(secs)
		// grid_seconds only feeds the report's timing block: a shard does
		// not fail for it.
		if err := s.st.setGridSeconds(ctx, id, secs); err != nil {
			s.log.Warn("recording the compile time", "study", id, "err", err)
		}
		s.log.Info("study compiled", "study", id, "seconds", secs)
	}
	return c, err
}

// plan splits a study into shards of size participants. Planning needs
// only the expanded designs and the hypotheses, not the prediction grids,
// so the plan task does not compile: each worker compiles a study once,
// when its first shard of that study arrives.
func plan(study *models.Study, size int) ([]recovery.ShardSpec, error) {
	return recovery.PlanStudy(study, size)
}

// liveStudy decodes a plan or assemble task's payload and loads its
// study's record. skip is true when the study is gone (expired or never
// stored) or already finished: the task then has nothing left to do.
func (s *Server) liveStudy(ctx context.Context, t *asynq.Task) (id string, rec studyRecord, skip bool, err error) {
	var p planPayload // the assemble payload has the same shape
	if err := json.Unmarshal(t.Payload(), &p); err != nil {
		return "", rec, false, permanent("bad %s payload: %v", t.Type(), err)
	}
	rec, err = s.st.record(ctx, p.Study)
	if errors.Is(err, ErrNotFound) {
		return p.Study, rec, true, nil
	}
	if err != nil {
		return p.Study, rec, false, err
	}
	return p.Study, rec, rec.State.Final(), nil
}

// handlePlan stores the study's plan and enqueues every shard not yet
// stored. A retried plan enqueues again; existing task IDs conflict
// and are skipped.
func (s *Server) handlePlan(ctx context.Context, t *asynq.Task) error {
	id, rec, skip, err := s.liveStudy(ctx, t)
	if err != nil {
		return err
	}
	if skip {
		return s.st.planned(ctx, id)
	}
	study, err := s.study(ctx, id)
	if err != nil {
		return err
	}
	h := len(study.Hypotheses)
	size := max(1, (s.cfg.ShardFits+h-1)/h)
	specs, err := plan(study, size)
	if err != nil {
		return permanent("planning the study: %v", err)
	}
	if err := s.st.setPlan(ctx, id, len(specs), size); err != nil {
		return err
	}
	// Not applied when a retried plan finds the study running already (its
	// start time stays), or when it was canceled meanwhile (checked below).
	if _, err := s.st.setStatus(ctx, id, []State{Queued}, Running, "", "started", time.Now().UnixNano()); err != nil {
		return err
	}
	if err := s.enqueueUnstored(ctx, id, len(specs), func(i int) (int, *asynq.Task) {
		return specs[i].Index, s.cfg.shardTask(id, rec.Owner, specs[i])
	}); err != nil {
		return err
	}
	// A cancel that landed while the shards were being enqueued could not
	// see them; drop them now.
	rec, err = s.st.record(ctx, id)
	if err != nil {
		return err // the retry enqueues nothing new and checks again
	}
	if rec.State.Final() {
		if err := dropTasks(ctx, s.inspector, s.cfg, id, rec.Owner, len(specs)); err != nil {
			s.log.Warn("dropping the tasks of a study canceled while planned", "study", id, "err", err)
		}
		return s.st.planned(ctx, id)
	}
	if err := s.st.planned(ctx, id); err != nil {
		return err // the retry enqueues nothing new and removes it again
	}
	s.log.Info("study planned", "study", id, "shards", len(specs), "shard_size", size, "fits", study.TotalFits())
	return s.maybeAssemble(ctx, id, len(specs))
}

// enqueueUnstored enqueues the shard tasks of a plan whose results are not
// stored yet; task gives the index and task of the i-th of n. A task that
// is queued already (a retried plan) is not an error.
func (s *Server) enqueueUnstored(ctx context.Context, id string, n int, task func(i int) (int, *asynq.Task)) error {
	for i := 0; i < n; i++ {
		index, t := task(i)
		stored, err := s.st.shardStored(ctx, id, index)
		if err != nil {
			return err
		}
		if stored {
			continue
		}
		if _, err := s.queue.EnqueueContext(ctx, t); err != nil && !errors.Is(err, asynq.ErrTaskIDConflict) {
			return err
		}
	}
	return nil
}

// handleShard runs one shard and stores its result under its index.
func (s *Server) handleShard(ctx context.Context, t *asynq.Task) error {
	var p shardPayload
	if err := json.Unmarshal(t.Payload(), &p); err != nil {
		return permanent("bad shard payload: %v", err)
	}
	id, spec := p.Study, p.Spec
	rec, err := s.st.record(ctx, id)
	if errors.Is(err, ErrNotFound) {
		s.m.shards[shardDropped].Inc()
		return nil
	}
	if err != nil {
		return err
	}
	shards := rec.Shards
	if rec.State.Final() {
		s.m.shards[shardDropped].Inc()
		return nil
	}
	if stored, err := s.st.shardStored(ctx, id, spec.Index); err != nil {
		return err
	} else if stored {
		// A duplicate or a retry after the result was stored: nothing to
		// add, but the assembly may still be owed.
		s.m.shards[shardDuplicate].Inc()
		return s.maybeAssemble(ctx, id, shards)
	}
	if err := s.st.countRun(ctx, id, spec.Index); err != nil {
		return err
	}
	c, err := s.compiled(ctx, id)
	if err != nil {
		return err
	}
	h := len(c.Study.Hypotheses)

	// One background poller per shard reports progress and watches for a
	// cancel. It is joined before the result is stored, so that no partial
	// entry lands after storeShard removed it, and on every other return
	// too: the deferred cancel runs before the deferred Wait.
	runCtx, cancel := context.WithCancel(ctx)
	var poller sync.WaitGroup
	defer poller.Wait()
	defer cancel()
	var fits atomic.Int64
	var stopped atomic.Bool // the study reached a final state while running
	poller.Go(func() { s.pollShard(runCtx, cancel, id, spec.Index, &fits, &stopped) })
	last := time.Now()
	res, err := c.RunShard(runCtx, spec, func(n int) {
		now := time.Now()
		// The engine reports per participant; each of its n fits is
		// counted at the participant's mean fit time.
		per := now.Sub(last).Seconds() / float64(n)
		for range n {
			s.m.fitSeconds.Observe(per)
		}
		last = now
		fits.Add(int64(n))
		s.m.fits.Add(float64(n))
	})
	cancel()
	poller.Wait()
	if err != nil {
		if errors.Is(err, recovery.ErrCanceled) {
			if stopped.Load() {
				s.m.shards[shardCanceled].Inc()
				s.log.Info("shard stopped: study canceled", "study", id, "shard", spec.Index)
				return nil
			}
			// Shutdown or timeout: asynq puts the task back or retries it.
			return err
		}
		return permanent("shard %d (design %d, generator %d, participants %d-%d): %v", spec.Index, spec.Design, spec.Generator, spec.From, spec.To-1, err)
	}
	blob, err := encodeResult(res)
	if err != nil {
		return permanent("encoding shard %d: %v", spec.Index, err)
	}
	n, err := s.st.storeShard(ctx, id, spec.Index, spec.Fits(h), blob, s.cfg.Identity)
	if err != nil {
		return err
	}
	s.m.shards[shardStored].Inc()
	s.m.shardSeconds.Observe(res.Seconds)
	s.log.Debug("shard stored", "study", id, "shard", spec.Index, "seconds", res.Seconds, "stored", n, "of", shards)
	return s.maybeAssemble(ctx, id, shards)
}

// pollShard stores a running shard's progress every PollInterval until ctx
// ends; when the study has reached a final state or is gone it sets stopped
// and cancels the run.
func (s *Server) pollShard(ctx context.Context, cancel context.CancelFunc, id string, index int, fits *atomic.Int64, stopped *atomic.Bool) {
	tick := time.NewTicker(s.cfg.PollInterval)
	defer tick.Stop()
	for {
		select {
		case <-ctx.Done():
			return
		case <-tick.C:
		}
		state, err := s.st.progress(ctx, id, index, int(fits.Load()))
		switch {
		case errors.Is(err, ErrNotFound), err == nil && state.Final():
			stopped.Store(true)
			cancel()
			return
		case err != nil && ctx.Err() == nil:
			// The shard keeps running; the next tick tries again.
			s.log.Warn("storing shard progress", "study", id, "shard", index, "err", err)
		}
	}
}

// maybeAssemble enqueues the assembly once every shard is stored. The
// unique task ID lets only one through however many shards see the count.
func (s *Server) maybeAssemble(ctx context.Context, id string, shards int) error {
	n, err := s.st.storedShards(ctx, id)
	if err != nil {
		return err
	}
	if shards == 0 || n < shards {
		return nil
	}
	if _, err := s.queue.EnqueueContext(ctx, s.cfg.assembleTask(id)); err != nil && !errors.Is(err, asynq.ErrTaskIDConflict) {
		return err
	}
	return nil
}

// handleAssemble builds the report from every stored shard, renders and
// stores its files, and marks the study done.
func (s *Server) handleAssemble(ctx context.Context, t *asynq.Task) error {
	id, rec, skip, err := s.liveStudy(ctx, t)
	if skip || err != nil {
		return err
	}
	c, err := s.compiled(ctx, id)
	if err != nil {
		return err
	}
	results, err := s.st.results(ctx, id)
	if err != nil {
		return err
	}
	if shards := rec.Shards; len(results) < shards {
		return fmt.Errorf("worker: study %s: %d of %d shards stored at assembly", id, len(results), shards)
	}
	start := time.Now()
	rep, err := c.Assemble(results)
	if err != nil {
		return permanent("assembling the report: %v", err)
	}
	assembleSeconds := time.Since(start).Seconds()
	workers, err := s.st.workerCount(ctx, id)
	if err != nil {
		return err
	}
	var shardSeconds float64
	for _, r := range results {
		shardSeconds += r.Seconds
	}
	finished := time.Now()
	// Timing is the one part of a report that differs from `discrimen
	// run`'s: here it is measured across the queue. Total runs from
	// submission to assembly; Workers counts worker processes.
	rep.Timing = recovery.Timing{
		TotalSeconds:    finished.Sub(rec.Created).Seconds(),
		GridSeconds:     rec.GridSeconds,
		ShardSeconds:    shardSeconds,
		AssembleSeconds: assembleSeconds,
		Fits:            c.TotalFits(),
		Workers:         workers,
	}
	if rep.Timing.TotalSeconds > 0 {
		rep.Timing.FitsPerSecond = float64(rep.Timing.Fits) / rep.Timing.TotalSeconds
	}
	files := map[ReportKind][]byte{}
	if files[ReportJSON], err = rep.JSON(); err != nil {
		return permanent("rendering report.json: %v", err)
	}
	if files[ReportHTML], err = pages.Report(rep); err != nil {
		return permanent("rendering report.html: %v", err)
	}
	tables, err := rep.TableFiles()
	if err != nil {
		return permanent("rendering the tables: %v", err)
	}
	for _, f := range tables {
		k, ok := reportKindOf(f.Name)
		if !ok {
			return permanent("rendering the tables: no report kind for %s", f.Name)
		}
		files[k] = f.Data
	}
	if err := CheckReportSize(files, s.cfg.MaxReportBytes); err != nil {
		return permanent("%v", err)
	}
	ok, err := s.st.complete(ctx, id, files, finished)
	if errors.Is(err, ErrNotFound) {
		return nil // expired while assembling
	}
	if err != nil {
		return err
	}
	if !ok {
		return nil // canceled, failed or assembled by a duplicate meanwhile
	}
	s.m.assemblies.Inc()
	s.cache.forget(id)
	if err := s.st.finish(ctx, id, rec.Owner); err != nil {
		s.log.Warn("dropping shard results", "study", id, "err", err)
	}
	s.log.Info("study done", "study", id, "fits", rep.Timing.Fits, "seconds", rep.Timing.TotalSeconds, "workers", workers)
	return nil
}

// handleError fails the study when a task will not be retried again.
func (s *Server) handleError(ctx context.Context, t *asynq.Task, err error) {
	// asynq gives its error handler the task's context, which always
	// carries both counts; without them nothing says this was the last try.
	retried, ok1 := asynq.GetRetryCount(ctx)
	maxRetry, ok2 := asynq.GetMaxRetry(ctx)
	var p struct {
		Study string `json:"study"`
	}
	if perr := json.Unmarshal(t.Payload(), &p); perr != nil {
		s.log.Warn("task failed, and its payload does not decode", "type", t.Type(), "err", err, "payload_err", perr)
		return
	}
	s.log.Warn("task failed", "type", t.Type(), "study", p.Study, "retried", retried, "max_retry", maxRetry, "err", err)
	if !ok1 || !ok2 {
		s.log.Warn("task failed without retry counts in its context; its study is left as it is", "type", t.Type(), "study", p.Study)
		return
	}
	if p.Study == "" || (!errors.Is(err, asynq.SkipRetry) && retried < maxRetry) {
		return
	}
	msg := strings.TrimPrefix(err.Error(), asynq.SkipRetry.Error()+": ")
	ctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), 10*time.Second)
	defer cancel()
	_ = s.fail(ctx, p.Study, msg) // fail logs each outcome; the count is the sweep's
}

// fail marks a study failed and drops its remaining tasks. It reports
// whether this call failed it (false when the study was final already, is
// gone, or Redis did not answer, which is logged).
func (s *Server) fail(ctx context.Context, id, msg string) bool {
	ok, err := s.st.setStatus(ctx, id, []State{Queued, Running}, Failed, "", "error", msg, "finished", time.Now().UnixNano())
	if errors.Is(err, ErrNotFound) {
		return false
	}
	if err != nil {
		s.log.Warn("marking a study failed", "study", id, "reason", msg, "err", err)
		return false
	}
	if !ok {
		return false // final already: the first final state stands
	}
	s.cache.forget(id)
	s.log.Error("study failed", "study", id, "err", msg)
	// The study is failed from here on; what follows only tidies up, and
	// each leftover task drops itself when it sees the final state.
	rec, err := s.st.record(ctx, id)
	if err != nil {
		s.log.Warn("reading a failed study to drop its tasks", "study", id, "err", err)
		return true
	}
	if err := dropTasks(ctx, s.inspector, s.cfg, id, rec.Owner, rec.Shards); err != nil {
		s.log.Warn("dropping a failed study's tasks", "study", id, "err", err)
	}
	if err := s.st.finish(ctx, id, rec.Owner); err != nil {
		s.log.Warn("dropping a failed study's shard data", "study", id, "err", err)
	}
	return true
}

// asynqLogger sends asynq's logs to slog.
type asynqLogger struct{ l *slog.Logger }

func (a asynqLogger) Debug(args ...any) { a.l.Debug(fmt.Sprint(args...), "component", "asynq") }
func (a asynqLogger) Info(args ...any)  { a.l.Info(fmt.Sprint(args...), "component", "asynq") }
func (a asynqLogger) Warn(args ...any)  { a.l.Warn(fmt.Sprint(args...), "component", "asynq") }
func (a asynqLogger) Error(args ...any) { a.l.Error(fmt.Sprint(args...), "component", "asynq") }

// Fatal follows asynq's contract: log and exit.
func (a asynqLogger) Fatal(args ...any) {
	a.l.Error(fmt.Sprint(args...), "component", "asynq")
	os.Exit(1)
}
