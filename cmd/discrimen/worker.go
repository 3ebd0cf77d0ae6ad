package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"net/url"
	"os"
	"os/signal"
	"strings"
	"syscall"
	"time"

	"github.com/hibiken/asynq"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"
	"github.com/prometheus/client_golang/prometheus/promhttp"

	"discrimen/api"
	"discrimen/worker"
)

func init() { extraCommands["worker"] = cmdWorker }

// Environment variables read when the matching flag is not given.
const (
	envRedisURL      = "DISCRIMEN_REDIS_URL"
	envRedisPassword = "DISCRIMEN_REDIS_PASSWORD"
	envKeys          = "DISCRIMEN_KEYS"
)

// redisFlags selects the Redis deployment: one server or Sentinel by URL,
// or a Cluster by its node addresses.
type redisFlags struct {
	url     string
	cluster string
}

func (f *redisFlags) register(fs *flag.FlagSet) {
	fs.StringVar(&f.url, "redis", os.Getenv(envRedisURL),
		"Redis `URL`: redis://[:PASSWORD@]HOST:PORT[/DB], rediss:// for TLS, redis-socket://PATH, or\n"+
			"redis-sentinel://[:PASSWORD@]HOST:PORT[,HOST:PORT...]?master=NAME (default $"+envRedisURL+")")
	fs.StringVar(&f.cluster, "redis-cluster", "",
		"Redis Cluster node `ADDRS`, comma-separated HOST:PORT (password from $"+envRedisPassword+")")
}

// option builds asynq's connection option, or nil when neither flag is set.
func (f *redisFlags) option() (asynq.RedisConnOpt, error) {
	switch {
	case f.url != "" && f.cluster != "":
		return nil, errors.New("give --redis or --redis-cluster, not both")
	case f.cluster != "":
		var addrs []string
		for _, a := range strings.Split(f.cluster, ",") {
			if a = strings.TrimSpace(a); a != "" {
				addrs = append(addrs, a)
			}
		}
		if len(addrs) == 0 {
			return nil, errors.New("--redis-cluster needs at least one HOST:PORT")
		}
		return asynq.RedisClusterClientOpt{Addrs: addrs, Password: os.Getenv(envRedisPassword)}, nil
	case f.url != "":
		opt, err := asynq.ParseRedisURI(f.url)
		if err != nil {
			return nil, fmt.Errorf("--redis %s: %v", redactURL(f.url), err)
		}
		if s, ok := opt.(asynq.RedisFailoverClientOpt); ok && s.MasterName == "" {
			return nil, errors.New("--redis redis-sentinel://... needs ?master=NAME")
		}
		return opt, nil
	}
	return nil, nil
}

// describe names the Redis for logs, without its password.
func (f *redisFlags) describe() string {
	if f.cluster != "" {
		return "cluster " + f.cluster
	}
	return redactURL(f.url)
}

func redactURL(s string) string {
	u, err := url.Parse(s)
	if err != nil {
		return "(unparsable URL)"
	}
	return u.Redacted()
}

// queueFlags are the settings the API and the workers must agree on.
type queueFlags struct {
	queue          string
	retention      time.Duration
	maxReportBytes int64
}

func (f *queueFlags) register(fs *flag.FlagSet) {
	fs.StringVar(&f.queue, "queue", "discrimen", "base `NAME` of the asynq queues: NAME.control for plans and assemblies, NAME.share0-7 for shards (owners hash into one)")
	fs.DurationVar(&f.retention, "retention", 7*24*time.Hour, "how long studies and reports are kept after their last change")
	fs.Int64Var(&f.maxReportBytes, "max-report-bytes", worker.DefaultMaxReportBytes,
		"largest report of one study in `BYTES` (report.json, report.html and fits.csv together): the api refuses at submit a study estimated over it, a worker fails a study whose real report is over it")
}

// workerFlags configure a worker process.
type workerFlags struct {
	concurrency     int
	shardFits       int
	taskRetention   time.Duration
	shutdownTimeout time.Duration
	maxRetry        int
}

func (f *workerFlags) register(fs *flag.FlagSet) {
	fs.IntVar(&f.concurrency, "concurrency", 0, "shards run at once (0 = one per core)")
	fs.IntVar(&f.shardFits, "shard-fits", worker.DefaultShardFits, "target fits per shard")
	fs.DurationVar(&f.taskRetention, "task-retention", 24*time.Hour, "how long asynq keeps finished assembly tasks (keeps their IDs unique)")
	fs.DurationVar(&f.shutdownTimeout, "shutdown-timeout", 30*time.Second, "on SIGTERM, how long running shards may finish before they go back to the queue")
	fs.IntVar(&f.maxRetry, "max-retry", 5, "retries of a failing task before its study fails")
}

// logFlags choose the log level and format.
type logFlags struct {
	level, format string
}

func (f *logFlags) register(fs *flag.FlagSet) {
	fs.StringVar(&f.level, "log-level", "info", "log `LEVEL`: debug, info, warn or error")
	fs.StringVar(&f.format, "log-format", "text", "log `FORMAT`: text or json")
}

