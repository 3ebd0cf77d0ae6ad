package worker

import (
	"context"
	"encoding/json"
	"errors"
	"strconv"
	"time"

	"github.com/hibiken/asynq"
)

// The watchdog runs in every Server, every Config.WatchdogInterval, and
// does three things that asynq does not do, or does too slowly:
//
//   - it beats: the worker's identity and the time go into the beats hash
//     (keys.go), so other workers can tell it is alive;
//   - it replans: a study still unplanned Config.ReplanAfter after its
//     submit gets its plan task again (the api died between storing it and
//     enqueueing the plan; a plan that is still queued conflicts on its
//     task ID and nothing changes);
//   - it rescues lost tasks: a task registered as running (tracked) by a
//     worker whose last beat is older than lostAfter gets a rerun task in
//     the control queue, served first. A lost shard is also marked lost
//     (the study's status reads "recovering") and its partial progress is
//     dropped. asynq v0.26 would give the task back only once its lease
//     expired and its recoverer ran, about a minute later; the original
//     task still comes back then and finds nothing left to do (the shard
//     stored, the study planned or done).
//
// Every step is idempotent, so any number of workers run it at once: a
// lost task is claimed by exactly one of them (HDEL of its running entry
// returns 1 once), a rerun and the original writing the same shard store
// the same result under the same index, and only the first assembly's
// report is kept (store.complete).
//
// Unplanned entries are scored by the api host's clock and judged by
// Redis's: a skew between the two only moves the replan earlier (the plan
// task then conflicts) or later by the skew.

// lostAfter is how long a worker may go without beating before its
// running tasks are rerun: five beats, so a worker whose beat is late
// under load (a full machine, a slow Redis) is not taken for dead.
func (c Config) lostAfter() time.Duration { return 5 * c.WatchdogInterval }

// fullRescueEvery: every this many passes (a minute at the default
// interval) the watchdog reads the running hash even when every beat is
// fresh.
const fullRescueEvery = 30

// staleBeat reports whether some worker's beat is older than lostAfter.
func (s *Server) staleBeat(ctx context.Context, now time.Time) (bool, error) {
	beats, err := s.st.beats(ctx)
	if err != nil {
		return false, err
	}
	for _, last := range beats {
		if now.Sub(last) >= s.cfg.lostAfter() {
			return true, nil
		}
	}
	return false, nil
}

// beatsForgotten is the expiry of the beats hash, restarted by every beat:
// it goes once no worker has beaten for that long. A single silent
// worker's beat goes sooner: once it is older than lostAfter and the
// worker has no running entry left (rescue).
const beatsForgotten = time.Hour

// runningTask is the value of a running hash entry: enough to enqueue the
// task again, and when it started (this host's clock; for operators).
type runningTask struct {
	Worker string `json:"worker"`
	Type   string `json:"type"`
	Study  string `json:"study"`
	// Index is the shard's index, -1 for a plan or an assembly.
	Index   int       `json:"index"`
	Payload []byte    `json:"payload"`
	Started time.Time `json:"started"`
}

// runningField names one worker's run of one task.
func runningField(typ, id string, index int, worker string) string {
	return typ + ":" + id + ":" + strconv.Itoa(index) + "@" + worker
}

// tracked registers a task as running for as long as h runs, so that the
// watchdog of another worker reruns it soon if this process dies.
func (s *Server) tracked(h func(context.Context, *asynq.Task) error) func(context.Context, *asynq.Task) error {
	return func(ctx context.Context, t *asynq.Task) error {
		var p struct {
			Study string `json:"study"`
			Spec  *struct {
				Index int `json:"index"`
			} `json:"spec"`
		}
		if err := json.Unmarshal(t.Payload(), &p); err != nil || !ValidID(p.Study) {
			return h(ctx, t) // the handler reports the bad payload
		}
		index := -1
		if p.Spec != nil {
			index = p.Spec.Index
		}
		field := runningField(t.Type(), p.Study, index, s.cfg.Identity)
		if err := s.st.addRunning(ctx, field, runningTask{
			Worker: s.cfg.Identity, Type: t.Type(), Study: p.Study, Index: index, Payload: t.Payload(), Started: time.Now(),
		}); err != nil {
			return err
		}
		defer func() {
			ctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), 5*time.Second)
			defer cancel()
			if err := s.st.removeRunning(ctx, field); err != nil {
				// Left behind, the entry is claimed by a watchdog once this
				// worker stops beating, and the rerun finds nothing to do.
				s.log.Warn("removing a running entry", "task", t.Type(), "study", p.Study, "err", err)
			}
		}()
		return h(ctx, t)
	}
}

