package worker

import (
	"fmt"
	"hash/fnv"
	"io"
	"log/slog"
	"runtime"
	"time"

	"github.com/hibiken/asynq"
	"github.com/prometheus/client_golang/prometheus"
)

// Config configures a Client and a Server. A zero field means the default
// named beside it.
type Config struct {
	// Redis is the connection: asynq.RedisClientOpt, RedisFailoverClientOpt
	// (Sentinel) or RedisClusterClientOpt. Required.
	Redis asynq.RedisConnOpt
	// Queue is the base name of the asynq queues (default "discrimen"):
	// plan and assemble tasks go to Queue+".control"; shard tasks go to one
	// of ShareQueues queues Queue+".share0", ".share1", ..., the one its
	// owner hashes into (shareQueue), so that one key's backlog cannot hold
	// back another key's shards.
	Queue string
	// Concurrency is the number of shards a Server runs at once (default
	// GOMAXPROCS). Each shard runs on one goroutine.
	Concurrency int
	// ShardFits is the target number of fits per shard (default
	// DefaultShardFits); a shard holds ceil(ShardFits / hypotheses)
	// participants.
	ShardFits int
	// Retention is how long a study, its shards and its report are kept
	// after the last change (default 7 days).
	Retention time.Duration
	// TaskRetention is how long asynq keeps a finished assemble task, which
	// keeps its task ID taken (default 24 h).
	TaskRetention time.Duration
	// MaxRetry is the number of retries of a failing task (default 5).
	MaxRetry int
	// ShardTimeout bounds one shard's run (default 1 h).
	ShardTimeout time.Duration
	// ShutdownTimeout is how long Shutdown waits for running shards before
	// they are put back on the queue (default 30 s).
	ShutdownTimeout time.Duration
	// PollInterval is how often a running shard reports progress and checks
	// whether its study was canceled (default 500 ms).
	PollInterval time.Duration
	// ReplanAfter is the age at which a watchdog enqueues the plan again of
	// a study still waiting to be planned (its api died mid-submit, or its
	// plan task is slow to run; a plan enqueued twice runs once), default
	// 10 s.
	ReplanAfter time.Duration
	// WatchdogInterval is how often a Server's watchdog looks for unplanned
	// studies and lost shards, and how often it beats (default 2 s).
	WatchdogInterval time.Duration
	// CompiledCache is the number of compiled studies a Server keeps
	// (default 4).
	CompiledCache int
	// CompileWorkers is the number of goroutines that build a study's
	// prediction grids (default GOMAXPROCS).
	CompileWorkers int
	// Identity names this worker process in a study's record (default
	// host:pid).
	Identity string
	// MaxReportBytes caps the bytes of a study's three report files; an
	// assembly over it fails the study instead of storing them (default
	// DefaultMaxReportBytes; the api refuses at submit a study whose
	// EstimateReportBytes is over its own cap).
	MaxReportBytes int64
	// Logger receives structured logs (default: discard).
	Logger *slog.Logger
	// Registerer receives the worker's metrics (default: none).
	Registerer prometheus.Registerer
}

// DefaultShardFits is the default target of fits per shard. A fit takes
// 1-3 ms on one core (the demo study runs about 590 fits per core-second)
// and a shard's queue overhead (dequeue, gob-encode, store, count) about
// 2-4 ms (BenchmarkShardOverhead), so 240 fits keep the overhead near 1% of
// compute, below the 5% goal, while the demo's 7,200 fits still split into
// 30 shards to spread over several workers.
const DefaultShardFits = 240

// DefaultMaxReportBytes is the default cap on a study's report files, 256
// MiB: half of the 512 MB a Redis string may hold (redis.io, "Strings";
// from memory), so report.html alone always fits.
const DefaultMaxReportBytes = 256 << 20

func (c Config) withDefaults() (Config, error) {
	if c.Redis == nil {
		return c, fmt.Errorf("worker: Config.Redis is required")
	}
	if c.Queue == "" {
		c.Queue = "discrimen"
	}
	if c.Concurrency <= 0 {
		c.Concurrency = runtime.GOMAXPROCS(0)
	}
	if c.ShardFits <= 0 {
		c.ShardFits = DefaultShardFits
	}
	if c.Retention <= 0 {
		c.Retention = 7 * 24 * time.Hour
	}
	if c.TaskRetention <= 0 {
		c.TaskRetention = 24 * time.Hour
	}
	if c.MaxRetry <= 0 {
		c.MaxRetry = 5
	}
	if c.ShardTimeout <= 0 {
		c.ShardTimeout = time.Hour
	}
	if c.ShutdownTimeout <= 0 {
		c.ShutdownTimeout = 30 * time.Second
	}
	if c.PollInterval <= 0 {
		c.PollInterval = 500 * time.Millisecond
	}
	if c.ReplanAfter <= 0 {
		c.ReplanAfter = 10 * time.Second
	}
	if c.WatchdogInterval <= 0 {
		c.WatchdogInterval = 2 * time.Second
	}
	if c.CompiledCache <= 0 {
		c.CompiledCache = 4
	}
	if c.CompileWorkers <= 0 {
		c.CompileWorkers = runtime.GOMAXPROCS(0)
	}
	if c.Identity == "" {
		c.Identity = defaultIdentity()
	}
	if c.MaxReportBytes <= 0 {
		c.MaxReportBytes = DefaultMaxReportBytes
	}
	if c.Logger == nil {
		c.Logger = slog.New(slog.NewTextHandler(io.Discard, nil))
	}
	return c, nil
}

func (c Config) controlQueue() string { return c.Queue + ".control" }

// ShareQueues is the number of shard queues owners are spread over. asynq
// fixes a server's queues when it starts, so the set is fixed too: owners
// hash into it, and two owners that hash into the same queue share it
// first in, first out. 8 queues keep the chance that two given keys share
// one at 1/8 while a worker still polls only 9 queues.
const ShareQueues = 8

// shareQueue is the shard queue of an owner: FNV-1a (32 bits) of the
// owner's name modulo ShareQueues, so it is the same in every process and
// release.
func (c Config) shareQueue(owner string) string {
	return c.Queue + ".share" + itoa(ShareIndex(owner))
}

// ShareIndex is the shard queue (0 to ShareQueues-1) an owner hashes into.
func ShareIndex(owner string) int {
	h := fnv.New32a()
	_, _ = h.Write([]byte(owner)) // a hash.Hash never returns an error
	return int(h.Sum32() % ShareQueues)
}

// shareQueues lists every shard queue.
func (c Config) shareQueues() []string {
	out := make([]string, ShareQueues)
	for i := range out {
		out[i] = c.Queue + ".share" + itoa(i)
	}
	return out
}

// queues lists every queue: the control queue first, then the shard
// queues.
func (c Config) queues() []string { return append([]string{c.controlQueue()}, c.shareQueues()...) }
