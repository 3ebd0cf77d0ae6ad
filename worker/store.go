package worker

import (
	"bytes"
	"context"
	"crypto/rand"
	"encoding/gob"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"strconv"
	"strings"
	"time"

	"github.com/redis/go-redis/v9"

	"discrimen/recovery"
)

// State is a study's place in its life.
type State string

// The states of a study. Done, Failed and Canceled are final.
const (
	Queued   State = "queued"
	Running  State = "running"
	Done     State = "done"
	Failed   State = "failed"
	Canceled State = "canceled"
	// Recovering is never stored: Status reports it for a running study
	// one of whose shards lost its worker and waits to be rerun.
	Recovering State = "recovering"
)

// States lists every stored state in life order.
var States = []State{Queued, Running, Done, Failed, Canceled}

// Final reports whether the study can no longer change.
func (s State) Final() bool { return s == Done || s == Failed || s == Canceled }

// ReportKind names one of a finished study's report files.
type ReportKind int

// The report files of a study.
const (
	ReportJSON ReportKind = iota
	ReportHTML
	FitsCSV
	FitsSidecar // fits.json, describing fits.csv's columns
	ParamsCSV
	ParamsSidecar
	MeasurementCSV
	MeasurementSidecar
)

// ReportKinds lists every report file of a finished study.
var ReportKinds = []ReportKind{ReportJSON, ReportHTML, FitsCSV, FitsSidecar, ParamsCSV, ParamsSidecar, MeasurementCSV, MeasurementSidecar}

var reportFileNames = map[ReportKind]string{
	ReportJSON: "report.json", ReportHTML: "report.html",
	FitsCSV: "fits.csv", FitsSidecar: "fits.json",
	ParamsCSV: "params.csv", ParamsSidecar: "params.json",
	MeasurementCSV: "measurement.csv", MeasurementSidecar: "measurement.json",
}

// FileName is the report file's name: report.json, fits.csv, ...
func (k ReportKind) FileName() string { return k.fileName() }

func (k ReportKind) fileName() string {
	if n, ok := reportFileNames[k]; ok {
		return n
	}
	panic(fmt.Sprintf("worker: unknown report kind %d", int(k)))
}

// reportKindOf returns the kind of a report file name.
func reportKindOf(name string) (ReportKind, bool) {
	for k, n := range reportFileNames {
		if n == name {
			return k, true
		}
	}
	return 0, false
}

// Sentinel errors callers act on; the api maps them to HTTP codes.
var (
	// ErrNotFound: no such study for this owner (or it has expired).
	ErrNotFound = errors.New("worker: study not found")
	// ErrNotDone: the report was asked for before the study finished.
	ErrNotDone = errors.New("worker: study has not finished")
	// ErrFinished: the study already finished, so it cannot be canceled.
	ErrFinished = errors.New("worker: study already finished")
)

// Status is what a caller can read about a study at any time.
type Status struct {
	ID    string
	Owner string
	Name  string
	// Kind is "" for a study, KindFit for a fit of collected data.
	Kind string
	// State is the stored state, or Recovering for a running study with a
	// lost shard waiting to be rerun.
	State State
	// Done and Total count fits. Done includes the finished participants
	// of running shards, so it moves smoothly.
	Done, Total int
	// ShardsDone and Shards count shards (Shards is 0 until planned).
	ShardsDone, Shards int
	// ETA estimates the time left from the fit rate since the plan
	// finished; nil when unknown.
	ETA                        *time.Duration
	Created, Started, Finished time.Time
	Error                      string
	// Assemblies counts stored reports (1 once done).
	Assemblies int
}

// store holds every Redis call of the service, on the key layout of
// keys.go. Nothing else in the module talks to Redis except asynq, which
// shares the store's connection pool for its own keys.
type store struct {
	rdb       redis.UniversalClient
	retention time.Duration
}

// connect fills the config's defaults and makes the store and its Redis
// client.
func connect(cfg Config) (Config, *store, error) {
	cfg, err := cfg.withDefaults()
	if err != nil {
		return cfg, nil, err
	}
	c := cfg.Redis.MakeRedisClient()
	rdb, ok := c.(redis.UniversalClient)
	if !ok {
		return cfg, nil, fmt.Errorf("worker: Config.Redis made %T, not a go-redis client", c)
	}
	return cfg, &store{rdb: rdb, retention: cfg.Retention}, nil
}

