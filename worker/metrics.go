package worker

import (
	"context"
	"sync"
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
	// rescued counts reruns this worker's watchdog enqueued, by task type;
	// replanned the plans it enqueued for studies left unplanned.
	rescued   *prometheus.CounterVec
	replanned prometheus.Counter
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
	m.rescued = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "discrimen_rescued_tasks_total",
		Help: "Tasks of dead workers whose rerun this worker's watchdog enqueued, by task type.",
	}, []string{"type"})
	for _, typ := range []string{TypePlan, TypeShard, TypeAssemble} {
		m.rescued.WithLabelValues(typ)
	}
	m.replanned = prometheus.NewCounter(prometheus.CounterOpts{
		Name: "discrimen_replanned_studies_total",
		Help: "Studies left unplanned by their submit whose plan this worker's watchdog enqueued.",
	})
	m.shards = map[string]prometheus.Counter{}
	for _, o := range []string{shardStored, shardDuplicate, shardCanceled, shardDropped} {
		m.shards[o] = m.shardsVec.WithLabelValues(o)
	}
	return m
}

func (m *serverMetrics) register(r prometheus.Registerer) error {
	for _, c := range []prometheus.Collector{m.shardsVec, m.fits, m.shardSeconds, m.fitSeconds, m.compileSeconds, m.assemblies, m.rescued, m.replanned} {
		if err := r.Register(c); err != nil {
			return err
		}
	}
	return nil
}

// metricsMaxAge is how long a snapshot of the studies and queues serves
// scrapes before the next scrape reads Redis again.
const metricsMaxAge = 5 * time.Second

// clientCollector reports the studies by state (read from the study
// index) and the asynq queues' depth and latency (read through asynq's
// Inspector). Reading them scans every indexed study, so a snapshot serves
// every scrape for metricsMaxAge: however many scrapers there are, Redis
// sees at most one scan per metricsMaxAge, and the scrapes between issue
// no Redis command.
type clientCollector struct {
	c        *Client
	studies  *prometheus.Desc
	tasks    *prometheus.Desc
	latency  *prometheus.Desc
	upDesc   *prometheus.Desc
	timeout  time.Duration
	queueIDs []string

	mu    sync.Mutex // held while a snapshot is read, so scrapes share one read
	snap  []prometheus.Metric
	taken time.Time
}

func registerClientMetrics(r prometheus.Registerer, c *Client) error {
	return r.Register(&clientCollector{
		c: c,
		studies: prometheus.NewDesc("discrimen_studies", "Studies kept in Redis, by state (a snapshot at most 5 s old).",
			[]string{"state"}, nil),
		tasks: prometheus.NewDesc("discrimen_queue_tasks", "Tasks in an asynq queue, by task state (a snapshot at most 5 s old).",
			[]string{"queue", "state"}, nil),
		latency: prometheus.NewDesc("discrimen_queue_latency_seconds",
			"Age of the oldest pending task of an asynq queue (a snapshot at most 5 s old).", []string{"queue"}, nil),
		upDesc:   prometheus.NewDesc("discrimen_redis_up", "1 when the latest snapshot could read Redis.", nil, nil),
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
	cc.mu.Lock()
	now := cc.c.now()
	if cc.snap == nil || now.Sub(cc.taken) >= metricsMaxAge {
		cc.snap, cc.taken = cc.read(), now
	}
	snap := cc.snap
	cc.mu.Unlock()
	for _, m := range snap {
		ch <- m
	}
}

// read takes a snapshot from Redis.
func (cc *clientCollector) read() []prometheus.Metric {
	var out []prometheus.Metric
	ctx, cancel := context.WithTimeout(context.Background(), cc.timeout)
	defer cancel()
	up := 1.0
	counts, gone, err := cc.c.st.countStates(ctx)
	if err != nil {
		up = 0
		cc.c.log.Warn("metrics: counting studies by state", "err", err)
	}
	// The counts are right without the expired entries either way; a
	// failed removal is tried again at the next snapshot.
	if err := cc.c.st.unindexAll(ctx, gone); err != nil {
		cc.c.log.Warn("metrics: dropping expired studies from the index", "err", err)
	}
	for _, s := range States {
		out = append(out, prometheus.MustNewConstMetric(cc.studies, prometheus.GaugeValue, float64(counts[s]), string(s)))
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
			out = append(out, prometheus.MustNewConstMetric(cc.tasks, prometheus.GaugeValue, float64(st.n), q, st.name))
		}
		out = append(out, prometheus.MustNewConstMetric(cc.latency, prometheus.GaugeValue, info.Latency.Seconds(), q))
	}
	return append(out, prometheus.MustNewConstMetric(cc.upDesc, prometheus.GaugeValue, up))
}
