package worker

// The Redis key layout. Every key the service writes is built in this file.
//
// All keys start with the prefix "discrimen:" followed by a hash tag in
// braces. A study's keys share the tag {<study id>}, so Redis Cluster puts
// them in one slot and the multi-key transactions and scripts below (which
// only ever touch one study) stay legal there. The index, unplanned and
// worker keys carry their own tags; they are never written in the same
// transaction as a study's keys.
//
// A submit writes, in this order, the unplanned entry, the study (record
// and input in one transaction), the two index entries, then the plan
// task. An api that dies anywhere in between leaves an unplanned entry:
// each worker's watchdog (watchdog.go) enqueues the plan again for an entry
// older than Config.ReplanAfter whose study exists (and puts it back in
// the indexes), and drops an entry whose study was never stored. So no
// stored study stays queued without a plan. The unplanned set has no
// expiry: the watchdog removes every entry.
//
// asynq keeps its own keys under "asynq:{<queue>}:..."; those are asynq's
// layout, not ours, and are only touched through asynq's client and
// inspector.
//
//	key                               Redis type  contents
//	discrimen:{ID}:study              hash        the study's record (fields below)
//	discrimen:{ID}:input              string      the study file exactly as submitted
//	discrimen:{ID}:results            hash        shard index → gob-encoded recovery.ShardResult
//	discrimen:{ID}:done               hash        shard index → fits in that shard (completion is HLEN/sum of this)
//	discrimen:{ID}:partial            hash        shard index → fits finished so far by a running shard (refreshed by its poller)
//	discrimen:{ID}:runs               hash        shard index → times a worker started the shard
//	discrimen:{ID}:workers            set         identities of the worker processes that stored shards
//	discrimen:{ID}:lost               hash        shard index → time its worker was found dead (until the rerun starts)
//	discrimen:{ID}:report.json        string      report.json bytes
//	discrimen:{ID}:report.html        string      report.html bytes
//	discrimen:{ID}:fits.csv           string      fits.csv bytes (likewise fits.json, params.csv,
//	                                              params.json, measurement.csv, measurement.json)
//	discrimen:{ID}:upload             hash        a fit job's uploaded data (fits.go): design, columns,
//	                                              trials_name, trials, and eeg_name, eeg when sent;
//	                                              deleted with every other key of the fit by DeleteFit
//	discrimen:{ID}:fit.json           string      a fit job's fit.json bytes (likewise fit.html,
//	                                              fit_candidates.csv/.json, fit_params.csv/.json,
//	                                              fit_checks.csv/.json, fit_group.csv/.json)
//	discrimen:{owner:NAME}:studies    sorted set  the study ids of one API key, all score 0 (ids sort by time)
//	discrimen:{index}:studies         sorted set  every study id, all score 0, for metrics
//	discrimen:{owner:NAME}:idem:HASH  string      an Idempotency-Key of the owner (HASH: hex SHA-256 of the key):
//	                                              "pending FP" while its request runs (1 min at most),
//	                                              then "study FP ID" for the retention; FP is the hex
//	                                              SHA-256 of the study file (admission.go)
//	discrimen:{plans}:unplanned       sorted set  study id → submission time (Unix ms): written before the study, removed once its plan is stored
//	discrimen:{workers}:beats         hash        worker identity → time of its watchdog's last beat
//	discrimen:{workers}:running       hash        "TYPE:ID:index@identity" → JSON of a task running now (watchdog.go's runningTask; index -1 for a plan or assembly)
//
// Fields of discrimen:{ID}:study, decoded into a studyRecord by
// decodeRecord (record.go). The first five are written when the study is
// submitted and are required; the others are absent until their step
// happens. Counts are decimal whole numbers ≥ 0, times decimal Unix
// nanoseconds; a field that does not parse is an error naming it.
//
//	owner        required  API key name that submitted the study
//	name         required  the study's name
//	status       required  queued | running | done | failed | canceled
//	created      required  submission time
//	total        required  fits the study runs (models.Study.TotalFits)
//	started      optional  time the plan finished (shards enqueued)
//	finished     optional  time the study reached a final status
//	error        optional  the failure message of a failed study
//	shards       optional  number of shards in the plan (absent until planned)
//	shard_size   optional  participants per shard (absent until planned)
//	grid_seconds optional  wall time of the first compile, seconds (strconv 'g' format)
//	last_shard   optional  time the latest shard was stored
//	assemblies   optional  times an assembly stored a report (1 for a finished study)
//	report_estimate optional  EstimateReportBytes of the study, written just after submission
//	kind         optional  absent for a study; "fit" for a fit job of collected data (fits.go),
//	                       whose results hash holds JSON blocks of participants (not gob)
//	                       and whose total counts participants × hypotheses
//
// The values of the done, partial and runs hashes are counts as above,
// their fields shard indexes; the lost hash's values are times as above.
//
// Every task handler adds its running entry before it runs and removes it
// when it returns; a worker killed mid-task leaves it behind, and the
// watchdog of a live worker (watchdog.go) that sees the entry's worker
// stopped beating claims it (HDEL) and requeues the task (a shard is
// marked lost first).
// The beats hash expires an hour after the last beat of any worker; the
// running hash has no expiry (a live entry must stay), and the watchdog
// empties it of dead workers' entries.
//
// Every study key expires after the configured retention; a running study's
// keys are refreshed each time a shard is stored, and the partial hash each
// time a running shard reports progress. The index keys expire after twice
// the retention, refreshed when a study is submitted or finishes; index
// entries whose study has expired are removed when they are next read.
//
// Every Redis call on these keys is a method of store (store.go).