// close closes the Redis client, which asynq's client, inspector and
// server share: call it once nothing else runs.
func (st *store) close() error { return st.rdb.Close() }

func (st *store) ping(ctx context.Context) error { return st.rdb.Ping(ctx).Err() }

// setStatusScript changes a study's status only when its current status is
// one of ARGV[1] (comma-separated), then sets the field pairs from ARGV[3]
// on and, when ARGV[2] is not empty, increments that field. It returns 1
// when applied, 0 when the status did not match, -1 when the study is gone.
var setStatusScript = redis.NewScript(`
local cur = redis.call('HGET', KEYS[1], 'status')
if not cur then return -1 end
for s in string.gmatch(ARGV[1], '[^,]+') do
  if s == cur then
    if #ARGV > 2 then redis.call('HSET', KEYS[1], unpack(ARGV, 3)) end
    if ARGV[2] ~= '' then redis.call('HINCRBY', KEYS[1], ARGV[2], 1) end
    return 1
  end
end
return 0
`)

// newStudyID returns 12 hex digits of Unix milliseconds then 16 random hex
// digits: ids sort by submission time, which the owner index relies on.
func newStudyID(now time.Time) string {
	var b [8]byte
	if _, err := rand.Read(b[:]); err != nil {
		panic("worker: crypto/rand: " + err.Error())
	}
	return fmt.Sprintf("%012x%s", now.UnixMilli()&(1<<48-1), hex.EncodeToString(b[:]))
}

// ValidID reports whether s has the form of a study id, so that callers can
// answer "not found" without asking Redis.
func ValidID(s string) bool {
	if len(s) != 28 {
		return false
	}
	for _, r := range s {
		if !(r >= '0' && r <= '9' || r >= 'a' && r <= 'f') {
			return false
		}
	}
	return true
}

func (st *store) create(ctx context.Context, id, owner, name string, input []byte, total int, now time.Time) error {
	_, err := st.rdb.TxPipelined(ctx, func(p redis.Pipeliner) error {
		p.HSet(ctx, studyKey(id), "owner", owner, "name", name, "status", string(Queued),
			"created", now.UnixNano(), "total", total)
		p.Set(ctx, inputKey(id), input, st.retention)
		p.Expire(ctx, studyKey(id), st.retention)
		return nil
	})
	if err != nil {
		return err
	}
	// The indexes live in other slots; they are written after the study so
	// a reader that finds an id always finds its record (or its expiry).
	return st.index(ctx, owner, id)
}

// index adds id to its owner's index and the global one.
func (st *store) index(ctx context.Context, owner, id string) error {
	if err := st.rdb.ZAdd(ctx, ownerKey(owner), redis.Z{Member: id}).Err(); err != nil {
		return err
	}
	if err := st.rdb.ZAdd(ctx, indexKey, redis.Z{Member: id}).Err(); err != nil {
		return err
	}
	return st.keepIndexes(ctx, owner)
}

// markUnplanned records a study about to be stored as waiting for its
// plan.
func (st *store) markUnplanned(ctx context.Context, id string, now time.Time) error {
	return st.rdb.ZAdd(ctx, unplannedKey, redis.Z{Score: float64(now.UnixMilli()), Member: id}).Err()
}

// planned removes a study's unplanned entry: its plan is stored, or it has
// nothing left to plan (final or gone).
func (st *store) planned(ctx context.Context, id string) error {
	return st.rdb.ZRem(ctx, unplannedKey, id).Err()
}

// unplannedBefore returns up to limit studies marked unplanned before
// cutoff, oldest first.
func (st *store) unplannedBefore(ctx context.Context, cutoff time.Time, limit int) ([]string, error) {
	return st.rdb.ZRangeByScore(ctx, unplannedKey, &redis.ZRangeBy{
		Min: "-inf", Max: "(" + strconv.FormatInt(cutoff.UnixMilli(), 10), Count: int64(limit),
	}).Result()
}

