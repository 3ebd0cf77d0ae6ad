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
//   - it rescues lost shards: a shard registered as running by a worker
//     whose last beat is older than lostAfter is marked lost (the study's
//     status reads "recovering"), its partial progress is dropped and a
//     rerun task goes to the control queue, served first. asynq v0.26
//     would give the shard back only once its lease expired and its
//     recoverer ran, about a minute later; the original task still comes
//     back then, finds the result stored and does nothing.
//
// Every step is idempotent, so any number of workers run it at once: a
// lost shard is claimed by exactly one of them (HDEL of its running entry
// returns 1 once), and a rerun and the original writing the same shard
// store the same bytes under the same index.

// lostAfter is how long a worker may go without beating before its
// running shards are rerun: five beats, so a worker whose beat is late
// under load (a full machine, a slow Redis) is not taken for dead.
func (c Config) lostAfter() time.Duration { return 5 * c.WatchdogInterval }

// beatsForgotten is how old a beat is when the worker's entry is removed.
const beatsForgotten = time.Hour

// runningShard is the value of a running hash entry: enough to enqueue
// the shard again, and when it started (this host's clock; for operators).
type runningShard struct {
	Worker  string    `json:"worker"`
	Study   string    `json:"study"`
	Index   int       `json:"index"`
	Payload []byte    `json:"payload"`
	Started time.Time `json:"started"`
}

// runningField names one worker's run of one shard.
func runningField(id string, index int, worker string) string {
	return id + ":" + strconv.Itoa(index) + "@" + worker
}

// rerunTaskID is unique per loss: the shard's run count at the time it
// was found lost.
func rerunTaskID(id string, index, runs int) string {
	return "rerun:" + id + ":" + strconv.Itoa(index) + ":" + strconv.Itoa(runs)
}

func (c Config) rerunTask(id string, index, runs int, payload []byte) *asynq.Task {
	return asynq.NewTask(TypeShard, payload,
		asynq.TaskID(rerunTaskID(id, index, runs)), asynq.Queue(c.controlQueue()), asynq.MaxRetry(c.MaxRetry),
		asynq.Timeout(c.ShardTimeout))
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
	if n, err := s.rescue(ctx, now); err != nil {
		if ctx.Err() == nil {
			s.log.Warn("watchdog: rescuing lost shards", "err", err)
		}
	} else if n > 0 {
		s.log.Info("watchdog: requeued shards of workers that stopped beating", "shards", n)
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
		_, err = s.queue.EnqueueContext(ctx, s.cfg.planTask(id))
		switch {
		case errors.Is(err, asynq.ErrTaskIDConflict):
			// Its plan is queued or running: the entry goes once it is stored.
		case err != nil:
			return n, err
		default:
			n++
		}
	}
	return n, nil
}

// rescue reruns the shards of workers that stopped beating and returns
// how many it requeued.
func (s *Server) rescue(ctx context.Context, now time.Time) (int, error) {
	beats, err := s.st.beats(ctx)
	if err != nil {
		return 0, err
	}
	running, err := s.st.runningShards(ctx)
	if err != nil {
		return 0, err
	}
	n := 0
	busy := map[string]bool{}
	for field, r := range running {
		busy[r.Worker] = true
		// A worker beats before it takes its first task, and its beat is
		// forgotten only while it runs nothing: no beat at all means the
		// beats hash expired, every worker silent for beatsForgotten.
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
		ok, err := s.requeueLost(ctx, r)
		if err != nil {
			return n, err
		}
		if ok {
			n++
		}
	}
	for w, last := range beats {
		if !busy[w] && now.Sub(last) > beatsForgotten {
			if err := s.st.forgetWorker(ctx, w); err != nil {
				return n, err
			}
		}
	}
	return n, nil
}

// requeueLost marks a claimed lost shard and enqueues its rerun, unless
// its study is final or gone or the shard is stored already.
func (s *Server) requeueLost(ctx context.Context, r runningShard) (bool, error) {
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
	if stored, err := s.st.shardStored(ctx, r.Study, r.Index); err != nil || stored {
		return false, err
	}
	runs, err := s.st.markLost(ctx, r.Study, r.Index, time.Now())
	if err != nil {
		return false, err
	}
	var p shardPayload
	if err := json.Unmarshal(r.Payload, &p); err != nil || p.Study != r.Study {
		s.log.Warn("watchdog: a running shard's payload does not decode; asynq's lease recovery will rerun it", "study", r.Study, "shard", r.Index)
		return false, nil
	}
	_, err = s.queue.EnqueueContext(ctx, s.cfg.rerunTask(r.Study, r.Index, runs, r.Payload))
	if err != nil && !errors.Is(err, asynq.ErrTaskIDConflict) {
		return false, err
	}
	s.log.Info("watchdog: shard lost with its worker, rerun queued", "study", r.Study, "shard", r.Index, "worker", r.Worker)
	return true, nil
}
