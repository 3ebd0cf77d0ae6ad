package worker

import (
	"context"
	"time"

	"github.com/hibiken/asynq"
	"github.com/prometheus/client_golang/prometheus"
)

// Outcomes of a shard task, the label values of discrimen_shards_total.
const (
	shardStored    = "stored"    // ran and stored its result
	shardDuplicate = "duplicate" // its result was already stored
	shardCanceled  = "canceled"  // stopped because its study was canceled or failed
	shardDropped   = "dropped"   // its study was final or gone before it started
)

// serverMetrics are the worker process's own metrics.
type serverMetrics struct {
	shards         map[string]prometheus.Counter
	shardsVec      *prometheus.CounterVec
	fits           prometheus.Counter
	shardSeconds   prometheus.Histogram
	fitSeconds     prometheus.Histogram
	compileSeconds prometheus.Histogram
	assemblies     prometheus.Counter
}

func newServerMetrics() *serverMetrics {
	m := &serverMetrics{
		shardsVec: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "discrimen_shards_total",
			Help: "Shard tasks handled by this worker, by outcome.",
		}, []string{"outcome"}),
		fits: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "discrimen_fits_total",
			Help: "Fits finished by this worker (including fits of shards later canceled or lost).",
		}),
		shardSeconds: prometheus.NewHistogram(prometheus.HistogramOpts{
			Name:    "discrimen_shard_duration_seconds",
			Help:    "Wall time of stored shards.",
			Buckets: prometheus.ExponentialBuckets(0.05, 2, 14), // 50 ms .. 7 min
		}),
		fitSeconds: prometheus.NewHistogram(prometheus.HistogramOpts{
			Name:    "discrimen_fit_duration_seconds",
			Help:    "Time per fit: each participant's wall time divided among its candidates' fits.",
			Buckets: prometheus.ExponentialBuckets(0.0005, 2, 14), // 0.5 ms .. 4 s
		}),
		compileSeconds: prometheus.NewHistogram(prometheus.HistogramOpts{
			Name:    "discrimen_compile_duration_seconds",
			Help:    "Wall time of building a study's prediction grids in this worker.",
			Buckets: prometheus.ExponentialBuckets(0.05, 2, 12),
		}),
		assemblies: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "discrimen_assemblies_total",
			Help: "Reports assembled and stored by this worker.",
		}),
	}
	m.shards = map[string]prometheus.Counter{}
	for _, o := range []string{shardStored, shardDuplicate, shardCanceled, shardDropped} {
		m.shards[o] = m.shardsVec.WithLabelValues(o)
	}
	return m
}

func (m *serverMetrics) register(r prometheus.Registerer) error {
	for _, c := range []prometheus.Collector{m.shardsVec, m.fits, m.shardSeconds, m.fitSeconds, m.compileSeconds, m.assemblies} {
		if err := r.Register(c); err != nil {
			return err
		}
	}
	return nil
}

// clientCollector reports, at scrape time, the studies by state (read from
// the study index) and the asynq queues' depth and latency (read through
// asynq's Inspector).
type clientCollector struct {
	c        *Client
	studies  *prometheus.Desc
	tasks    *prometheus.Desc
	latency  *prometheus.Desc
	upDesc   *prometheus.Desc
	timeout  time.Duration
	queueIDs []string
}

func registerClientMetrics(r prometheus.Registerer, c *Client) error {
	return r.Register(&clientCollector{
		c: c,
		studies: prometheus.NewDesc("discrimen_studies", "Studies kept in Redis, by state.",
			[]string{"state"}, nil),
		tasks: prometheus.NewDesc("discrimen_queue_tasks", "Tasks in an asynq queue, by task state.",
			[]string{"queue", "state"}, nil),
		latency: prometheus.NewDesc("discrimen_queue_latency_seconds",
			"Age of the oldest pending task of an asynq queue.", []string{"queue"}, nil),
		upDesc:   prometheus.NewDesc("discrimen_redis_up", "1 when the last scrape could read Redis.", nil, nil),
		timeout:  5 * time.Second,
		queueIDs: c.cfg.queues(),
	})
}

func (cc *clientCollector) Describe(ch chan<- *prometheus.Desc) {
	ch <- cc.studies
	ch <- cc.tasks
	ch <- cc.latency
	ch <- cc.upDesc
}

func (cc *clientCollector) Collect(ch chan<- prometheus.Metric) {
	ctx, cancel := context.WithTimeout(context.Background(), cc.timeout)
	defer cancel()
	up := 1.0
	counts, gone, err := cc.c.st.countStates(ctx)
	if err != nil {
		up = 0
		cc.c.log.Warn("metrics: counting studies by state", "err", err)
	}
	// The counts are right without the expired entries either way; a
	// failed removal is tried again at the next scrape.
	if err := cc.c.st.unindexAll(ctx, gone); err != nil {
		cc.c.log.Warn("metrics: dropping expired studies from the index", "err", err)
	}
	for _, s := range States {
		ch <- prometheus.MustNewConstMetric(cc.studies, prometheus.GaugeValue, float64(counts[s]), string(s))
	}
	for _, q := range cc.queueIDs {
		info, err := queueInfo(cc.c.inspector, q)
		if err != nil {
			up = 0
			cc.c.log.Warn("metrics: reading a queue", "queue", q, "err", err)
			info = &asynq.QueueInfo{}
		}
		for _, st := range []struct {
			name string
			n    int
		}{{"pending", info.Pending}, {"active", info.Active}, {"scheduled", info.Scheduled},
			{"retry", info.Retry}, {"archived", info.Archived}, {"completed", info.Completed}} {
			ch <- prometheus.MustNewConstMetric(cc.tasks, prometheus.GaugeValue, float64(st.n), q, st.name)
		}
		ch <- prometheus.MustNewConstMetric(cc.latency, prometheus.GaugeValue, info.Latency.Seconds(), q)
	}
	ch <- prometheus.MustNewConstMetric(cc.upDesc, prometheus.GaugeValue, up)
}
