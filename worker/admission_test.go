package worker

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"net"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"github.com/redis/go-redis/v9"

	"discrimen/pages"
	"discrimen/recovery"
)

// TestEstimateReportBytes: the estimate is above the real size of the
// report files (report.json, report.html, the tables and sidecars), and not by more than 2.5 times, on studies of several
// shapes (one with names at the 100-character cap).
func TestEstimateReportBytes(t *testing.T) {
	long := strings.Repeat("w", 100)
	cases := map[string]string{
		"tiny":   tinyStudy,
		"medium": mediumStudy,
		"three variants": strings.Replace(tinyStudy, `"participants": 8`,
			`"participants": 8, "vary": [{"field": "trials_per_cti", "values": [10, 20, 30]}]`, 1),
		"long names": strings.NewReplacer(`"two-channels"`, `"`+long+`"`, `"steady-lamp"`, `"s`+long[1:]+`"`,
			`"rising-watch"`, `"r`+long[1:]+`"`).Replace(tinyStudy),
	}
	if testing.Short() {
		delete(cases, "medium")
	}
	for name, js := range cases {
		t.Run(name, func(t *testing.T) {
			s := load(t, js)
			rep, err := recovery.Run(context.Background(), s, recovery.Options{Workers: 2})
			if err != nil {
				t.Fatal(err)
			}
			j, err := rep.JSON()
			if err != nil {
				t.Fatal(err)
			}
			h, err := pages.Report(rep)
			if err != nil {
				t.Fatal(err)
			}
			tables, err := rep.TableFiles()
			if err != nil {
				t.Fatal(err)
			}
			c := 0
			for _, f := range tables {
				c += len(f.Data)
			}
			real := int64(len(j) + len(h) + c)
			est := EstimateReportBytes(s, len(js))
			t.Logf("estimate %d bytes, report %d bytes: %.2f times", est, real, float64(est)/float64(real))
			if est < real || est > real*5/2 {
				t.Errorf("estimate %d bytes for a report of %d (json %d, html %d, tables %d): want 1 to 2.5 times the real size",
					est, real, len(j), len(h), c)
			}
		})
	}
}

// TestReportOverCapFailsStudy: an assembly whose files are over
// MaxReportBytes fails the study with both numbers and stores nothing.
func TestReportOverCapFailsStudy(t *testing.T) {
	r := newRig(t, func(c *Config) { c.MaxReportBytes = 10_000 })
	srv := r.server(t, nil)
	defer srv.Shutdown()
	st := r.submit(t, "harbour", tinyStudy)
	st = r.wait(t, "harbour", st.ID, time.Minute, final)
	if st.State != Failed || !strings.Contains(st.Error, "over the cap of 10000 bytes per study") {
		t.Fatalf("study %s, error %q; want failed over the cap", st.State, st.Error)
	}
	for _, k := range []ReportKind{ReportJSON, ReportHTML, FitsCSV} {
		if n := r.redis.Client(t).Exists(context.Background(), reportKey(st.ID, k)).Val(); n != 0 {
			t.Errorf("%s was stored", k.fileName())
		}
	}
}

func TestCheckReportSize(t *testing.T) {
	files := map[ReportKind][]byte{ReportJSON: make([]byte, 600), ReportHTML: make([]byte, 300), FitsCSV: make([]byte, 100)}
	if err := CheckReportSize(files, 1000); err != nil {
		t.Errorf("1000 bytes at a cap of 1000: %v", err)
	}
	err := CheckReportSize(files, 999)
	if err == nil || err.Error() != "the report files are 1000 bytes, over the cap of 999 bytes per study" {
		t.Errorf("1000 bytes at a cap of 999: %v", err)
	}
}

// redisErr is an error reply of Redis, as go-redis returns one.
type redisErr string

func (e redisErr) Error() string { return string(e) }
func (redisErr) RedisError()     {}

