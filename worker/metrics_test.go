package worker

import (
	"context"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"
	"github.com/redis/go-redis/v9"
)

// commandCount counts every Redis command sent, pipelined or not.
type commandCount struct{ n atomic.Int64 }

func (c *commandCount) DialHook(next redis.DialHook) redis.DialHook { return next }

func (c *commandCount) ProcessHook(next redis.ProcessHook) redis.ProcessHook {
	return func(ctx context.Context, cmd redis.Cmder) error {
		c.n.Add(1)
		return next(ctx, cmd)
	}
}

func (c *commandCount) ProcessPipelineHook(next redis.ProcessPipelineHook) redis.ProcessPipelineHook {
	return func(ctx context.Context, cmds []redis.Cmder) error {
		c.n.Add(int64(len(cmds)))
		return next(ctx, cmds)
	}
}

// TestMetricsSnapshot: scrapes within metricsMaxAge of a snapshot issue
// no Redis command, however many studies are kept; the first scrape after
// it reads Redis once and sees the studies submitted meanwhile.
func TestMetricsSnapshot(t *testing.T) {
	reg := prometheus.NewRegistry()
	r := newRig(t, func(c *Config) { c.Registerer = reg })
	clock := time.Now()
	r.client.now = func() time.Time { return clock }
	for range 20 {
		r.submit(t, "harbour", tinyStudy)
	}
	var count commandCount
	r.client.st.rdb.AddHook(&count)
	queued := func(n int) string {
		return "# HELP discrimen_studies Studies kept in Redis, by state (a snapshot at most 5 s old).\n# TYPE discrimen_studies gauge\n" +
			"discrimen_studies{state=\"canceled\"} 0\ndiscrimen_studies{state=\"done\"} 0\ndiscrimen_studies{state=\"failed\"} 0\n" +
			"discrimen_studies{state=\"queued\"} " + itoa(n) + "\ndiscrimen_studies{state=\"running\"} 0\n"
	}
	if err := testutil.GatherAndCompare(reg, strings.NewReader(queued(20)), "discrimen_studies"); err != nil {
		t.Fatal(err)
	}
	first := count.n.Load()
	if first == 0 {
		t.Fatal("the first scrape sent no Redis command")
	}
	r.submit(t, "harbour", tinyStudy)
	count.n.Store(0)
	for range 50 {
		if _, err := reg.Gather(); err != nil {
			t.Fatal(err)
		}
	}
	if n := count.n.Load(); n != 0 {
		t.Fatalf("50 scrapes within %v of the snapshot sent %d Redis commands, want 0", metricsMaxAge, n)
	}
	if err := testutil.GatherAndCompare(reg, strings.NewReader(queued(20)), "discrimen_studies"); err != nil {
		t.Fatalf("within the snapshot's age: %v", err)
	}
	clock = clock.Add(metricsMaxAge)
	if err := testutil.GatherAndCompare(reg, strings.NewReader(queued(21)), "discrimen_studies"); err != nil {
		t.Fatalf("after the snapshot's age: %v", err)
	}
	t.Logf("a snapshot of 20 studies and %d queues: %d Redis commands; 50 scrapes inside its age: 0", len(r.cfg.queues()), first)
}
