package api

import (
	"context"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/http"
	"strconv"
	"strings"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promhttp"
	"golang.org/x/time/rate"

	"discrimen/models"
	"discrimen/worker"
)

// Backend is what the API needs of the queue; *worker.Client is one.
type Backend interface {
	SubmitOnce(ctx context.Context, owner, key string, input []byte, s *models.Study, estimate int64, admit func(context.Context) error) (worker.Status, bool, error)
	Usage(ctx context.Context, owner string) (worker.Usage, error)
	Status(ctx context.Context, owner, id string) (worker.Status, error)
	List(ctx context.Context, owner, cursor string, limit int) ([]worker.Status, string, error)
	Cancel(ctx context.Context, owner, id string) (worker.Status, error)
	Report(ctx context.Context, owner, id string, k worker.ReportKind) ([]byte, error)
	Ping(ctx context.Context) error
}

// Config configures the API. A zero field means the default named beside it.
type Config struct {
	// Backend runs the studies. Required.
	Backend Backend
	// Keys checks bearer keys. Required unless NoAuth. New points the ring's
	// warnings (an edit of the keys file that does not load) at Logger.
	Keys *KeyRing
	// NoAuth serves every request as the one owner LocalOwner, for a
	// single user on a laptop.
	NoAuth bool
	// Rate and Burst set each key's token bucket (default 10 requests per
	// second, burst 40).
	Rate  rate.Limit
	Burst int
	// MaxBodyBytes caps a request body (default 1 MiB).
	MaxBodyBytes int64
	// MaxFits caps a study's compute budget, its total fits (default
	// 1,000,000; at most models.MaxFits).
	MaxFits int
	// MaxReportBytes caps a study's report files, estimated at submit by
	// worker.EstimateReportBytes (default worker.DefaultMaxReportBytes).
	MaxReportBytes int64
	// Per-key quotas, checked at submit: studies queued or running
	// (default 10), their fits (default 2,000,000) and the bytes the key's
	// studies store, a study in flight counted at its report estimate
	// (default 2 GiB).
	MaxStudiesInFlight int
	MaxFitsInFlight    int
	MaxStoredBytes     int64
	// RequestTimeout bounds the handling of one request: the context of
	// every Redis call ends then (default 15 s).
	RequestTimeout time.Duration
	// Logger receives one line per request (default: discard).
	Logger *slog.Logger
	// Registerer receives the HTTP metrics; Gatherer is served on /metrics
	// (default: a new registry for both).
	Registerer prometheus.Registerer
	Gatherer   prometheus.Gatherer
}

// LocalOwner owns every study when the API runs without keys.
const LocalOwner = "local"

// Defaults of Config.
const (
	DefaultRate         = 10
	DefaultBurst        = 40
	DefaultMaxBodyBytes = 1 << 20
	DefaultMaxFits      = 1_000_000

	DefaultMaxStudiesInFlight = 10
	DefaultMaxFitsInFlight    = 2 * DefaultMaxFits
	DefaultMaxStoredBytes     = 2 << 30
	DefaultRequestTimeout     = 15 * time.Second
)

// Server is the HTTP API.
type Server struct {
	cfg     Config
	mux     *http.ServeMux
	limits  *limiters
	log     *slog.Logger
	seconds *prometheus.HistogramVec
	openapi []byte
}

// route is one operation; the OpenAPI test checks this table against the
// document.
type route struct {
	method, pattern string
	auth            bool
	h               http.HandlerFunc
}

func (s *Server) routes() []route {
	return []route{
		{"POST", "/v1/studies", true, s.submit},
		{"GET", "/v1/studies", true, s.list},
		{"GET", "/v1/studies/{id}", true, s.status},
		{"DELETE", "/v1/studies/{id}", true, s.cancel},
		{"GET", "/v1/studies/{id}/report", true, s.report},
		{"GET", "/v1/studies/{id}/report.html", true, s.reportHTML},
		{"GET", "/v1/studies/{id}/fits.csv", true, s.file(worker.FitsCSV)},
		{"GET", "/v1/studies/{id}/fits.json", true, s.file(worker.FitsSidecar)},
		{"GET", "/v1/studies/{id}/params.csv", true, s.file(worker.ParamsCSV)},
		{"GET", "/v1/studies/{id}/params.json", true, s.file(worker.ParamsSidecar)},
		{"GET", "/v1/studies/{id}/measurement.csv", true, s.file(worker.MeasurementCSV)},
		{"GET", "/v1/studies/{id}/measurement.json", true, s.file(worker.MeasurementSidecar)},
		{"GET", "/v1/openapi.json", false, s.serveOpenAPI},
		{"GET", "/healthz", false, s.healthz},
		{"GET", "/readyz", false, s.readyz},
		{"GET", "/metrics", false, nil}, // set in New
	}
}