// rerunTaskID is unique per loss: the shard's run count at the time it
// was found lost.
func rerunTaskID(id string, index, runs int) string {
	return "rerun:" + id + ":" + strconv.Itoa(index) + ":" + strconv.Itoa(runs)
}

func (c Config) rerunTask(typ, id string, index, runs int, payload []byte) *asynq.Task {
	return asynq.NewTask(typ, payload,
		asynq.TaskID(rerunTaskID(id, index, runs)), asynq.Queue(c.controlQueue()), asynq.MaxRetry(c.MaxRetry),
		asynq.Timeout(c.ShardTimeout))
}

// rerunControlTask reruns a lost plan or assembly; its ID is unique per
// loss by the time (Unix ms) it was found lost.
func (c Config) rerunControlTask(typ, id string, at time.Time, payload []byte) *asynq.Task {
	return asynq.NewTask(typ, payload,
		asynq.TaskID("rerun:"+typ+":"+id+":"+strconv.FormatInt(at.UnixMilli(), 10)),
		asynq.Queue(c.controlQueue()), asynq.MaxRetry(c.MaxRetry))
}

// watchdogLoop beats at once, then runs a watchdog pass every
// WatchdogInterval until ctx ends.
func (s *Server) watchdogLoop(ctx context.Context) {
	t := time.NewTicker(s.cfg.WatchdogInterval)
	defer t.Stop()
	for {
		s.watch(ctx)
		select {
		case <-ctx.Done():
			return
		case <-t.C:
		}
	}
}

// watch is one watchdog pass; failures are logged and tried again at the
// next pass.
func (s *Server) watch(ctx context.Context) {
	// Redis's clock, not this host's: beats written by one host are judged
	// by another, whose clock may be off by more than lostAfter.
	now, err := s.st.rdb.Time(ctx).Result()
	if err == nil {
		err = s.st.beat(ctx, s.cfg.Identity, now)
	}
	if err != nil {
		s.beatingSince = time.Time{}
		if ctx.Err() == nil {
			s.log.Warn("watchdog: beating", "err", err)
		}
		return
	}
	if s.beatingSince.IsZero() {
		s.beatingSince = now
	}
	if n, err := s.replan(ctx, now); err != nil {
		if ctx.Err() == nil {
			s.log.Warn("watchdog: replanning", "err", err)
		}
	} else if n > 0 {
		s.log.Info("watchdog: enqueued the plans of studies left unplanned", "studies", n)
	}
	// After an outage of Redis every worker's beat is old; judging others
	// before they had lostAfter to beat again would rerun live shards.
	if now.Sub(s.beatingSince) < s.cfg.lostAfter() {
		return
	}
	s.passes++
	if s.passes%fullRescueEvery != 0 {
		// The running hash can be large (every task of every worker);
		// read it only when some worker is silent. Entries of a worker
		// with no beat at all (every beat expired) wait for a full pass.
		stale, err := s.staleBeat(ctx, now)
		if err != nil || !stale {
			if err != nil && ctx.Err() == nil {
				s.log.Warn("watchdog: reading the beats", "err", err)
			}
			return
		}
	}
	if n, err := s.rescue(ctx, now); err != nil {
		if ctx.Err() == nil {
			s.log.Warn("watchdog: rescuing lost tasks", "err", err)
		}
	} else if n > 0 {
		s.log.Info("watchdog: requeued tasks of workers that stopped beating", "tasks", n)
	}
}