// reindex puts a study back in its owner's index and the global one (a
// submit that died before writing them); adding an id already there
// changes nothing.
func (st *store) reindex(ctx context.Context, owner, id string) error {
	_, err := st.rdb.Pipelined(ctx, func(p redis.Pipeliner) error {
		p.ZAdd(ctx, ownerKey(owner), redis.Z{Member: id})
		p.ZAdd(ctx, indexKey, redis.Z{Member: id})
		return nil
	})
	if err != nil {
		return fmt.Errorf("worker: indexing study %s: %w", id, err)
	}
	return st.keepIndexes(ctx, owner)
}

// keepIndexes restarts the indexes' expiry at twice the retention, so an
// owner's index outlives every study in it unless one runs for longer than
// that with no other study of the owner submitted or finished meanwhile.
// The two keys are in different slots, so this is a plain pipeline, not a
// transaction.
func (st *store) keepIndexes(ctx context.Context, owner string) error {
	_, err := st.rdb.Pipelined(ctx, func(p redis.Pipeliner) error {
		p.Expire(ctx, ownerKey(owner), 2*st.retention)
		p.Expire(ctx, indexKey, 2*st.retention)
		return nil
	})
	if err != nil {
		return fmt.Errorf("worker: restarting the expiry of the study indexes: %w", err)
	}
	return nil
}

// setStatus applies a status change guarded by the allowed current states.
func (st *store) setStatus(ctx context.Context, id string, from []State, to State, incr string, fields ...any) (bool, error) {
	allowed := make([]string, len(from))
	for i, s := range from {
		allowed[i] = string(s)
	}
	args := []any{strings.Join(allowed, ","), incr}
	if to != "" {
		args = append(args, "status", string(to))
	}
	args = append(args, fields...)
	n, err := setStatusScript.Run(ctx, st.rdb, []string{studyKey(id)}, args...).Int()
	if err != nil {
		return false, err
	}
	if n < 0 {
		return false, ErrNotFound
	}
	return n == 1, nil
}

// record reads and decodes a study's hash; ErrNotFound when it is gone.
func (st *store) record(ctx context.Context, id string) (studyRecord, error) {
	m, err := st.rdb.HGetAll(ctx, studyKey(id)).Result()
	if err != nil {
		return studyRecord{}, err
	}
	return decodeStored(id, m)
}

// decodeStored decodes a study's hash as read, naming the study in a
// decoding error.
func decodeStored(id string, m map[string]string) (studyRecord, error) {
	if len(m) == 0 {
		return studyRecord{}, ErrNotFound
	}
	rec, err := decodeRecord(m)
	if err != nil {
		return studyRecord{}, fmt.Errorf("worker: study %s: %w", id, err)
	}
	return rec, nil
}

// shardCounts decodes a hash of shard index → count (done, partial, runs),
// naming the key and field of a bad entry.
func shardCounts(key string, m map[string]string) (map[int]int, error) {
	out := make(map[int]int, len(m))
	for k, v := range m {
		i, err := parseCount(k)
		if err != nil {
			return nil, fmt.Errorf("worker: %s: shard index %q: %w", key, k, err)
		}
		n, err := parseCount(v)
		if err != nil {
			return nil, fmt.Errorf("worker: %s field %s = %q: %w", key, k, v, err)
		}
		out[i] = n
	}
	return out, nil
}

func (st *store) input(ctx context.Context, id string) ([]byte, error) {
	b, err := st.rdb.Get(ctx, inputKey(id)).Bytes()
	if errors.Is(err, redis.Nil) {
		return nil, ErrNotFound
	}
	return b, err
}

