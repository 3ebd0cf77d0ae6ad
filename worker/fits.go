package worker

// Fits of collected data on the study machinery: a fit job is a study
// record of kind "fit" (so quotas, status, the watchdog, fair shares and
// failure handling are the studies' own), planned into blocks of
// participants (recovery.FitBlock), each stored under its index, and
// assembled once (recovery.AssembleFit) into fit.json, fit.html and the
// fit tables in one guarded step.

import (
	"context"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"sort"
	"sync"
	"sync/atomic"
	"time"

	"github.com/hibiken/asynq"
	"github.com/redis/go-redis/v9"

	"discrimen/models"
	"discrimen/pages"
	"discrimen/recovery"
)

// KindFit is the kind field of a fit job's record.
const KindFit = "fit"

// The asynq task types of a fit job.
const (
	// TypeFitPlan parses the stored upload, splits its participants into
	// blocks and enqueues one shard task per block.
	TypeFitPlan = "fit:plan"
	// TypeFitShard fits one block of participants by every candidate.
	TypeFitShard = "fit:shard"
	// TypeFitAssemble builds fit.json, fit.html and the tables.
	TypeFitAssemble = "fit:assemble"
)

// FitFiles lists the files of a finished fit, as `discrimen fit` writes
// them.
var FitFiles = []string{
	"fit.json", "fit.html",
	"fit_candidates.csv", "fit_candidates.json", "fit_params.csv", "fit_params.json",
	"fit_checks.csv", "fit_checks.json", "fit_group.csv", "fit_group.json",
}

// FitUpload is what a client sends to fit collected data.
type FitUpload struct {
	Study   []byte // the study file as sent
	Design  string // the design the data were collected under
	Columns string // renamed columns, as `discrimen fit --columns`
	Trials  recovery.DataFile
	EEG     *recovery.DataFile // nil without EEG
}

// fingerprint is the hex SHA-256 of every part of the upload, each
// length-prefixed, for the Idempotency-Key check.
func (u FitUpload) fingerprint() string {
	h := sha256.New()
	part := func(b []byte) {
		var n [8]byte
		binary.BigEndian.PutUint64(n[:], uint64(len(b)))
		h.Write(n[:])
		h.Write(b)
	}
	part([]byte("fit"))
	part(u.Study)
	part([]byte(u.Design))
	part([]byte(u.Columns))
	part([]byte(u.Trials.Name))
	part(u.Trials.Data)
	if u.EEG != nil {
		part([]byte(u.EEG.Name))
		part(u.EEG.Data)
	}
	return hex.EncodeToString(h.Sum(nil))
}

// uploadKey holds a fit's uploaded data (keys.go).
func uploadKey(id string) string { return keyPrefix + "{" + id + "}:upload" }

// fitFileKey holds one file of a finished fit.
func fitFileKey(id, name string) string { return keyPrefix + "{" + id + "}:" + name }

// fitKeys lists every key of a fit job, for expiry and deletion.
func fitKeys(id string) []string {
	keys := []string{
		studyKey(id), inputKey(id), uploadKey(id), resultsKey(id), doneKey(id), partialKey(id), runsKey(id),
		workersKey(id), lostKey(id),
	}
	for _, n := range FitFiles {
		keys = append(keys, fitFileKey(id, n))
	}
	return keys
}

func fitPlanTaskID(id string) string             { return "fitplan:" + id }
func fitShardTaskID(id string, index int) string { return "fitshard:" + id + ":" + itoa(index) }
func fitAssembleTaskID(id string) string         { return "fitassemble:" + id }

// fitSpec is one block of participants [From, To) of a fit.
type fitSpec struct {
	Index int `json:"index"`
	From  int `json:"from"`
	To    int `json:"to"`
}

type fitShardPayload struct {
	Study string  `json:"study"`
	Spec  fitSpec `json:"spec"`
}

func (c Config) fitPlanTask(id string) *asynq.Task {
	return asynq.NewTask(TypeFitPlan, mustJSON(planPayload{Study: id}),
		asynq.TaskID(fitPlanTaskID(id)), asynq.Queue(c.controlQueue()), asynq.MaxRetry(c.MaxRetry))
}

func (c Config) fitShardTask(id, owner string, spec fitSpec) *asynq.Task {
	return asynq.NewTask(TypeFitShard, mustJSON(fitShardPayload{Study: id, Spec: spec}),
		asynq.TaskID(fitShardTaskID(id, spec.Index)), asynq.Queue(c.shareQueue(owner)), asynq.MaxRetry(c.MaxRetry),
		asynq.Timeout(c.ShardTimeout))
}

