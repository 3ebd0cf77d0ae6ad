// Package worker runs studies on an asynq queue backed by Redis.
//
// A study flows through three task types: study:plan compiles the study and
// splits it into shards (a block of synthetic participants of one design
// and generator, fitted by every candidate), study:shard runs one shard and
// stores its result under its index, and study:assemble builds the report
// once every shard is stored. A retried shard overwrites its own entry and
// completion is counted from the stored entries, so no shard counts twice;
// asynq task IDs make each task unique, so exactly one assembly runs. The
// report depends only on the study and its seed (recovery's seeds derive
// from design, generator and participant), never on which worker ran what.
//
// Shards go to one of ShareQueues queues by a hash of their owner, drawn
// evenly, so one key's backlog does not hold back another key's studies.
// Every Server also runs a watchdog (watchdog.go): it beats in Redis,
// enqueues the plan of a study whose submit died before doing so, and
// requeues the running shards of a worker that stopped beating, long
// before asynq's own lease recovery would.
//
// A fit of collected data (fits.go) runs on the same machinery: fit:plan
// splits the uploaded participants into blocks, fit:shard fits a block
// with recovery's FitBlock, fit:assemble builds fit.json, fit.html and the
// tables with AssembleFit and stores them in one guarded step.
//
// Client is the API's side: submit (with an idempotency key), status,
// list, cancel, report, and a key's usage for the API's quotas
// (admission.go). Server is
// a worker process. Every Redis key is built in keys.go, which documents
// the layout.
package worker
