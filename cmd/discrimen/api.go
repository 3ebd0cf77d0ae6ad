package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/http"
	"os"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"golang.org/x/time/rate"

	"discrimen/api"
	"discrimen/models"
	"discrimen/worker"
)

func init() { extraCommands["api"] = cmdAPI }

// apiFlags configure the HTTP half.
type apiFlags struct {
	listen  string
	keys    string
	noAuth  bool
	rate    float64
	burst   int
	maxBody int64
	maxFits int

	maxStudiesInFlight int
	maxFitsInFlight    int
	maxStoredBytes     int64
	requestTimeout     time.Duration
}

func (f *apiFlags) register(fs *flag.FlagSet) {
	fs.StringVar(&f.listen, "listen", "127.0.0.1:8080", "HTTP listen `ADDR`")
	fs.StringVar(&f.keys, "keys", os.Getenv(envKeys), "API keys `FILE` of NAME SHA256-HEX lines, made by 'discrimen key add' (default $"+envKeys+")")
	fs.BoolVar(&f.noAuth, "no-auth", false, "serve without keys, every study owned by \"local\" (single user on a laptop only)")
	fs.Float64Var(&f.rate, "rate", api.DefaultRate, "requests per second allowed per key")
	fs.IntVar(&f.burst, "burst", api.DefaultBurst, "requests a key may send at once above the rate")
	fs.Int64Var(&f.maxBody, "max-body", api.DefaultMaxBodyBytes, "largest request body in `BYTES`")
	fs.IntVar(&f.maxFits, "max-fits", api.DefaultMaxFits, fmt.Sprintf("largest compute budget of one study, in fits (at most %d)", models.MaxFits))
	fs.IntVar(&f.maxStudiesInFlight, "max-studies-in-flight", api.DefaultMaxStudiesInFlight, "studies one key may have queued or running at once")
	fs.IntVar(&f.maxFitsInFlight, "max-fits-in-flight", api.DefaultMaxFitsInFlight, "fits of the studies one key may have queued or running at once")
	fs.Int64Var(&f.maxStoredBytes, "max-stored-bytes", api.DefaultMaxStoredBytes, "`BYTES` one key's studies may keep in Redis (study files and reports; a study in flight counts at its report estimate)")
	fs.DurationVar(&f.requestTimeout, "request-timeout", api.DefaultRequestTimeout, "longest handling of one request; Redis calls still waiting then answer 503")
}

// config checks the flags and loads the keys.
func (f *apiFlags) config(log *slog.Logger) (api.Config, error) {
	cfg := api.Config{NoAuth: f.noAuth, Rate: rate.Limit(f.rate), Burst: f.burst, MaxBodyBytes: f.maxBody, MaxFits: f.maxFits,
		MaxStudiesInFlight: f.maxStudiesInFlight, MaxFitsInFlight: f.maxFitsInFlight, MaxStoredBytes: f.maxStoredBytes,
		RequestTimeout: f.requestTimeout, Logger: log}
	switch {
	case f.noAuth && f.keys != "":
		return cfg, errors.New("give --keys FILE or --no-auth, not both")
	case f.noAuth:
		if !api.IsLoopback(f.listen) {
			log.Warn("--no-auth on a non-loopback address: anyone who can reach " + f.listen + " can submit, read and cancel every study")
		}
	case f.keys == "":
		return cfg, fmt.Errorf("give --keys FILE (or $%s), made with 'discrimen key add NAME --keys FILE'; or --no-auth for a single user on this machine", envKeys)
	default:
		ring, err := api.LoadKeys(f.keys)
		if err != nil {
			return cfg, fmt.Errorf("--keys: %v", err)
		}
		if ring.Len() == 0 {
			log.Warn("the keys file holds no key yet; every /v1/studies request gets 401 until 'discrimen key add' adds one", "keys", f.keys)
		}
		cfg.Keys = ring
	}
	if f.rate <= 0 || f.burst < 1 || f.maxBody < 1 || f.maxFits < 1 {
		return cfg, errors.New("--rate, --burst, --max-body and --max-fits must be positive")
	}
	if f.maxStudiesInFlight < 1 || f.maxFitsInFlight < 1 || f.maxStoredBytes < 1 || f.requestTimeout <= 0 {
		return cfg, errors.New("--max-studies-in-flight, --max-fits-in-flight, --max-stored-bytes and --request-timeout must be positive")
	}
	if f.maxFits > models.MaxFits {
		return cfg, fmt.Errorf("--max-fits %d is over the study file's own limit of %d", f.maxFits, models.MaxFits)
	}
	return cfg, nil
}