func (c Config) fitAssembleTask(id string) *asynq.Task {
	return asynq.NewTask(TypeFitAssemble, mustJSON(assemblePayload{Study: id}),
		asynq.TaskID(fitAssembleTaskID(id)), asynq.Queue(c.controlQueue()), asynq.MaxRetry(c.MaxRetry),
		asynq.Retention(c.TaskRetention))
}

// fitBlocks splits n participants into blocks of size.
func fitBlocks(n, size int) []fitSpec {
	var out []fitSpec
	for from := 0; from < n; from += size {
		out = append(out, fitSpec{Index: len(out), From: from, To: min(n, from+size)})
	}
	return out
}

// createFit stores a fit job's record, study file and upload in one
// transaction, then the index entries (as create does for a study).
func (st *store) createFit(ctx context.Context, id, owner string, up FitUpload, name string, total int, now time.Time) error {
	_, err := st.rdb.TxPipelined(ctx, func(p redis.Pipeliner) error {
		p.HSet(ctx, studyKey(id), "owner", owner, "name", name, "status", string(Queued),
			"created", now.UnixNano(), "total", total, "kind", KindFit)
		p.Set(ctx, inputKey(id), up.Study, st.retention)
		fields := []any{"design", up.Design, "columns", up.Columns, "trials_name", up.Trials.Name, "trials", up.Trials.Data}
		if up.EEG != nil {
			fields = append(fields, "eeg_name", up.EEG.Name, "eeg", up.EEG.Data)
		}
		p.HSet(ctx, uploadKey(id), fields...)
		p.Expire(ctx, uploadKey(id), st.retention)
		p.Expire(ctx, studyKey(id), st.retention)
		return nil
	})
	if err != nil {
		return err
	}
	return st.index(ctx, owner, id)
}

// upload reads a fit's stored upload.
func (st *store) upload(ctx context.Context, id string) (FitUpload, error) {
	m, err := st.rdb.HGetAll(ctx, uploadKey(id)).Result()
	if err != nil {
		return FitUpload{}, err
	}
	if len(m) == 0 {
		return FitUpload{}, ErrNotFound
	}
	study, err := st.input(ctx, id)
	if err != nil {
		return FitUpload{}, err
	}
	up := FitUpload{Study: study, Design: m["design"], Columns: m["columns"],
		Trials: recovery.DataFile{Name: m["trials_name"], Data: []byte(m["trials"])}}
	if n, ok := m["eeg_name"]; ok {
		up.EEG = &recovery.DataFile{Name: n, Data: []byte(m["eeg"])}
	}
	return up, nil
}

// storeFitBlockScript stores a block's result (KEYS: record, results,
// done, partial, lost, workers; ARGV: index, blob, fits, identity, now,
// retention ms) only while the fit's record exists, so a block finishing
// after DELETE leaves nothing behind; it returns the stored blocks, or
// -1 when the fit is gone.
var storeFitBlockScript = redis.NewScript(`
if redis.call('EXISTS', KEYS[1]) == 0 then return -1 end
redis.call('HSET', KEYS[2], ARGV[1], ARGV[2])
redis.call('HSET', KEYS[3], ARGV[1], ARGV[3])
redis.call('HDEL', KEYS[4], ARGV[1])
redis.call('HDEL', KEYS[5], ARGV[1])
redis.call('SADD', KEYS[6], ARGV[4])
redis.call('HSET', KEYS[1], 'last_shard', ARGV[5])
for i = 1, #KEYS do redis.call('PEXPIRE', KEYS[i], ARGV[6]) end
if redis.call('EXISTS', KEYS[7]) == 1 then redis.call('PEXPIRE', KEYS[7], ARGV[6]) end
if redis.call('EXISTS', KEYS[8]) == 1 then redis.call('PEXPIRE', KEYS[8], ARGV[6]) end
if redis.call('EXISTS', KEYS[9]) == 1 then redis.call('PEXPIRE', KEYS[9], ARGV[6]) end
return redis.call('HLEN', KEYS[3])
`)

