package worker

import (
	"encoding/json"
	"fmt"

	"github.com/hibiken/asynq"

	"discrimen/recovery"
)

// The asynq task types.
const (
	// TypePlan expands a study's designs, compiles it, stores the plan and
	// enqueues one shard task per shard.
	TypePlan = "study:plan"
	// TypeShard generates and fits one block of synthetic participants of
	// one design and generator, by every candidate.
	TypeShard = "study:shard"
	// TypeAssemble aggregates every stored shard into the report.
	TypeAssemble = "study:assemble"
)

type planPayload struct {
	Study string `json:"study"`
}

type shardPayload struct {
	Study string             `json:"study"`
	Spec  recovery.ShardSpec `json:"spec"`
}

type assemblePayload struct {
	Study string `json:"study"`
}

func (c Config) planTask(id string) *asynq.Task {
	return asynq.NewTask(TypePlan, mustJSON(planPayload{Study: id}),
		asynq.TaskID(planTaskID(id)), asynq.Queue(c.controlQueue()), asynq.MaxRetry(c.MaxRetry))
}

// shardTask goes to the owner's shard queue.
func (c Config) shardTask(id, owner string, spec recovery.ShardSpec) *asynq.Task {
	return asynq.NewTask(TypeShard, mustJSON(shardPayload{Study: id, Spec: spec}),
		asynq.TaskID(shardTaskID(id, spec.Index)), asynq.Queue(c.shareQueue(owner)), asynq.MaxRetry(c.MaxRetry),
		asynq.Timeout(c.ShardTimeout))
}

// assembleTask is kept by asynq for TaskRetention after it succeeds, so a
// late duplicate enqueue (a shard retried after the study was assembled)
// conflicts on the task ID instead of assembling again.
func (c Config) assembleTask(id string) *asynq.Task {
	return asynq.NewTask(TypeAssemble, mustJSON(assemblePayload{Study: id}),
		asynq.TaskID(assembleTaskID(id)), asynq.Queue(c.controlQueue()), asynq.MaxRetry(c.MaxRetry),
		asynq.Retention(c.TaskRetention))
}

func mustJSON(v any) []byte {
	b, err := json.Marshal(v)
	if err != nil {
		panic(fmt.Sprintf("worker: encoding a task payload: %v", err))
	}
	return b
}