// status reads a study's full status in one round trip.
func (st *store) status(ctx context.Context, id string, now time.Time) (Status, error) {
	var recCmd, doneCmd, partialCmd *redis.MapStringStringCmd
	var lostCmd *redis.IntCmd
	_, err := st.rdb.Pipelined(ctx, func(p redis.Pipeliner) error {
		recCmd = p.HGetAll(ctx, studyKey(id))
		doneCmd = p.HGetAll(ctx, doneKey(id))
		partialCmd = p.HGetAll(ctx, partialKey(id))
		lostCmd = p.HLen(ctx, lostKey(id))
		return nil
	})
	if err != nil {
		return Status{}, err
	}
	rec, err := decodeStored(id, recCmd.Val())
	if err != nil {
		return Status{}, err
	}
	done, err := shardCounts(doneKey(id), doneCmd.Val())
	if err != nil {
		return Status{}, err
	}
	s := Status{
		ID: id, Owner: rec.Owner, Name: rec.Name, Kind: rec.Kind, State: rec.State, Error: rec.Error,
		Total: rec.Total, Shards: rec.Shards, Assemblies: rec.Assemblies,
		Created: rec.Created, Started: rec.Started, Finished: rec.Finished,
	}
	for _, n := range done {
		s.Done += n
		s.ShardsDone++
	}
	if s.State == Running {
		partial, err := shardCounts(partialKey(id), partialCmd.Val())
		if err != nil {
			return Status{}, err
		}
		for _, n := range partial {
			s.Done += n
		}
	}
	// A done study's count is exactly the stored shards' fits; a running
	// one also counts partial progress, which could only overshoot through
	// a stale entry, so it is capped for display.
	if s.State != Done && s.Done > s.Total {
		s.Done = s.Total
	}
	if s.State == Running && lostCmd.Val() > 0 {
		s.State = Recovering
	}
	if (s.State == Running || s.State == Recovering) && !s.Started.IsZero() && s.Done > 0 {
		// Constant-rate extrapolation: left = (total − done) · elapsed / done.
		elapsed := now.Sub(s.Started)
		left := time.Duration(float64(elapsed) * float64(s.Total-s.Done) / float64(s.Done))
		s.ETA = &left
	}
	return s, nil
}

// storeShard writes a shard's result under its index (a retry overwrites
// it), and returns the number of stored shards.
func (st *store) storeShard(ctx context.Context, id string, index, fits int, blob []byte, identity string) (int, error) {
	f := strconv.Itoa(index)
	var n *redis.IntCmd
	_, err := st.rdb.TxPipelined(ctx, func(p redis.Pipeliner) error {
		p.HSet(ctx, resultsKey(id), f, blob)
		p.HSet(ctx, doneKey(id), f, fits)
		p.HDel(ctx, partialKey(id), f)
		p.HDel(ctx, lostKey(id), f)
		p.SAdd(ctx, workersKey(id), identity)
		p.HSet(ctx, studyKey(id), "last_shard", time.Now().UnixNano())
		for _, k := range studyKeys(id) {
			p.Expire(ctx, k, st.retention)
		}
		n = p.HLen(ctx, doneKey(id))
		return nil
	})
	if err != nil {
		return 0, err
	}
	return int(n.Val()), nil
}

func (st *store) shardStored(ctx context.Context, id string, index int) (bool, error) {
	return st.rdb.HExists(ctx, doneKey(id), strconv.Itoa(index)).Result()
}

func (st *store) storedShards(ctx context.Context, id string) (int, error) {
	n, err := st.rdb.HLen(ctx, doneKey(id)).Result()
	return int(n), err
}

// setPlan records the plan's shard count and size.
func (st *store) setPlan(ctx context.Context, id string, shards, size int) error {
	return st.rdb.HSet(ctx, studyKey(id), "shards", shards, "shard_size", size).Err()
}

// setGridSeconds records a compile's wall time unless an earlier compile
// (in any worker) already did.
func (st *store) setGridSeconds(ctx context.Context, id string, secs float64) error {
	return st.rdb.HSetNX(ctx, studyKey(id), "grid_seconds", strconv.FormatFloat(secs, 'g', -1, 64)).Err()
}

