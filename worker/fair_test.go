package worker

import (
	"context"
	"errors"
	"strings"
	"testing"
	"time"

	"discrimen/worker/workertest"
)

// backlogStudy is MediumStudy with 5,556 participants: 3 × 3 × 5,556 =
// 50,004 fits, about 210 shards of the default size.
var backlogStudy = strings.Replace(workertest.MediumStudy, `"participants": 30`, `"participants": 5556`, 1)

// smallStudy is TinyStudy with 25 participants: 2 × 2 × 25 = 100 fits.
var smallStudy = strings.Replace(workertest.TinyStudy, `"participants": 8`, `"participants": 25`, 1)

// TestFairShares: a 100-fit study of one key finishes within 10 s while
// another key has 50,000 fits queued, because the two keys' shards are in
// different queues that the workers draw from evenly. First in, first out
// it would wait for the whole backlog (about 85 core-seconds).
func TestFairShares(t *testing.T) {
	if testing.Short() {
		t.Skip("queues a 50,000-fit study")
	}
	const a, b = "owner-a", "owner-b"
	if ShareIndex(a) == ShareIndex(b) {
		t.Fatalf("%s and %s hash into the same shard queue %d; pick other names", a, b, ShareIndex(a))
	}
	r := newRig(t, nil)
	if got := load(t, backlogStudy).TotalFits(); got != 50004 {
		t.Fatalf("backlog study has %d fits, want 50,004", got)
	}
	if got := load(t, smallStudy).TotalFits(); got != 100 {
		t.Fatalf("small study has %d fits, want 100", got)
	}
	srv := r.server(t, nil)
	t.Cleanup(srv.Shutdown)
	big := r.submit(t, a, backlogStudy)
	// Wait until the backlog is planned and its shards are running.
	r.wait(t, a, big.ID, time.Minute, func(s Status) bool { return s.State == Running && s.Done > 0 })
	shards, _, err := r.client.QueueSizes()
	if err != nil {
		t.Fatal(err)
	}
	if shards < 150 {
		t.Fatalf("%d shard tasks queued for the backlog, want over 150", shards)
	}
	start := time.Now()
	small := r.submit(t, b, smallStudy)
	st := r.wait(t, b, small.ID, 10*time.Second, final)
	took := time.Since(start)
	if st.State != Done {
		t.Fatalf("small study %s: %s", st.State, st.Error)
	}
	bigNow, err := r.client.Status(context.Background(), a, big.ID)
	if err != nil {
		t.Fatal(err)
	}
	if bigNow.State != Running || bigNow.Done > 25000 {
		t.Fatalf("the backlog is %s with %d of %d fits done: it no longer held the queue", bigNow.State, bigNow.Done, bigNow.Total)
	}
	t.Logf("100-fit study done in %v behind %d queued shard tasks (backlog %d/%d fits done)", took, shards, bigNow.Done, bigNow.Total)
	r.checkReport(t, b, small.ID, smallStudy)
	if _, err := r.client.Cancel(context.Background(), a, big.ID); err != nil {
		t.Fatal(err)
	}
}

// BenchmarkFairShares reports the seconds a 100-fit study of one key takes
// while another key has 50,004 fits queued: "fair" with the two keys in
// different shard queues, "shared" with two keys that hash into the same
// queue, which then runs first in, first out (the old behaviour for every
// pair of keys). Run it once:
//
//	go test ./worker -run '^$' -bench FairShares -benchtime 1x
func BenchmarkFairShares(b *testing.B) {
	for _, tc := range []struct {
		name   string
		shared bool
	}{{"fair", false}, {"shared", true}} {
		b.Run(tc.name, func(b *testing.B) {
			const a = "owner-a"
			other := "owner-b"
			for i := 0; (ShareIndex(other) == ShareIndex(a)) != tc.shared; i++ {
				other = "owner-" + itoa(i)
			}
			var secs float64
			for range b.N {
				r := newRig(b, nil)
				srv := r.server(b, nil)
				big := r.submit(b, a, backlogStudy)
				r.wait(b, a, big.ID, time.Minute, func(s Status) bool { return s.State == Running && s.Done > 0 })
				start := time.Now()
				small := r.submit(b, other, smallStudy)
				st := r.wait(b, other, small.ID, 5*time.Minute, final)
				secs += time.Since(start).Seconds()
				if st.State != Done {
					b.Fatalf("small study %s: %s", st.State, st.Error)
				}
				if _, err := r.client.Cancel(context.Background(), a, big.ID); err != nil && !errors.Is(err, ErrFinished) {
					b.Fatal(err)
				}
				srv.Shutdown()
			}
			b.ReportMetric(secs/float64(b.N), "small-study-s")
		})
	}
}