import (
	"crypto/sha256"
	"encoding/hex"
)

const keyPrefix = "discrimen:"

func studyKey(id string) string   { return keyPrefix + "{" + id + "}:study" }
func inputKey(id string) string   { return keyPrefix + "{" + id + "}:input" }
func resultsKey(id string) string { return keyPrefix + "{" + id + "}:results" }
func doneKey(id string) string    { return keyPrefix + "{" + id + "}:done" }
func partialKey(id string) string { return keyPrefix + "{" + id + "}:partial" }
func runsKey(id string) string    { return keyPrefix + "{" + id + "}:runs" }
func workersKey(id string) string { return keyPrefix + "{" + id + "}:workers" }
func lostKey(id string) string    { return keyPrefix + "{" + id + "}:lost" }

// reportKey holds one rendered report file of a study.
func reportKey(id string, k ReportKind) string {
	return keyPrefix + "{" + id + "}:" + k.fileName()
}

// studyKeys lists every key of a study, for expiry and deletion.
func studyKeys(id string) []string {
	keys := []string{
		studyKey(id), inputKey(id), resultsKey(id), doneKey(id), partialKey(id), runsKey(id),
		workersKey(id), lostKey(id),
	}
	for _, k := range ReportKinds {
		keys = append(keys, reportKey(id, k))
	}
	return keys
}

func ownerKey(owner string) string { return keyPrefix + "{owner:" + owner + "}:studies" }

const indexKey = keyPrefix + "{index}:studies"

// idempotencyKey holds one Idempotency-Key of owner. The key is hashed so
// any bytes the client sends make a short, safe Redis key.
func idempotencyKey(owner, key string) string {
	sum := sha256.Sum256([]byte(key))
	return keyPrefix + "{owner:" + owner + "}:idem:" + hex.EncodeToString(sum[:])
}

const unplannedKey = keyPrefix + "{plans}:unplanned"

const (
	beatsKey   = keyPrefix + "{workers}:beats"
	runningKey = keyPrefix + "{workers}:running"
)

// A fit job (fits.go) is a record of kind "fit" with the study's keys
// (input, results, done, partial, runs, workers, lost), its upload and its
// fit files; it sits in the owner's and the global index like a study, so
// it counts toward the owner's quotas. Its task IDs are fitplan:ID,
// fitshard:ID:N and fitassemble:ID.
//
// Task IDs: asynq refuses a second task with the same ID while the first is
// kept, which makes each plan, shard and assembly unique per study.
func planTaskID(id string) string             { return "plan:" + id }
func shardTaskID(id string, index int) string { return "shard:" + id + ":" + itoa(index) }
func assembleTaskID(id string) string         { return "assemble:" + id }