// progress stores the fits a running shard has finished so far and returns
// its study's state (ErrNotFound when the study is gone), in one round
// trip. The partial hash's expiry is restarted with it, so an entry written
// just after the study finished (finish deletes the hash) still expires.
func (st *store) progress(ctx context.Context, id string, index, fits int) (State, error) {
	var status *redis.StringCmd
	_, err := st.rdb.Pipelined(ctx, func(p redis.Pipeliner) error {
		p.HSet(ctx, partialKey(id), strconv.Itoa(index), fits)
		p.Expire(ctx, partialKey(id), st.retention)
		status = p.HGet(ctx, studyKey(id), "status")
		return nil
	})
	if errors.Is(err, redis.Nil) {
		return "", ErrNotFound
	}
	if err != nil {
		return "", err
	}
	s, err := parseState(status.Val())
	if err != nil {
		return "", fmt.Errorf("worker: study %s: %w", id, &fieldError{Field: "status", Value: status.Val(), Err: err})
	}
	return s, nil
}

// countRun counts a start of a shard; the shard is no longer waiting for
// a rerun, so its lost entry goes.
func (st *store) countRun(ctx context.Context, id string, index int) error {
	_, err := st.rdb.TxPipelined(ctx, func(p redis.Pipeliner) error {
		p.HIncrBy(ctx, runsKey(id), strconv.Itoa(index), 1)
		p.HDel(ctx, lostKey(id), strconv.Itoa(index))
		return nil
	})
	return err
}

// markLost records a shard as lost with its worker: its partial progress
// goes (the rerun starts from 0) and its lost entry makes the status read
// "recovering". It returns the shard's run count.
func (st *store) markLost(ctx context.Context, id string, index int, now time.Time) (int, error) {
	f := strconv.Itoa(index)
	var runs *redis.StringCmd
	_, err := st.rdb.TxPipelined(ctx, func(p redis.Pipeliner) error {
		p.HSet(ctx, lostKey(id), f, now.UnixNano())
		p.Expire(ctx, lostKey(id), st.retention)
		p.HDel(ctx, partialKey(id), f)
		runs = p.HGet(ctx, runsKey(id), f)
		return nil
	})
	if err != nil && !errors.Is(err, redis.Nil) {
		return 0, err
	}
	if errors.Is(runs.Err(), redis.Nil) {
		return 0, nil
	}
	n, err := parseCount(runs.Val())
	if err != nil {
		return 0, fmt.Errorf("worker: %s field %s = %q: %w", runsKey(id), f, runs.Val(), err)
	}
	return n, nil
}

// beat records that a worker is alive. The hash expires beatsForgotten
// after the last beat of any worker.
func (st *store) beat(ctx context.Context, identity string, now time.Time) error {
	_, err := st.rdb.TxPipelined(ctx, func(p redis.Pipeliner) error {
		p.HSet(ctx, beatsKey, identity, now.UnixNano())
		p.Expire(ctx, beatsKey, beatsForgotten)
		return nil
	})
	return err
}

// forgetWorker removes a worker's beat (it stopped, or died long ago).
func (st *store) forgetWorker(ctx context.Context, identity string) error {
	return st.rdb.HDel(ctx, beatsKey, identity).Err()
}

// forgetSilentScript removes a worker's beat only if it is still the one
// read (ARGV[2]): a beat that arrived since stays.
var forgetSilentScript = redis.NewScript(`
if redis.call('HGET', KEYS[1], ARGV[1]) == ARGV[2] then
  return redis.call('HDEL', KEYS[1], ARGV[1])
end
return 0
`)

// forgetSilent removes a silent worker's beat, last as read by beats.
func (st *store) forgetSilent(ctx context.Context, identity string, last time.Time) error {
	return forgetSilentScript.Run(ctx, st.rdb, []string{beatsKey}, identity, last.UnixNano()).Err()
}

// beats returns every worker's last beat.
func (st *store) beats(ctx context.Context) (map[string]time.Time, error) {
	m, err := st.rdb.HGetAll(ctx, beatsKey).Result()
	if err != nil {
		return nil, err
	}
	out := make(map[string]time.Time, len(m))
	for w, v := range m {
		t, err := parseUnixNano(v)
		if err != nil {
			return nil, fmt.Errorf("worker: %s field %s = %q: %w", beatsKey, w, v, err)
		}
		out[w] = t
	}
	return out, nil
}

// addRunning registers a task run of this worker; removeRunning ends it.
func (st *store) addRunning(ctx context.Context, field string, r runningTask) error {
	b, err := json.Marshal(r)
	if err != nil {
		return fmt.Errorf("worker: encoding a running entry: %w", err)
	}
	return st.rdb.HSet(ctx, runningKey, field, b).Err()
}

