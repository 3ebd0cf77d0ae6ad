package worker

// What the API checks before it accepts a study: the report-size estimate,
// a key's usage (studies and fits in flight, bytes stored) and idempotent
// submission under an Idempotency-Key.

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"strconv"
	"strings"
	"time"

	"github.com/redis/go-redis/v9"

	"discrimen/models"
)

// The constants of EstimateReportBytes, measured on `discrimen run` reports
// of the invented berth-watch studies (2 to 6 hypotheses, 4 to 32
// participants, 1 to 3 variants): a fit adds 530-580 bytes to report.json,
// fits.csv and report.html together with names of about 12 characters; a
// variant adds 20 KB + 28 KB per hypothesis; the study file is copied into
// report.json and report.html. Each is rounded up so the estimate stays
// above the real sizes: 1.3 to 1.6 times them on the studies of
// TestEstimateReportBytes.
const (
	estimateBase       = 64 << 10 // page frame, method notes, ranking
	estimatePerVariant = 32 << 10 // × (hypotheses + 1): tables, charts, recovery summaries
	estimatePerFit     = 640      // a fits.csv row and its share of report.json, plus names
	estimatePerTerm    = 110      // a measurement.csv row, plus names
	estimatePerParam   = 170      // a params.csv row, plus names
)

// EstimateReportBytes is an upper estimate of the bytes of a study's report
// files (report.json, report.html and the tables with their sidecars), from
// its shape alone, before anything is computed:
//
//	64 KiB + 3 × len(input) + Σ over variants v of
//	    32 KiB × (h + 1) + fits_v × (640 + m_v + t_v × (110 + m_v) + p × (170 + m_v))
//
// with h hypotheses, fits_v = participants_v × h² (models.Fits), m_v =
// len(name_v) + 2 × the longest hypothesis name (the names written on each
// row), t_v the measurement terms of the variant's measures (rt 3,
// accuracy 1, eeg 4: measurement.csv rows per fit) and p the most free
// parameters of a hypothesis (params.csv rows per fit); lengths in bytes. s must be valid
// (LoadStudy).
func EstimateReportBytes(s *models.Study, inputLen int) int64 {
	h := len(s.Hypotheses)
	longest := 0
	for _, hy := range s.Hypotheses {
		longest = max(longest, len(hy.Name))
	}
	designs, err := s.ExpandedDesigns()
	if err != nil {
		designs = s.Designs
	}
	free := 0
	for _, hy := range s.Hypotheses {
		free = max(free, len(hy.FreeParams()))
	}
	total := int64(estimateBase) + 3*int64(inputLen)
	for _, d := range designs {
		fits := int64(models.Fits(d.Participants, h, h))
		names := len(d.Name) + 2*longest
		terms := 0 // measurement.csv rows per fit
		if d.HasMeasure("rt") {
			terms += 3
		}
		if d.HasMeasure("accuracy") {
			terms++
		}
		if d.HasMeasure("eeg") {
			terms += 4
		}
		perFit := estimatePerFit + names + terms*(estimatePerTerm+names) + free*(estimatePerParam+names)
		total += int64(estimatePerVariant)*int64(h+1) + fits*int64(perFit)
	}
	return total
}

// Usage is what one API key holds at a moment.
type Usage struct {
	// StudiesInFlight counts the key's queued and running studies.
	StudiesInFlight int
	// FitsInFlight sums their fits.
	FitsInFlight int
	// StoredBytes sums the study files and report files the key's studies
	// keep in Redis, counting a study in flight at its report estimate.
	StoredBytes int64
}

// Usage reads owner's usage. It reads every study of the owner's index, in
// pipelined batches (a few ms per thousand studies); index entries of
// expired studies are dropped on the way.
func (c *Client) Usage(ctx context.Context, owner string) (Usage, error) {
	return c.st.usage(ctx, owner)
}

const usageBatch = 500

func (st *store) usage(ctx context.Context, owner string) (Usage, error) {
	var u Usage
	ids, err := st.rdb.ZRange(ctx, ownerKey(owner), 0, -1).Result()
	if err != nil {
		return u, err
	}
	var expired []string
	for start := 0; start < len(ids); start += usageBatch {
		batch := ids[start:min(start+usageBatch, len(ids))]
		fields := make([]*redis.SliceCmd, len(batch))
		sizes := make([][4]*redis.IntCmd, len(batch))
		_, err := st.rdb.Pipelined(ctx, func(p redis.Pipeliner) error {
			for i, id := range batch {
				fields[i] = p.HMGet(ctx, studyKey(id), "status", "total", "report_estimate")
				sizes[i] = [4]*redis.IntCmd{p.StrLen(ctx, inputKey(id)),
					p.StrLen(ctx, reportKey(id, ReportJSON)), p.StrLen(ctx, reportKey(id, ReportHTML)), p.StrLen(ctx, reportKey(id, FitsCSV))}
			}
			return nil
		})
		if err != nil {
			return u, err
		}
		for i, id := range batch {
			v := fields[i].Val()
			status, ok := v[0].(string)
			if !ok {
				expired = append(expired, id)
				continue
			}
			var stored int64
			for _, s := range sizes[i] {
				stored += s.Val()
			}
			if State(status).Final() {
				u.StoredBytes += stored
				continue
			}
			total, _ := strconv.Atoi(str(v[1]))
			estimate, err := strconv.ParseInt(str(v[2]), 10, 64)
			if err != nil {
				// Written just after the record; absent if the api
				// stopped in between. Count the fits' share alone.
				estimate = int64(total) * estimatePerFit
			}
			u.StudiesInFlight++
			u.FitsInFlight += total
			u.StoredBytes += sizes[i][0].Val() + estimate
		}
	}
	for _, id := range expired {
		// A failed removal is tried again at the next read.
		_ = st.unindex(ctx, owner, id)
	}
	return u, nil
}