// parseServiceFlags parses a service command's flags, refuses stray
// arguments and builds its logger. A nil logger means the command must
// exit with code.
func parseServiceFlags(name string, fs *flag.FlagSet, args []string, lf *logFlags, stderr io.Writer) (*slog.Logger, int) {
	if err := fs.Parse(args); err != nil {
		return nil, 2
	}
	if fs.NArg() > 0 {
		fmt.Fprintf(stderr, "discrimen %s: unexpected argument %q\n", name, fs.Arg(0))
		return nil, 2
	}
	log, err := lf.logger(stderr)
	if err != nil {
		fmt.Fprintf(stderr, "discrimen %s: %v\n", name, err)
		return nil, 2
	}
	return log, 0
}

func (f *logFlags) logger(w io.Writer) (*slog.Logger, error) {
	var lv slog.Level
	if err := lv.UnmarshalText([]byte(f.level)); err != nil {
		return nil, fmt.Errorf("--log-level %q: want debug, info, warn or error", f.level)
	}
	opts := &slog.HandlerOptions{Level: lv}
	switch f.format {
	case "text":
		return slog.New(slog.NewTextHandler(w, opts)), nil
	case "json":
		return slog.New(slog.NewJSONHandler(w, opts)), nil
	}
	return nil, fmt.Errorf("--log-format %q: want text or json", f.format)
}

// newRegistry is an explicit registry with the Go runtime and process
// collectors.
func newRegistry() *prometheus.Registry {
	reg := prometheus.NewRegistry()
	reg.MustRegister(collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	return reg
}

// signalContext ends on SIGINT or SIGTERM.
func signalContext() (context.Context, context.CancelFunc) {
	return signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
}

func cmdWorker(args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("worker", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var rf redisFlags
	var qf queueFlags
	var wf workerFlags
	var lf logFlags
	rf.register(fs)
	qf.register(fs)
	wf.register(fs)
	lf.register(fs)
	metricsAddr := fs.String("metrics-listen", "127.0.0.1:9091", "`ADDR` serving /metrics and /healthz (empty: none)")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: discrimen worker --redis URL [--concurrency N] [flags]\n\nRuns shards of the studies queued in a shared Redis.")
		fs.PrintDefaults()
	}
	log, code := parseServiceFlags("worker", fs, args, &lf, stderr)
	if log == nil {
		return code
	}
	opt, err := rf.option()
	if err != nil {
		fmt.Fprintln(stderr, "discrimen worker:", err)
		return 2
	}
	if opt == nil {
		fmt.Fprintf(stderr, "discrimen worker: give --redis URL (or $%s) or --redis-cluster ADDRS; use 'discrimen serve' for one machine without Redis\n", envRedisURL)
		return 2
	}
	ctx, stop := signalContext()
	defer stop()
	reg := newRegistry()
	srv, err := worker.NewServer(worker.Config{
		Redis: opt, Queue: qf.queue, Concurrency: wf.concurrency, ShardFits: wf.shardFits,
		Retention: qf.retention, TaskRetention: wf.taskRetention, MaxRetry: wf.maxRetry,
		ShutdownTimeout: wf.shutdownTimeout, MaxReportBytes: qf.maxReportBytes, Logger: log, Registerer: reg,
	})
	if err != nil {
		fmt.Fprintln(stderr, "discrimen worker:", err)
		return 1
	}
	var metrics *http.Server
	if *metricsAddr != "" {
		mux := http.NewServeMux()
		mux.Handle("GET /metrics", promhttp.HandlerFor(reg, promhttp.HandlerOpts{}))
		mux.HandleFunc("GET /healthz", func(w http.ResponseWriter, _ *http.Request) {
			_, _ = io.WriteString(w, "{\"status\": \"ok\"}\n") // a failed write means the prober left
		})
		metrics = api.NewHTTPServer(*metricsAddr, mux, log)
		ln, err := listen(*metricsAddr)
		if err != nil {
			fmt.Fprintln(stderr, "discrimen worker:", err)
			return 1
		}
		go func() {
			// The worker runs on without its metrics; the log says why
			// they stopped.
			if err := metrics.Serve(ln); !errors.Is(err, http.ErrServerClosed) {
				log.Warn("worker metrics stopped", "addr", ln.Addr().String(), "err", err)
			}
		}()
		log.Info("worker metrics", "addr", ln.Addr().String())
	}
	if err := srv.Start(); err != nil {
		fmt.Fprintln(stderr, "discrimen worker:", err)
		return 1
	}
	log.Info("worker ready", "redis", rf.describe())
	<-ctx.Done()
	log.Info("worker draining", "timeout", wf.shutdownTimeout.String())
	srv.Shutdown()
	if metrics != nil {
		sctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
		if err := metrics.Shutdown(sctx); err != nil {
			log.Warn("stopping the metrics server", "err", err)
		}
		cancel()
	}
	return 0
}