func (st *store) removeRunning(ctx context.Context, field string) error {
	return st.rdb.HDel(ctx, runningKey, field).Err()
}

// claimLost removes a running entry and reports whether this call did, so
// that of several watchdogs exactly one requeues the shard.
func (st *store) claimLost(ctx context.Context, field string) (bool, error) {
	n, err := st.rdb.HDel(ctx, runningKey, field).Result()
	return n == 1, err
}

// runningTasks returns every registered shard run. An entry that does not
// decode is removed (it can name no shard to rerun) and skipped.
func (st *store) runningTasks(ctx context.Context) (map[string]runningTask, error) {
	m, err := st.rdb.HGetAll(ctx, runningKey).Result()
	if err != nil {
		return nil, err
	}
	out := make(map[string]runningTask, len(m))
	for f, v := range m {
		var r runningTask
		if err := json.Unmarshal([]byte(v), &r); err != nil || !ValidID(r.Study) {
			if err := st.rdb.HDel(ctx, runningKey, f).Err(); err != nil {
				return nil, err
			}
			continue
		}
		out[f] = r
	}
	return out, nil
}

// runs returns how many times each shard was started.
func (st *store) runs(ctx context.Context, id string) (map[int]int, error) {
	m, err := st.rdb.HGetAll(ctx, runsKey(id)).Result()
	if err != nil {
		return nil, err
	}
	return shardCounts(runsKey(id), m)
}

// results decodes every stored shard result.
func (st *store) results(ctx context.Context, id string) ([]*recovery.ShardResult, error) {
	m, err := st.rdb.HGetAll(ctx, resultsKey(id)).Result()
	if err != nil {
		return nil, err
	}
	out := make([]*recovery.ShardResult, 0, len(m))
	for k, v := range m {
		var r recovery.ShardResult
		if err := gob.NewDecoder(strings.NewReader(v)).Decode(&r); err != nil {
			return nil, fmt.Errorf("worker: study %s shard %s: decoding the stored result: %w", id, k, err)
		}
		out = append(out, &r)
	}
	return out, nil
}

func encodeResult(r *recovery.ShardResult) ([]byte, error) {
	var buf bytes.Buffer
	if err := gob.NewEncoder(&buf).Encode(r); err != nil {
		return nil, err
	}
	return buf.Bytes(), nil
}

func (st *store) workerCount(ctx context.Context, id string) (int, error) {
	n, err := st.rdb.SCard(ctx, workersKey(id)).Result()
	return int(n), err
}

// completeScript stores a study's report files (KEYS[2..4], ARGV[3..5],
// expiring after ARGV[2] ms) and marks it done at time ARGV[1], only while
// its status (KEYS[1]) is queued or running: the first assembly's report
// stands, and a duplicate or retried assembly that finishes later changes
// nothing. It returns 1 when applied, 0 when the study was final already,
// -1 when it is gone.
var completeScript = redis.NewScript(`
local cur = redis.call('HGET', KEYS[1], 'status')
if not cur then return -1 end
if cur ~= 'queued' and cur ~= 'running' then return 0 end
for i = 2, #KEYS do
  redis.call('SET', KEYS[i], ARGV[i + 1], 'PX', ARGV[2])
end
redis.call('HSET', KEYS[1], 'status', 'done', 'finished', ARGV[1])
redis.call('HINCRBY', KEYS[1], 'assemblies', 1)
return 1
`)

// complete stores the report files and marks the study done, in one
// step, unless it reached a final state first (see completeScript).
func (st *store) complete(ctx context.Context, id string, files map[ReportKind][]byte, finished time.Time) (bool, error) {
	kinds := ReportKinds
	keys := []string{studyKey(id)}
	args := []any{finished.UnixNano(), st.retention.Milliseconds()}
	for _, k := range kinds {
		b, ok := files[k]
		if !ok {
			panic("worker: complete needs every report file")
		}
		keys = append(keys, reportKey(id, k))
		args = append(args, b)
	}
	n, err := completeScript.Run(ctx, st.rdb, keys, args...).Int()
	if err != nil {
		return false, err
	}
	if n < 0 {
		return false, ErrNotFound
	}
	return n == 1, nil
}

