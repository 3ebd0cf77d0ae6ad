package worker

import (
	"context"
	"encoding/json"
	"testing"
	"time"
)

// overhead runs a study through the queue on one worker slot and returns
// the queue's cost per shard and as a fraction of compute:
//
//	overhead = (last shard stored − plan finished − compile − Σ shard seconds) / shards
//
// With one slot the shards run back to back and the worker compiles the
// study once, so everything else between them (dequeue, record reads, gob
// encoding, storing, counting, acknowledging) is queue overhead.
func overhead(tb testing.TB, shardFits int, js string) (perShard time.Duration, fraction float64, shards int) {
	tb.Helper()
	r := newRig(tb, func(c *Config) { c.ShardFits = shardFits; c.Concurrency = 1 })
	srv := r.server(tb, nil)
	defer srv.Shutdown()
	st := r.submit(tb, "bench", js)
	st = r.wait(tb, "bench", st.ID, 5*time.Minute, final)
	if st.State != Done {
		tb.Fatalf("study ended %s: %s", st.State, st.Error)
	}
	rec, err := r.client.st.record(context.Background(), st.ID)
	if err != nil {
		tb.Fatal(err)
	}
	b, err := r.client.Report(context.Background(), "bench", st.ID, ReportJSON)
	if err != nil {
		tb.Fatal(err)
	}
	var rep struct {
		Timing struct {
			ShardSeconds float64 `json:"shard_seconds"`
		} `json:"timing"`
	}
	if err := json.Unmarshal(b, &rep); err != nil {
		tb.Fatal(err)
	}
	if rec.LastShard.IsZero() || rec.Started.IsZero() || rec.GridSeconds <= 0 {
		tb.Fatalf("done study's record lacks a time: last_shard %v, started %v, grid_seconds %v", rec.LastShard, rec.Started, rec.GridSeconds)
	}
	span := rec.LastShard.Sub(rec.Started).Seconds()
	over := span - rec.GridSeconds - rep.Timing.ShardSeconds
	return time.Duration(over / float64(st.Shards) * float64(time.Second)), over / rep.Timing.ShardSeconds, st.Shards
}

// TestShardOverhead: at the default shard size the queue costs under 5% of
// compute. One participant per shard measures the cost of a shard.
func TestShardOverhead(t *testing.T) {
	if testing.Short() {
		t.Skip("times two studies")
	}
	per, small, n := overhead(t, 3, mediumStudy)
	t.Logf("one participant per shard: %d shards, overhead %.2f ms per shard, %.1f%% of compute", n, per.Seconds()*1000, 100*small)
	per, frac, n := overhead(t, DefaultShardFits, mediumStudy)
	t.Logf("default %d fits per shard: %d shards, overhead %.2f ms per shard, %.2f%% of compute", DefaultShardFits, n, per.Seconds()*1000, 100*frac)
	if frac >= 0.05 {
		t.Fatalf("queue overhead at the default shard size is %.1f%% of compute, want under 5%%", 100*frac)
	}
}

// BenchmarkShardOverhead reports the queue's cost at the default shard size.
func BenchmarkShardOverhead(b *testing.B) {
	var per time.Duration
	var frac float64
	for b.Loop() {
		per, frac, _ = overhead(b, DefaultShardFits, mediumStudy)
	}
	b.ReportMetric(per.Seconds()*1000, "overhead-ms/shard")
	b.ReportMetric(100*frac, "overhead-%")
}
