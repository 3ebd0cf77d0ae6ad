package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"net/http"

	"github.com/alicebob/miniredis/v2"
	"github.com/hibiken/asynq"
	"github.com/prometheus/client_golang/prometheus"

	"discrimen/worker"
	"discrimen/worker/memredis"
)

func init() { extraCommands["serve"] = cmdServe }

func workerClient(opt asynq.RedisConnOpt, qf queueFlags, log *slog.Logger, reg prometheus.Registerer) (*worker.Client, error) {
	return worker.NewClient(worker.Config{Redis: opt, Queue: qf.queue, Retention: qf.retention, Logger: log, Registerer: reg})
}

// embeddedRedis starts an in-memory Redis-protocol server on a loopback
// port. miniredis counts TTLs down only when told to, so a ticker keeps it
// in step with the clock and retention works as on a real server.
func embeddedRedis() (*miniredis.Miniredis, func(), error) {
	m := miniredis.NewMiniRedis()
	if err := m.StartAddr("127.0.0.1:0"); err != nil {
		return nil, nil, err
	}
	stop := memredis.FollowClock(m)
	return m, func() { stop(); m.Close() }, nil
}

const noPersistWarning = `discrimen serve: WARNING: no --redis given, so studies run on an embedded in-memory Redis.
discrimen serve: WARNING: NOTHING PERSISTS: every study, status and report is lost when this process stops.
discrimen serve: WARNING: give --redis redis://HOST:PORT/DB to keep them.
`

func cmdServe(args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("serve", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var rf redisFlags
	var qf queueFlags
	var wf workerFlags
	var af apiFlags
	var lf logFlags
	rf.register(fs)
	qf.register(fs)
	wf.register(fs)
	af.register(fs)
	lf.register(fs)
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: discrimen serve [--redis URL] (--keys FILE | --no-auth) [--listen ADDR] [flags]\n\nServes the HTTP API and runs the studies in this process. Without --redis it uses an\nembedded in-memory Redis and nothing persists.")
		fs.PrintDefaults()
	}
	log, code := parseServiceFlags("serve", fs, args, &lf, stderr)
	if log == nil {
		return code
	}
	opt, err := rf.option()
	if err != nil {
		fmt.Fprintln(stderr, "discrimen serve:", err)
		return 2
	}
	cfg, err := af.config(log)
	if err != nil {
		fmt.Fprintln(stderr, "discrimen serve:", err)
		return 2
	}
	cfg.MaxReportBytes = qf.maxReportBytes
	if opt == nil {
		m, stopRedis, err := embeddedRedis()
		if err != nil {
			fmt.Fprintln(stderr, "discrimen serve: starting the embedded Redis:", err)
			return 1
		}
		defer stopRedis()
		fmt.Fprint(stderr, noPersistWarning)
		log.Warn("embedded in-memory Redis: nothing persists", "addr", m.Addr())
		opt = asynq.RedisClientOpt{Addr: m.Addr()}
	} else {
		log.Info("redis", "at", rf.describe())
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
		fmt.Fprintln(stderr, "discrimen serve:", err)
		return 1
	}
	client, err := workerClient(opt, qf, log, reg)
	if err != nil {
		fmt.Fprintln(stderr, "discrimen serve:", err)
		return 1
	}
	defer closeClient(client, log)
	h, err := buildAPI(cfg, client, reg)
	if err != nil {
		fmt.Fprintln(stderr, "discrimen serve:", err)
		return 1
	}
	ln, err := listen(af.listen)
	if err != nil {
		fmt.Fprintln(stderr, "discrimen serve:", err)
		return 1
	}
	if err := srv.Start(); err != nil {
		fmt.Fprintln(stderr, "discrimen serve:", err)
		return 1
	}
	// Shutdown order: stop taking requests, then drain the workers (shards
	// finish or go back to the queue), then close Redis.
	code = 0
	if err := serveHTTP(ctx, ln, h, log); err != nil && !errors.Is(err, http.ErrServerClosed) {
		fmt.Fprintln(stderr, "discrimen serve:", err)
		code = 1
	}
	log.Info("workers draining", "timeout", wf.shutdownTimeout.String())
	srv.Shutdown()
	return code
}