func str(v any) string { s, _ := v.(string); return s }

// The idempotency errors; the api answers them 422 and 409, as the
// Idempotency-Key draft asks.
var (
	// ErrKeyReused: the idempotency key was used with another study file.
	ErrKeyReused = errors.New("worker: idempotency key already used for another request")
	// ErrKeyInFlight: a request with the same key is still being answered.
	ErrKeyInFlight = errors.New("worker: a request with this idempotency key is in progress")
)

// claimTTL bounds how long an idempotency key stays claimed by a request
// that stopped before binding it to a study: longer than any submit takes.
const claimTTL = time.Minute

// SubmitOnce is Submit under an idempotency key: the first request with
// key stores the study; a retry with the same key and the same study file
// (the same bytes) returns that study with replayed true; the same key with
// another file is ErrKeyReused, and a retry while the first request is
// still in progress ErrKeyInFlight. Keys are per owner and kept for the
// retention; an empty key submits as Submit does. admit, when not nil,
// runs before a new study is stored (not for a replay) and its error is
// returned as is: the api checks the key's quotas there, so a retry of an
// accepted study is never refused by the quota it uses. estimate, the
// study's EstimateReportBytes, is recorded for Usage.
func (c *Client) SubmitOnce(ctx context.Context, owner, key string, input []byte, s *models.Study, estimate int64, admit func(context.Context) error) (Status, bool, error) {
	if admit == nil {
		admit = func(context.Context) error { return nil }
	}
	if key == "" {
		if err := admit(ctx); err != nil {
			return Status{}, false, err
		}
		st, err := c.Submit(ctx, owner, input, s)
		if err == nil {
			c.recordEstimate(ctx, st.ID, estimate)
		}
		return st, false, err
	}
	sum := sha256.Sum256(input)
	return c.submitOnce(ctx, owner, key, hex.EncodeToString(sum[:]), admit,
		func(ctx context.Context) (Status, error) { return c.Submit(ctx, owner, input, s) },
		c.Status, estimate)
}

// submitOnce is SubmitOnce's idempotency for any submission: fp is the
// hex SHA-256 of what was submitted, submit stores it, status reads it
// back for a replay.
func (c *Client) submitOnce(ctx context.Context, owner, key, fp string, admit func(context.Context) error,
	submit func(context.Context) (Status, error), status func(ctx context.Context, owner, id string) (Status, error), estimate int64) (Status, bool, error) {
	ik := idempotencyKey(owner, key)
	pending := "pending " + fp
	// Two rounds at most: the second after a bound study expired.
	for range 2 {
		claimed, err := c.st.rdb.SetNX(ctx, ik, pending, claimTTL).Result()
		if err != nil {
			return Status{}, false, err
		}
		if claimed {
			if err := admit(ctx); err != nil {
				c.st.release(ctx, ik, pending)
				return Status{}, false, err
			}
			st, err := submit(ctx)
			if err != nil {
				c.st.release(ctx, ik, pending)
				return Status{}, false, err
			}
			if err := c.st.rdb.Set(ctx, ik, "study "+fp+" "+st.ID, c.cfg.Retention).Err(); err != nil {
				// The study is stored; a retry within claimTTL gets 409, then a new study.
				c.log.Warn("binding an idempotency key to its study", "study", st.ID, "err", err)
			}
			c.recordEstimate(ctx, st.ID, estimate)
			return st, false, nil
		}
		v, err := c.st.rdb.Get(ctx, ik).Result()
		if errors.Is(err, redis.Nil) {
			continue // released or expired meanwhile
		}
		if err != nil {
			return Status{}, false, err
		}
		kind, rest, _ := strings.Cut(v, " ")
		gotFP, id, _ := strings.Cut(rest, " ")
		if gotFP != fp {
			return Status{}, false, ErrKeyReused
		}
		if kind == "pending" {
			return Status{}, false, ErrKeyInFlight
		}
		st, err := status(ctx, owner, id)
		if errors.Is(err, ErrNotFound) {
			c.st.release(ctx, ik, v) // the study expired before its key
			continue
		}
		return st, err == nil, err
	}
	return Status{}, false, ErrKeyInFlight
}

// recordEstimate stores a submitted study's report estimate for Usage. The
// study is accepted either way; a failure is logged.
func (c *Client) recordEstimate(ctx context.Context, id string, estimate int64) {
	if err := c.st.rdb.HSet(ctx, studyKey(id), "report_estimate", estimate).Err(); err != nil {
		c.log.Warn("recording a study's report estimate", "study", id, "err", err)
	}
}

// releaseScript deletes KEYS[1] only while it holds ARGV[1].
var releaseScript = redis.NewScript(`
if redis.call('GET', KEYS[1]) == ARGV[1] then return redis.call('DEL', KEYS[1]) end
return 0
`)

// release frees an idempotency key this request holds; a failure leaves it
// to expire.
func (st *store) release(ctx context.Context, key, value string) {
	_ = releaseScript.Run(ctx, st.rdb, []string{key}, value).Err()
}

// CheckReportSize refuses report files over max bytes in all (0: no cap),
// naming both numbers.
func CheckReportSize(files map[ReportKind][]byte, max int64) error {
	var n int64
	for _, b := range files {
		n += int64(len(b))
	}
	if max > 0 && n > max {
		return fmt.Errorf("the report files are %d bytes, over the cap of %d bytes per study", n, max)
	}
	return nil
}