func (st *store) report(ctx context.Context, id string, k ReportKind) ([]byte, error) {
	b, err := st.rdb.Get(ctx, reportKey(id, k)).Bytes()
	if errors.Is(err, redis.Nil) {
		return nil, ErrNotFound
	}
	return b, err
}

// finish drops the per-shard working data of a study that reached a final
// state and restarts the retention clock on what is kept.
func (st *store) finish(ctx context.Context, id, owner string) error {
	_, err := st.rdb.TxPipelined(ctx, func(p redis.Pipeliner) error {
		p.Del(ctx, resultsKey(id), partialKey(id), lostKey(id))
		for _, k := range studyKeys(id) {
			p.Expire(ctx, k, st.retention)
		}
		return nil
	})
	if err != nil {
		err = fmt.Errorf("worker: study %s: dropping shard data: %w", id, err)
	}
	return errors.Join(err, st.keepIndexes(ctx, owner))
}

// list returns up to limit ids of an owner's studies older than cursor
// (newest first; "" starts at the newest) and whether more follow.
func (st *store) list(ctx context.Context, owner, cursor string, limit int) ([]string, error) {
	max := "+"
	if cursor != "" {
		max = "(" + cursor
	}
	return st.rdb.ZRevRangeByLex(ctx, ownerKey(owner), &redis.ZRangeBy{Max: max, Min: "-", Count: int64(limit)}).Result()
}

// unindex removes an expired study from its owner's index and the global
// one (two slots, so a plain pipeline).
func (st *store) unindex(ctx context.Context, owner, id string) error {
	_, err := st.rdb.Pipelined(ctx, func(p redis.Pipeliner) error {
		p.ZRem(ctx, ownerKey(owner), id)
		p.ZRem(ctx, indexKey, id)
		return nil
	})
	if err != nil {
		return fmt.Errorf("worker: removing expired study %s from the indexes: %w", id, err)
	}
	return nil
}

// countStates counts the indexed studies by state and returns the ids of
// index entries whose study has expired (see unindexAll).
func (st *store) countStates(ctx context.Context) (map[State]int, []string, error) {
	ids, err := st.rdb.ZRange(ctx, indexKey, 0, -1).Result()
	if err != nil {
		return nil, nil, err
	}
	cmds := make([]*redis.StringCmd, len(ids))
	_, err = st.rdb.Pipelined(ctx, func(p redis.Pipeliner) error {
		for i, id := range ids {
			cmds[i] = p.HGet(ctx, studyKey(id), "status")
		}
		return nil
	})
	if err != nil && !errors.Is(err, redis.Nil) {
		return nil, nil, err
	}
	// Pipelined returns only the first failure, which may be a redis.Nil
	// hiding a real error further on: look at each command.
	out := map[State]int{}
	var gone []string
	for i, c := range cmds {
		v, err := c.Result()
		if errors.Is(err, redis.Nil) {
			gone = append(gone, ids[i])
			continue
		}
		if err != nil {
			return nil, nil, err
		}
		s, err := parseState(v)
		if err != nil {
			return nil, nil, fmt.Errorf("worker: study %s: %w", ids[i], &fieldError{Field: "status", Value: v, Err: err})
		}
		out[s]++
	}
	return out, gone, nil
}

// unindexAll removes expired studies from the global index.
func (st *store) unindexAll(ctx context.Context, ids []string) error {
	if len(ids) == 0 {
		return nil
	}
	members := make([]any, len(ids))
	for i, id := range ids {
		members[i] = id
	}
	if err := st.rdb.ZRem(ctx, indexKey, members...).Err(); err != nil {
		return fmt.Errorf("worker: removing %d expired studies from the index: %w", len(ids), err)
	}
	return nil
}

func itoa(n int) string { return strconv.Itoa(n) }

func defaultIdentity() string {
	h, err := os.Hostname()
	if err != nil {
		h = "worker"
	}
	return h + ":" + strconv.Itoa(os.Getpid())
}