func (st *store) storeFitBlock(ctx context.Context, id string, index, fits int, blob []byte, identity string) (int, error) {
	keys := []string{studyKey(id), resultsKey(id), doneKey(id), partialKey(id), lostKey(id), workersKey(id),
		uploadKey(id), inputKey(id), runsKey(id)}
	n, err := storeFitBlockScript.Run(ctx, st.rdb, keys, index, blob, fits, identity, time.Now().UnixNano(), st.retention.Milliseconds()).Int()
	if err != nil {
		return 0, err
	}
	if n < 0 {
		return 0, ErrNotFound
	}
	return n, nil
}

// fitBlock is a stored block: its participants' fits (JSON round-trips
// them exactly: recovery's ParticipantFit is built for it) and its time.
type fitBlock struct {
	Index   int                       `json:"index"`
	Seconds float64                   `json:"seconds"`
	Parts   []recovery.ParticipantFit `json:"parts"`
}

// fitResults decodes every stored block, in index order.
func (st *store) fitResults(ctx context.Context, id string) ([]fitBlock, error) {
	m, err := st.rdb.HGetAll(ctx, resultsKey(id)).Result()
	if err != nil {
		return nil, err
	}
	out := make([]fitBlock, 0, len(m))
	for k, v := range m {
		var b fitBlock
		if err := json.Unmarshal([]byte(v), &b); err != nil {
			return nil, fmt.Errorf("worker: fit %s block %s: decoding the stored result: %w", id, k, err)
		}
		out = append(out, b)
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Index < out[j].Index })
	return out, nil
}