// replan enqueues the plan of every study unplanned for ReplanAfter, up
// to 100 a pass, and returns how many plans it enqueued.
func (s *Server) replan(ctx context.Context, now time.Time) (int, error) {
	ids, err := s.st.unplannedBefore(ctx, now.Add(-s.cfg.ReplanAfter), 100)
	if err != nil {
		return 0, err
	}
	n := 0
	for _, id := range ids {
		rec, err := s.st.record(ctx, id)
		if errors.Is(err, ErrNotFound) || err == nil && rec.State.Final() {
			// Never stored (the api died before the study was written),
			// expired, or finished: nothing to plan.
			if err := s.st.planned(ctx, id); err != nil {
				return n, err
			}
			continue
		}
		if err != nil {
			return n, err
		}
		if err := s.st.reindex(ctx, rec.Owner, id); err != nil {
			return n, err
		}
		plan := s.cfg.planTask(id)
		if rec.Kind == KindFit {
			plan = s.cfg.fitPlanTask(id)
		}
		_, err = s.queue.EnqueueContext(ctx, plan)
		switch {
		case errors.Is(err, asynq.ErrTaskIDConflict):
			// Its plan is queued or running: the entry goes once it is stored.
		case err != nil:
			return n, err
		default:
			n++
			s.m.replanned.Inc()
		}
	}
	return n, nil
}

// rescue reruns the tasks of workers that stopped beating and returns how
// many it requeued.
func (s *Server) rescue(ctx context.Context, now time.Time) (int, error) {
	beats, err := s.st.beats(ctx)
	if err != nil {
		return 0, err
	}
	running, err := s.st.runningTasks(ctx)
	if err != nil {
		return 0, err
	}
	n := 0
	busy := map[string]bool{}
	for field, r := range running {
		busy[r.Worker] = true
		// A worker beats before it takes its first task, and its beat is
		// forgotten only once it is silent with nothing running: no beat
		// means it died, or it is so slow that a rerun is worth it (a
		// duplicate run stores the same result).
		if last, ok := beats[r.Worker]; ok && now.Sub(last) < s.cfg.lostAfter() {
			continue
		}
		claimed, err := s.st.claimLost(ctx, field)
		if err != nil {
			return n, err
		}
		if !claimed {
			continue // another watchdog took it
		}
		ok, err := s.requeueLost(ctx, r, now)
		if err != nil {
			return n, err
		}
		if ok {
			n++
		}
	}
	for w, last := range beats {
		if !busy[w] && now.Sub(last) >= s.cfg.lostAfter() {
			if err := s.st.forgetSilent(ctx, w, last); err != nil {
				return n, err
			}
		}
	}
	return n, nil
}

// requeueLost enqueues the rerun of a claimed lost task, unless its study
// is final or gone or, for a shard, the shard is stored already; a lost
// shard is marked lost first.
func (s *Server) requeueLost(ctx context.Context, r runningTask, now time.Time) (bool, error) {
	rec, err := s.st.record(ctx, r.Study)
	if errors.Is(err, ErrNotFound) {
		return false, nil
	}
	if err != nil {
		return false, err
	}
	if rec.State.Final() {
		return false, nil
	}
	var task *asynq.Task
	switch r.Type {
	case TypeShard, TypeFitShard:
		if stored, err := s.st.shardStored(ctx, r.Study, r.Index); err != nil || stored {
			return false, err
		}
		runs, err := s.st.markLost(ctx, r.Study, r.Index, now)
		if err != nil {
			return false, err
		}
		task = s.cfg.rerunTask(r.Type, r.Study, r.Index, runs, r.Payload)
	case TypePlan, TypeAssemble, TypeFitPlan, TypeFitAssemble:
		task = s.cfg.rerunControlTask(r.Type, r.Study, now, r.Payload)
	default:
		s.log.Warn("watchdog: a running entry of an unknown task type; asynq's lease recovery will rerun it", "type", r.Type, "study", r.Study)
		return false, nil
	}
	_, err = s.queue.EnqueueContext(ctx, task)
	if err != nil && !errors.Is(err, asynq.ErrTaskIDConflict) {
		return false, err
	}
	if err == nil {
		s.m.rescued.WithLabelValues(r.Type).Inc()
	}
	s.log.Info("watchdog: task lost with its worker, rerun queued", "type", r.Type, "study", r.Study, "shard", r.Index, "worker", r.Worker)
	return true, nil
}