func TestUnavailable(t *testing.T) {
	for _, c := range []struct {
		name string
		err  error
		want bool
	}{
		{"refused", fmt.Errorf("worker: %w", &net.OpError{Op: "dial", Net: "tcp", Err: syscall.ECONNREFUSED}), true},
		{"reset", syscall.ECONNRESET, true},
		{"EOF", fmt.Errorf("reading: %w", io.EOF), true},
		{"pool timeout", redis.ErrPoolTimeout, true},
		{"deadline", context.DeadlineExceeded, true},
		{"loading", redisErr("LOADING Redis is loading the dataset in memory"), true},
		{"wrong type", redisErr("WRONGTYPE Operation against a key holding the wrong kind of value"), false},
		{"not found", ErrNotFound, false},
		{"other", errors.New("gob: bad data"), false},
		{"nil", nil, false},
	} {
		if got := Unavailable(c.err); got != c.want {
			t.Errorf("%s: Unavailable = %v, want %v", c.name, got, c.want)
		}
	}
}

// TestSubmitOnce: concurrent requests under one key make one study; a
// claim in progress is ErrKeyInFlight; a key whose study expired makes a
// new one; admit runs for new studies only.
func TestSubmitOnce(t *testing.T) {
	r := newRig(t, nil)
	ctx := context.Background()
	s := load(t, tinyStudy)
	admits := 0
	var mu sync.Mutex
	admit := func(context.Context) error { mu.Lock(); admits++; mu.Unlock(); return nil }

	var wg sync.WaitGroup
	ids := make([]string, 8)
	errs := make([]error, 8)
	for i := range ids {
		wg.Go(func() {
			st, _, err := r.client.SubmitOnce(ctx, "harbour", "berth-3", []byte(tinyStudy), s, 1000, admit)
			ids[i], errs[i] = st.ID, err
		})
	}
	wg.Wait()
	first := ""
	for i := range ids {
		switch {
		case errors.Is(errs[i], ErrKeyInFlight):
		case errs[i] != nil:
			t.Fatalf("request %d: %v", i, errs[i])
		case first == "":
			first = ids[i]
		case ids[i] != first:
			t.Fatalf("request %d made study %s, another made %s", i, ids[i], first)
		}
	}
	if first == "" || admits != 1 {
		t.Fatalf("first study %q, admit ran %d times; want one study admitted once", first, admits)
	}
	if list, _, err := r.client.List(ctx, "harbour", "", 20); err != nil || len(list) != 1 {
		t.Fatalf("harbour has %d studies (%v), want 1", len(list), err)
	}
	if v := r.redis.Client(t).HGet(ctx, studyKey(first), "report_estimate").Val(); v != "1000" {
		t.Errorf("report_estimate = %q, want 1000", v)
	}
	// No worker runs: the study stays queued and counts at its estimate.
	u, err := r.client.Usage(ctx, "harbour")
	if want := (Usage{StudiesInFlight: 1, FitsInFlight: 32, StoredBytes: int64(len(tinyStudy)) + 1000}); err != nil || u != want {
		t.Errorf("usage %+v (%v), want %+v", u, err, want)
	}

	sum := sha256.Sum256([]byte(tinyStudy))
	fp := hex.EncodeToString(sum[:])
	rdb := r.redis.Client(t)
	if err := rdb.Set(ctx, idempotencyKey("harbour", "berth-4"), "pending "+fp, time.Minute).Err(); err != nil {
		t.Fatal(err)
	}
	if _, _, err := r.client.SubmitOnce(ctx, "harbour", "berth-4", []byte(tinyStudy), s, 1000, admit); !errors.Is(err, ErrKeyInFlight) {
		t.Errorf("a claimed key: %v, want ErrKeyInFlight", err)
	}
	gone := newStudyID(time.Now())
	if err := rdb.Set(ctx, idempotencyKey("harbour", "berth-5"), "study "+fp+" "+gone, time.Minute).Err(); err != nil {
		t.Fatal(err)
	}
	st, replayed, err := r.client.SubmitOnce(ctx, "harbour", "berth-5", []byte(tinyStudy), s, 1000, admit)
	if err != nil || replayed || st.ID == gone || st.ID == first {
		t.Errorf("a key whose study expired: %s replayed %v, %v; want a new study", st.ID, replayed, err)
	}
	refused := errors.New("over quota")
	if _, _, err := r.client.SubmitOnce(ctx, "harbour", "berth-6", []byte(tinyStudy), s, 1000, func(context.Context) error { return refused }); err != refused {
		t.Errorf("a refused admit: %v", err)
	}
	if n := rdb.Exists(ctx, idempotencyKey("harbour", "berth-6")).Val(); n != 0 {
		t.Errorf("a refused admit left its key claimed")
	}
}