// New builds the API handler.
func New(cfg Config) (*Server, error) {
	if cfg.Backend == nil {
		return nil, fmt.Errorf("api: Config.Backend is required")
	}
	if cfg.Keys == nil && !cfg.NoAuth {
		return nil, fmt.Errorf("api: a keys file is required unless NoAuth is set")
	}
	if cfg.Rate <= 0 {
		cfg.Rate = DefaultRate
	}
	if cfg.Burst <= 0 {
		cfg.Burst = DefaultBurst
	}
	if cfg.MaxBodyBytes <= 0 {
		cfg.MaxBodyBytes = DefaultMaxBodyBytes
	}
	if cfg.MaxFits <= 0 {
		cfg.MaxFits = DefaultMaxFits
	}
	if cfg.MaxReportBytes <= 0 {
		cfg.MaxReportBytes = worker.DefaultMaxReportBytes
	}
	if cfg.MaxStudiesInFlight <= 0 {
		cfg.MaxStudiesInFlight = DefaultMaxStudiesInFlight
	}
	if cfg.MaxFitsInFlight <= 0 {
		cfg.MaxFitsInFlight = DefaultMaxFitsInFlight
	}
	if cfg.MaxStoredBytes <= 0 {
		cfg.MaxStoredBytes = DefaultMaxStoredBytes
	}
	if cfg.RequestTimeout <= 0 {
		cfg.RequestTimeout = DefaultRequestTimeout
	}
	if cfg.MaxFits > models.MaxFits {
		return nil, fmt.Errorf("api: MaxFits %d is over the study file's own limit of %d", cfg.MaxFits, models.MaxFits)
	}
	if cfg.Logger == nil {
		cfg.Logger = slog.New(slog.NewTextHandler(io.Discard, nil))
	}
	if cfg.Registerer == nil && cfg.Gatherer == nil {
		reg := prometheus.NewRegistry()
		cfg.Registerer, cfg.Gatherer = reg, reg
	}
	if cfg.Registerer == nil || cfg.Gatherer == nil {
		return nil, fmt.Errorf("api: set both Registerer and Gatherer, or neither")
	}
	if cfg.Keys != nil {
		cfg.Keys.setLogger(cfg.Logger)
	}
	doc, err := OpenAPIDocument()
	if err != nil {
		return nil, err
	}
	s := &Server{
		cfg: cfg, mux: http.NewServeMux(), limits: newLimiters(cfg.Rate, cfg.Burst), log: cfg.Logger, openapi: doc,
		seconds: prometheus.NewHistogramVec(prometheus.HistogramOpts{
			Name:    "discrimen_http_request_duration_seconds",
			Help:    "HTTP request durations by route pattern and status code.",
			Buckets: prometheus.ExponentialBuckets(0.001, 2, 14), // 1 ms .. 8 s
		}, []string{"route", "code"}),
	}
	if err := cfg.Registerer.Register(s.seconds); err != nil {
		return nil, err
	}
	metrics := promhttp.HandlerFor(cfg.Gatherer, promhttp.HandlerOpts{ErrorLog: slog.NewLogLogger(cfg.Logger.Handler(), slog.LevelWarn)})
	allowed := map[string][]string{}
	var paths []string
	for _, rt := range s.routes() {
		h := rt.h
		if rt.pattern == "/metrics" {
			h = metrics.ServeHTTP
		}
		if rt.auth {
			h = s.authenticate(h)
		}
		s.mux.Handle(rt.method+" "+rt.pattern, s.observe(rt.method+" "+rt.pattern, h))
		if allowed[rt.pattern] == nil {
			paths = append(paths, rt.pattern)
		}
		allowed[rt.pattern] = append(allowed[rt.pattern], rt.method)
		// Made now, unused, so the count of 200s of every route exists from
		// the first scrape.
		_ = s.seconds.WithLabelValues(rt.method+" "+rt.pattern, "200")
	}
	for _, p := range paths {
		methods := strings.Join(allowed[p], ", ")
		s.mux.Handle(p, s.observe("unmatched", func(w http.ResponseWriter, r *http.Request) {
			w.Header().Set("Allow", methods)
			writeError(w, newError(http.StatusMethodNotAllowed, codeMethodNotAllowed, r.Method+" is not allowed here; use "+methods))
		}))
	}
	s.mux.Handle("/", s.observe("unmatched", func(w http.ResponseWriter, r *http.Request) {
		writeError(w, newError(http.StatusNotFound, codeNotFound, "no such endpoint; see /v1/openapi.json"))
	}))
	return s, nil
}

