// Package workertest gives tests a Redis to run the queue against.
//
// When DISCRIMEN_TEST_REDIS is set (a URL such as redis://127.0.0.1:6379/9)
// each test gets that server, on the URL's database number plus the
// caller's offset, flushed before the test. Packages that test in parallel
// pass different offsets so they never flush each other's data. Otherwise
// each test gets its own embedded miniredis on a loopback TCP port, which
// child processes can reach as well.
package workertest

import (
	"context"
	"encoding/json"
	"fmt"
	"net/url"
	"os"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/alicebob/miniredis/v2"
	"github.com/hibiken/asynq"
	"github.com/redis/go-redis/v9"

	"discrimen/models"
	"discrimen/recovery"
	"discrimen/worker/memredis"
)

// EnvVar names the variable that points tests at a real Redis.
const EnvVar = "DISCRIMEN_TEST_REDIS"

// Redis is a test's Redis server.
type Redis struct {
	// URL reaches the server (redis://host:port/db).
	URL string
	// Opt is the same connection for asynq and worker.Config.
	Opt asynq.RedisClientOpt
	// Mini is the embedded server, nil when the test runs against a real
	// Redis.
	Mini *miniredis.Miniredis
}

// Real reports whether the test runs against a real Redis server.
func (r *Redis) Real() bool { return r.Mini == nil }

// New returns a flushed Redis for one test; dbOffset is added to the
// database number of DISCRIMEN_TEST_REDIS.
func New(tb testing.TB, dbOffset int) *Redis {
	tb.Helper()
	raw := os.Getenv(EnvVar)
	if raw == "" {
		m := miniredis.RunT(tb)
		tb.Cleanup(memredis.FollowClock(m))
		return &Redis{URL: "redis://" + m.Addr() + "/0", Opt: asynq.RedisClientOpt{Addr: m.Addr()}, Mini: m}
	}
	u, err := url.Parse(raw)
	if err != nil || u.Scheme != "redis" {
		tb.Fatalf("workertest: %s=%q is not a redis:// URL", EnvVar, raw)
	}
	db := 0
	if p := strings.Trim(u.Path, "/"); p != "" {
		if db, err = strconv.Atoi(p); err != nil {
			tb.Fatalf("workertest: %s=%q: the path must be a database number", EnvVar, raw)
		}
	}
	db += dbOffset
	if db == 0 {
		tb.Fatalf("workertest: refusing to flush database 0; point %s at a spare database such as /9", EnvVar)
	}
	pw, _ := u.User.Password() // no password in the URL means none
	opt := asynq.RedisClientOpt{Addr: u.Host, Password: pw, DB: db}
	c := redis.NewClient(&redis.Options{Addr: u.Host, Password: pw, DB: db})
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	err = c.FlushDB(ctx).Err()
	if cerr := c.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		tb.Fatalf("workertest: flushing %s db %d: %v", u.Host, db, err)
	}
	u.Path = fmt.Sprintf("/%d", db)
	return &Redis{URL: u.String(), Opt: opt}
}

// Client returns a go-redis client of the test's server, closed at the end
// of the test.
func (r *Redis) Client(tb testing.TB) *redis.Client {
	c := redis.NewClient(&redis.Options{Addr: r.Opt.Addr, Password: r.Opt.Password, DB: r.Opt.DB})
	tb.Cleanup(func() {
		if err := c.Close(); err != nil {
			tb.Errorf("workertest: closing the test's Redis client: %v", err)
		}
	})
	return c
}

// TinyStudy is an invented berth-watch scenario small enough for any
// test: 2 hypotheses × 8 participants, 32 fits.
const TinyStudy = `{
  "name": "berth-watch tiny (invented)", "seed": 11,
  "designs": [{"name": "two-channels", "streams": 2, "cti_ms": [300, 900], "trials_per_cti": 20, "participants": 8}],
  "hypotheses": [
    {"name": "steady-lamp", "family": "constant", "params": {"level": {"min": 0.2, "max": 1.8}}},
    {"name": "rising-watch", "family": "linear", "params": {"slope": {"min": 0, "max": 2}}}
  ],
  "replication": {"group_sizes": [4, 8], "replicates": 20}
}`

// MediumStudy is an invented berth-watch scenario long enough (about 3 s on
// one core) to be seen running, canceled or interrupted: 3 hypotheses × 30
// participants, 270 fits.
const MediumStudy = `{
  "name": "berth-watch medium (invented)", "seed": 5,
  "designs": [{"name": "three-channels", "cti_ms": [300, 600, 900], "trials_per_cti": 30, "participants": 30}],
  "hypotheses": [
    {"name": "steady-lamp", "family": "constant", "params": {"level": {"min": 0.2, "max": 1.8}}},
    {"name": "rising-watch", "family": "linear", "params": {"slope": {"min": 0, "max": 2}}},
    {"name": "late-switch", "family": "logistic", "params": {"midpoint": {"min": 0.2, "max": 0.8}, "width": {"min": 0.05, "max": 0.3}}}
  ],
  "replication": {"group_sizes": [5, 10], "replicates": 20}
}`

// Expected runs the study in process, as `discrimen run` does, and returns
// its report.json without the timing block and its fits.csv: what every
// path through the queue must reproduce.
func Expected(tb testing.TB, js string) (reportJSON, fitsCSV []byte) {
	tb.Helper()
	s, err := models.LoadStudy([]byte(js))
	if err != nil {
		tb.Fatal(err)
	}
	rep, err := recovery.Run(context.Background(), s, recovery.Options{Workers: 2})
	if err != nil {
		tb.Fatal(err)
	}
	j, err := rep.JSON()
	if err != nil {
		tb.Fatal(err)
	}
	c, err := rep.FitsCSV()
	if err != nil {
		tb.Fatal(err)
	}
	return WithoutTiming(tb, j), c
}

// ExpectedTables runs the study in process and returns its tables and
// sidecars (fits.csv, fits.json, params.csv, ...), as `discrimen run`
// writes them.
func ExpectedTables(tb testing.TB, js string) []recovery.File {
	tb.Helper()
	s, err := models.LoadStudy([]byte(js))
	if err != nil {
		tb.Fatal(err)
	}
	rep, err := recovery.Run(context.Background(), s, recovery.Options{Workers: 2})
	if err != nil {
		tb.Fatal(err)
	}
	files, err := rep.TableFiles()
	if err != nil {
		tb.Fatal(err)
	}
	return files
}

// WithoutTiming re-encodes report.json with the timing block removed, the
// only part allowed to differ between runs.
func WithoutTiming(tb testing.TB, b []byte) []byte {
	tb.Helper()
	var m map[string]any
	if err := json.Unmarshal(b, &m); err != nil {
		tb.Fatalf("report.json: %v", err)
	}
	if _, ok := m["timing"]; !ok {
		tb.Fatal("report.json has no timing block")
	}
	delete(m, "timing")
	out, err := json.MarshalIndent(m, "", " ")
	if err != nil {
		tb.Fatal(err)
	}
	return out
}