// completeFit stores a fit's files and marks it done in one step, with
// completeScript (studies' guard: only while queued or running).
func (st *store) completeFit(ctx context.Context, id string, files map[string][]byte, finished time.Time) (bool, error) {
	keys := []string{studyKey(id)}
	args := []any{finished.UnixNano(), st.retention.Milliseconds()}
	for _, n := range FitFiles {
		b, ok := files[n]
		if !ok {
			panic("worker: completeFit needs every fit file, missing " + n)
		}
		keys = append(keys, fitFileKey(id, n))
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

// finishFit drops a finished fit's per-block data and restarts the
// retention clock on the rest (the upload included).
func (st *store) finishFit(ctx context.Context, id, owner string) error {
	_, err := st.rdb.TxPipelined(ctx, func(p redis.Pipeliner) error {
		p.Del(ctx, resultsKey(id), partialKey(id), lostKey(id))
		for _, k := range fitKeys(id) {
			p.Expire(ctx, k, st.retention)
		}
		return nil
	})
	if err != nil {
		err = fmt.Errorf("worker: fit %s: dropping block data: %w", id, err)
	}
	return errors.Join(err, st.keepIndexes(ctx, owner))
}

// deleteFit removes every key of a fit and its index entries.
func (st *store) deleteFit(ctx context.Context, id, owner string) error {
	if err := st.rdb.Del(ctx, fitKeys(id)...).Err(); err != nil {
		return err
	}
	_, err := st.rdb.Pipelined(ctx, func(p redis.Pipeliner) error {
		p.ZRem(ctx, ownerKey(owner), id)
		p.ZRem(ctx, indexKey, id)
		p.ZRem(ctx, unplannedKey, id)
		return nil
	})
	return err
}

// ParseFit checks an upload as a worker will read it: the study loads,
// the design is one of its (expanded) designs, the columns parse and the
// data parse completely. It returns the study and the data; the errors
// are models' and recovery's (recovery.DataErrors name file, row and
// column).
func ParseFit(up FitUpload) (*models.Study, *recovery.Collected, error) {
	study, err := models.LoadStudy(up.Study)
	if err != nil {
		return nil, nil, err
	}
	data, err := parseFitData(study, up)
	return study, data, err
}

func parseFitData(study *models.Study, up FitUpload) (*recovery.Collected, error) {
	d, err := recovery.StudyDesign(study, up.Design)
	if err != nil {
		return nil, err
	}
	cols, err := recovery.ParseColumns(up.Columns)
	if err != nil {
		return nil, err
	}
	return recovery.ParseCollected(d, up.Trials, up.EEG, cols)
}

// SubmitFit stores an upload that ParseFit accepted (study and data are
// its results) and enqueues its plan; under key (when not "") as
// SubmitOnce does for studies. The fit counts as a study in flight, of
// participants × hypotheses fits.
func (c *Client) SubmitFit(ctx context.Context, owner, key string, up FitUpload, study *models.Study, data *recovery.Collected, estimate int64, admit func(context.Context) error) (Status, bool, error) {
	if admit == nil {
		admit = func(context.Context) error { return nil }
	}
	submit := func(ctx context.Context) (Status, error) {
		now := c.now()
		id := newStudyID(now)
		if err := c.st.markUnplanned(ctx, id, now); err != nil {
			return Status{}, err
		}
		total := len(data.Participants) * len(study.Hypotheses)
		if err := c.st.createFit(ctx, id, owner, up, study.Name, total, now); err != nil {
			return Status{}, err
		}
		if _, err := c.queue.EnqueueContext(ctx, c.cfg.fitPlanTask(id)); err != nil && !errors.Is(err, asynq.ErrTaskIDConflict) {
			if _, serr := c.st.setStatus(ctx, id, []State{Queued}, Failed, "", "error", "could not enqueue the plan", "finished", now.UnixNano()); serr != nil {
				c.log.Warn("marking a fit whose plan was not enqueued failed", "fit", id, "err", serr)
			}
			return Status{}, fmt.Errorf("worker: enqueueing the plan of %s: %w", id, err)
		}
		return c.st.status(ctx, id, now)
	}
	if key == "" {
		if err := admit(ctx); err != nil {
			return Status{}, false, err
		}
		st, err := submit(ctx)
		if err == nil {
			c.recordEstimate(ctx, st.ID, estimate)
		}
		return st, false, err
	}
	return c.submitOnce(ctx, owner, key, up.fingerprint(), admit, submit, c.FitStatus, estimate)
}

// FitStatus reads a fit of owner; another owner's fit, or a study, is
// ErrNotFound.
func (c *Client) FitStatus(ctx context.Context, owner, id string) (Status, error) {
	if !ValidID(id) {
		return Status{}, ErrNotFound
	}
	s, err := c.st.status(ctx, id, c.now())
	if err != nil {
		return Status{}, err
	}
	if s.Owner != owner || s.Kind != KindFit {
		return Status{}, ErrNotFound
	}
	return s, nil
}

// FitFile returns one of a finished fit's files (a name of FitFiles);
// ErrNotDone before then.
func (c *Client) FitFile(ctx context.Context, owner, id, name string) ([]byte, error) {
	s, err := c.FitStatus(ctx, owner, id)
	if err != nil {
		return nil, err
	}
	if s.State != Done {
		return nil, ErrNotDone
	}
	b, err := c.st.rdb.Get(ctx, fitFileKey(id, name)).Bytes()
	if errors.Is(err, redis.Nil) {
		return nil, ErrNotFound
	}
	return b, err
}

// DeleteFit stops a fit if it is in flight (its waiting tasks are
// dropped; a running block stops at its next check and stores nothing)
// and deletes its uploaded data and results at once.
func (c *Client) DeleteFit(ctx context.Context, owner, id string) error {
	s, err := c.FitStatus(ctx, owner, id)
	if err != nil {
		return err
	}
	if !s.State.Final() {
		if _, err := c.st.setStatus(ctx, id, []State{Queued, Running}, Canceled, "", "finished", c.now().UnixNano()); err != nil {
			return err
		}
		if err := dropFitTasks(ctx, c.inspector, c.cfg, id, owner, s.Shards); err != nil {
			c.log.Warn("dropping a deleted fit's tasks", "fit", id, "err", err)
		}
	}
	return c.st.deleteFit(ctx, id, owner)
}

// dropFitTasks deletes a fit's waiting tasks, as dropTasks does a study's.
func dropFitTasks(ctx context.Context, in *asynq.Inspector, cfg Config, id, owner string, shards int) error {
	return dropQueued(ctx, in, cfg, owner, fitPlanTaskID(id), func(i int) string { return fitShardTaskID(id, i) }, shards)
}

// loadFit reads and parses a fit's stored upload, as the api did.
func (s *Server) loadFit(ctx context.Context, id string) (*models.Study, *recovery.Collected, FitUpload, error) {
	up, err := s.st.upload(ctx, id)
	if errors.Is(err, ErrNotFound) {
		return nil, nil, up, permanent("the uploaded data are gone (deleted or expired)")
	}
	if err != nil {
		return nil, nil, up, err
	}
	study, data, err := ParseFit(up)
	if err != nil {
		return nil, nil, up, permanent("the upload no longer parses: %v", err)
	}
	return study, data, up, nil
}

// compiledFit compiles the fit's design, once per process (the studies'
// cache, keyed by the fit's id).
func (s *Server) compiledFit(ctx context.Context, id string, study *models.Study, design string) (*recovery.Compiled, error) {
	c, secs, fresh, err := s.cache.get(ctx, id, func(ctx context.Context) (*recovery.Compiled, error) {
		c, err := recovery.CompileDesign(ctx, study, design, s.cfg.CompileWorkers)
		if err != nil {
			return nil, permanent("compiling the design: %v", err)
		}
		return c, nil
	})
	if fresh && err == nil {
		s.m.compileSeconds.Observe(secs)
		if err := s.st.setGridSeconds(ctx, id, secs); err != nil {
			s.log.Warn("recording the compile time", "fit", id, "err", err)
		}
	}
	return c, err
}

// fitBlockSize is the participants per block: ShardFits fits, each
// participant taking one fit per hypothesis.
func (c Config) fitBlockSize(hypotheses int) int {
	return max(1, (c.ShardFits+hypotheses-1)/hypotheses)
}

func (s *Server) handleFitPlan(ctx context.Context, t *asynq.Task) error {
	id, rec, skip, err := s.liveStudy(ctx, t)
	if err != nil {
		return err
	}
	if skip {
		return s.st.planned(ctx, id)
	}
	study, data, _, err := s.loadFit(ctx, id)
	if err != nil {
		return err
	}
	size := s.cfg.fitBlockSize(len(study.Hypotheses))
	specs := fitBlocks(len(data.Participants), size)
	if err := s.st.setPlan(ctx, id, len(specs), size); err != nil {
		return err
	}
	if _, err := s.st.setStatus(ctx, id, []State{Queued}, Running, "", "started", time.Now().UnixNano()); err != nil {
		return err
	}
	if err := s.enqueueUnstored(ctx, id, len(specs), func(i int) (int, *asynq.Task) {
		return specs[i].Index, s.cfg.fitShardTask(id, rec.Owner, specs[i])
	}); err != nil {
		return err
	}
	rec, err = s.st.record(ctx, id)
	if errors.Is(err, ErrNotFound) {
		return s.st.planned(ctx, id)
	}
	if err != nil {
		return err
	}
	if rec.State.Final() {
		if err := dropFitTasks(ctx, s.inspector, s.cfg, id, rec.Owner, len(specs)); err != nil {
			s.log.Warn("dropping the tasks of a fit stopped while planned", "fit", id, "err", err)
		}
		return s.st.planned(ctx, id)
	}
	if err := s.st.planned(ctx, id); err != nil {
		return err
	}
	s.log.Info("fit planned", "fit", id, "blocks", len(specs), "block_size", size)
	return s.maybeFitAssemble(ctx, id, len(specs))
}

func (s *Server) handleFitShard(ctx context.Context, t *asynq.Task) error {
	var p fitShardPayload
	if err := json.Unmarshal(t.Payload(), &p); err != nil {
		return permanent("bad fit shard payload: %v", err)
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
	if rec.State.Final() {
		s.m.shards[shardDropped].Inc()
		return nil
	}
	if stored, err := s.st.shardStored(ctx, id, spec.Index); err != nil {
		return err
	} else if stored {
		s.m.shards[shardDuplicate].Inc()
		return s.maybeFitAssemble(ctx, id, rec.Shards)
	}
	if err := s.st.countRun(ctx, id, spec.Index); err != nil {
		return err
	}
	study, data, up, err := s.loadFit(ctx, id)
	if err != nil {
		return err
	}
	c, err := s.compiledFit(ctx, id, study, up.Design)
	if err != nil {
		return err
	}
	if spec.From < 0 || spec.To > len(data.Participants) || spec.From >= spec.To {
		return permanent("block %d: participants [%d, %d) of %d", spec.Index, spec.From, spec.To, len(data.Participants))
	}
	// The studies' poller watches for a cancel or DELETE; FitBlock reports
	// no progress of its own, so the block counts at once when stored.
	runCtx, cancel := context.WithCancel(ctx)
	var poller sync.WaitGroup
	defer poller.Wait()
	defer cancel()
	var fits atomic.Int64
	var stopped atomic.Bool
	poller.Go(func() { s.pollShard(runCtx, cancel, id, spec.Index, &fits, &stopped) })
	start := time.Now()
	parts, err := c.FitBlock(runCtx, data, spec.From, spec.To, s.cfg.CompileWorkers)
	secs := time.Since(start).Seconds()
	cancel()
	poller.Wait()
	if err != nil {
		if errors.Is(err, recovery.ErrCanceled) {
			if stopped.Load() {
				s.m.shards[shardCanceled].Inc()
				return nil
			}
			return err
		}
		return permanent("block %d (participants %d-%d): %v", spec.Index, spec.From, spec.To-1, err)
	}
	blob, err := json.Marshal(fitBlock{Index: spec.Index, Seconds: secs, Parts: parts})
	if err != nil {
		return permanent("encoding block %d: %v", spec.Index, err)
	}
	h := len(study.Hypotheses)
	n, err := s.st.storeFitBlock(ctx, id, spec.Index, (spec.To-spec.From)*h, blob, s.cfg.Identity)
	if errors.Is(err, ErrNotFound) {
		return nil // deleted meanwhile
	}
	if err != nil {
		return err
	}
	s.m.fits.Add(float64((spec.To - spec.From) * h))
	s.m.shards[shardStored].Inc()
	s.m.shardSeconds.Observe(secs)
	s.log.Debug("fit block stored", "fit", id, "block", spec.Index, "seconds", secs, "stored", n, "of", rec.Shards)
	return s.maybeFitAssemble(ctx, id, rec.Shards)
}

func (s *Server) maybeFitAssemble(ctx context.Context, id string, shards int) error {
	n, err := s.st.storedShards(ctx, id)
	if err != nil {
		return err
	}
	if shards == 0 || n < shards {
		return nil
	}
	if _, err := s.queue.EnqueueContext(ctx, s.cfg.fitAssembleTask(id)); err != nil && !errors.Is(err, asynq.ErrTaskIDConflict) {
		return err
	}
	return nil
}

func (s *Server) handleFitAssemble(ctx context.Context, t *asynq.Task) error {
	id, rec, skip, err := s.liveStudy(ctx, t)
	if skip || err != nil {
		return err
	}
	study, data, up, err := s.loadFit(ctx, id)
	if err != nil {
		return err
	}
	c, err := s.compiledFit(ctx, id, study, up.Design)
	if err != nil {
		return err
	}
	blocks, err := s.st.fitResults(ctx, id)
	if err != nil {
		return err
	}
	if len(blocks) < rec.Shards {
		return fmt.Errorf("worker: fit %s: %d of %d blocks stored at assembly", id, len(blocks), rec.Shards)
	}
	var parts []recovery.ParticipantFit
	var fitSeconds float64
	for _, b := range blocks {
		parts = append(parts, b.Parts...)
		fitSeconds += b.Seconds
	}
	out, err := c.AssembleFit(data, parts, nil)
	if err != nil {
		return permanent("assembling the fit: %v", err)
	}
	workers, err := s.st.workerCount(ctx, id)
	if err != nil {
		return err
	}
	finished := time.Now()
	// As for a study's report, timing is the one part that differs from
	// `discrimen fit`: measured across the queue.
	out.Timing = recovery.CollectedFitTiming{
		GridSeconds: rec.GridSeconds, FitSeconds: fitSeconds,
		TotalSeconds: finished.Sub(rec.Created).Seconds(), Workers: workers,
	}
	files := map[string][]byte{}
	if files["fit.json"], err = out.JSON(); err != nil {
		return permanent("rendering fit.json: %v", err)
	}
	if files["fit.html"], err = pages.Fit(out); err != nil {
		return permanent("rendering fit.html: %v", err)
	}
	tables, err := out.TableFiles()
	if err != nil {
		return permanent("rendering the fit tables: %v", err)
	}
	var total int64
	for _, f := range tables {
		files[f.Name] = f.Data
	}
	for _, b := range files {
		total += int64(len(b))
	}
	if max := s.cfg.MaxReportBytes; max > 0 && total > max {
		return permanent("the fit files are %d bytes, over the cap of %d bytes per fit", total, max)
	}
	ok, err := s.st.completeFit(ctx, id, files, finished)
	if errors.Is(err, ErrNotFound) {
		return nil
	}
	if err != nil {
		return err
	}
	if !ok {
		return nil
	}
	s.m.assemblies.Inc()
	s.cache.forget(id)
	if err := s.st.finishFit(ctx, id, rec.Owner); err != nil {
		s.log.Warn("dropping fit block results", "fit", id, "err", err)
	}
	s.log.Info("fit done", "fit", id, "participants", len(parts), "seconds", out.Timing.TotalSeconds, "workers", workers)
	return nil
}