// ServeHTTP serves the API. Each request's context ends after
// RequestTimeout, which ends its Redis calls (answered 503); the work
// between them is bounded by the study file's caps. A context deadline,
// not http.TimeoutHandler, so that a report is written as it is read
// rather than buffered whole.
func (s *Server) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	w.Header().Set("X-Content-Type-Options", "nosniff")
	ctx, cancel := context.WithTimeout(r.Context(), s.cfg.RequestTimeout)
	defer cancel()
	s.mux.ServeHTTP(w, r.WithContext(ctx))
}

// NewHTTPServer wraps a handler in an http.Server with timeouts that bound
// slow clients: 5 s to send headers, 30 s for the whole request, 60 s to
// write the response, 2 min idle (common practice for an API behind no
// proxy).
func NewHTTPServer(addr string, h http.Handler, log *slog.Logger) *http.Server {
	return &http.Server{
		Addr:              addr,
		Handler:           h,
		ReadHeaderTimeout: 5 * time.Second,
		ReadTimeout:       30 * time.Second,
		WriteTimeout:      60 * time.Second,
		IdleTimeout:       2 * time.Minute,
		MaxHeaderBytes:    64 << 10,
		ErrorLog:          slog.NewLogLogger(log.Handler(), slog.LevelWarn),
	}
}

// IsLoopback reports whether a listen address binds only the loopback
// interface.
func IsLoopback(addr string) bool {
	host, _, err := net.SplitHostPort(addr)
	if err != nil {
		host = addr
	}
	if host == "localhost" {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}

type ownerKeyType struct{}

func owner(r *http.Request) string {
	o, _ := r.Context().Value(ownerKeyType{}).(string)
	return o
}

// recorder remembers the status code for logs and metrics.
type recorder struct {
	http.ResponseWriter
	code  int
	owner string
}

func (r *recorder) WriteHeader(code int) {
	if r.code == 0 {
		r.code = code
	}
	r.ResponseWriter.WriteHeader(code)
}

func (r *recorder) Write(b []byte) (int, error) {
	if r.code == 0 {
		r.code = http.StatusOK
	}
	return r.ResponseWriter.Write(b)
}

// observe times a request and logs it. The log line names the key's owner,
// never the key.
func (s *Server) observe(route string, h http.HandlerFunc) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		start := time.Now()
		rec := &recorder{ResponseWriter: w}
		h(rec, r)
		if rec.code == 0 {
			rec.code = http.StatusOK
		}
		d := time.Since(start)
		s.seconds.WithLabelValues(route, strconv.Itoa(rec.code)).Observe(d.Seconds())
		level := slog.LevelInfo
		if rec.code >= 500 {
			level = slog.LevelError
		}
		s.log.Log(r.Context(), level, "request", "method", r.Method, "route", route, "path", r.URL.Path,
			"status", rec.code, "ms", float64(d.Microseconds())/1000, "owner", rec.owner, "remote", r.RemoteAddr)
	})
}

// authenticate resolves the bearer key to its owner, then applies the
// owner's rate limit.
func (s *Server) authenticate(h http.HandlerFunc) http.HandlerFunc {
	return func(w http.ResponseWriter, r *http.Request) {
		name := LocalOwner
		if !s.cfg.NoAuth {
			key, ok := bearer(r)
			if ok {
				name, ok = s.cfg.Keys.Lookup(key)
			}
			if !ok {
				w.Header().Set("WWW-Authenticate", `Bearer realm="discrimen"`)
				writeError(w, newError(http.StatusUnauthorized, codeUnauthorized, "send a valid API key as 'Authorization: Bearer KEY'"))
				return
			}
		}
		if rec, ok := w.(*recorder); ok {
			rec.owner = name
		}
		if ok, after := s.limits.allow(name); !ok {
			w.Header().Set("Retry-After", strconv.Itoa(after))
			writeError(w, newError(http.StatusTooManyRequests, codeRateLimited,
				fmt.Sprintf("over the rate of %g requests per second (burst %d) for this key; retry after %d s", float64(s.cfg.Rate), s.cfg.Burst, after)))
			return
		}
		h(w, r.WithContext(context.WithValue(r.Context(), ownerKeyType{}, name)))
	}
}

func bearer(r *http.Request) (string, bool) {
	v := r.Header.Get("Authorization")
	scheme, key, ok := strings.Cut(v, " ")
	if !ok || !strings.EqualFold(scheme, "Bearer") {
		return "", false
	}
	key = strings.TrimSpace(key)
	return key, key != ""
}

func itoa(n int) string { return strconv.Itoa(n) }