func listen(addr string) (net.Listener, error) {
	ln, err := net.Listen("tcp", addr)
	if err != nil {
		return nil, fmt.Errorf("listen on %s: %w", addr, err)
	}
	return ln, nil
}

// serveHTTP runs the API until ctx ends, then lets requests in flight
// finish for up to 10 s. It returns the listen or serve error, if any.
func serveHTTP(ctx context.Context, ln net.Listener, h http.Handler, log *slog.Logger) error {
	srv := api.NewHTTPServer(ln.Addr().String(), h, log)
	errc := make(chan error, 1)
	go func() { errc <- srv.Serve(ln) }()
	log.Info("api listening", "addr", "http://"+ln.Addr().String())
	select {
	case err := <-errc:
		return err
	case <-ctx.Done():
	}
	sctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	err := srv.Shutdown(sctx)
	log.Info("api stopped")
	return err
}

// closeClient closes the API's queue client as the command exits.
func closeClient(c *worker.Client, log *slog.Logger) {
	if err := c.Close(); err != nil {
		log.Warn("closing the Redis client", "err", err)
	}
}

// buildAPI wires the API to a registry that also carries the queue's
// metrics.
func buildAPI(cfg api.Config, backend api.Backend, reg *prometheus.Registry) (*api.Server, error) {
	cfg.Backend, cfg.Registerer, cfg.Gatherer = backend, reg, reg
	return api.New(cfg)
}

func cmdAPI(args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("api", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var rf redisFlags
	var qf queueFlags
	var af apiFlags
	var lf logFlags
	rf.register(fs)
	qf.register(fs)
	af.register(fs)
	lf.register(fs)
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: discrimen api --redis URL --keys FILE [--listen ADDR] [flags]\n\nServes the HTTP API; 'discrimen worker' processes run the studies.")
		fs.PrintDefaults()
	}
	log, code := parseServiceFlags("api", fs, args, &lf, stderr)
	if log == nil {
		return code
	}
	opt, err := rf.option()
	if err == nil && opt == nil {
		err = fmt.Errorf("give --redis URL (or $%s) or --redis-cluster ADDRS; use 'discrimen serve' for one machine without Redis", envRedisURL)
	}
	if err != nil {
		fmt.Fprintln(stderr, "discrimen api:", err)
		return 2
	}
	cfg, err := af.config(log)
	if err != nil {
		fmt.Fprintln(stderr, "discrimen api:", err)
		return 2
	}
	cfg.MaxReportBytes = qf.maxReportBytes
	ctx, stop := signalContext()
	defer stop()
	reg := newRegistry()
	client, err := workerClient(opt, qf, log, reg)
	if err != nil {
		fmt.Fprintln(stderr, "discrimen api:", err)
		return 1
	}
	defer closeClient(client, log)
	h, err := buildAPI(cfg, client, reg)
	if err != nil {
		fmt.Fprintln(stderr, "discrimen api:", err)
		return 1
	}
	ln, err := listen(af.listen)
	if err != nil {
		fmt.Fprintln(stderr, "discrimen api:", err)
		return 1
	}
	log.Info("api ready", "redis", rf.describe(), "auth", !af.noAuth)
	if err := serveHTTP(ctx, ln, h, log); err != nil && !errors.Is(err, http.ErrServerClosed) {
		fmt.Fprintln(stderr, "discrimen api:", err)
		return 1
	}
	return 0
}
