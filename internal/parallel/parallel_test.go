package parallel

import (
	"context"
	"errors"
	"fmt"
	"sync/atomic"
	"testing"
)

func TestForVisitsEveryIndexOnce(t *testing.T) {
	for _, tc := range []struct{ n, workers int }{{0, 3}, {1, 1}, {7, 3}, {100, 1}, {100, 128}, {5, 0}} {
		t.Run(fmt.Sprintf("n%d_w%d", tc.n, tc.workers), func(t *testing.T) {
			seen := make([]atomic.Int32, tc.n)
			var maxW atomic.Int32
			err := For(context.Background(), tc.n, tc.workers, func(w, i int) error {
				seen[i].Add(1)
				if int32(w) > maxW.Load() {
					maxW.Store(int32(w))
				}
				return nil
			})
			if err != nil {
				t.Fatal(err)
			}
			for i := range seen {
				if got := seen[i].Load(); got != 1 {
					t.Fatalf("index %d ran %d times, want 1", i, got)
				}
			}
			if tc.n > 0 && int(maxW.Load()) >= max(1, min(tc.workers, tc.n)) {
				t.Fatalf("worker index %d out of range for %d workers", maxW.Load(), tc.workers)
			}
		})
	}
}

// TestForLowestError: the error returned is the lowest failing index's,
// whatever the schedule, and no call starts after a failure is seen.
func TestForLowestError(t *testing.T) {
	for rep := 0; rep < 20; rep++ {
		err := For(context.Background(), 200, 4, func(w, i int) error {
			if i == 3 || i == 150 {
				return fmt.Errorf("item %d", i)
			}
			return nil
		})
		if err == nil || err.Error() != "item 3" {
			t.Fatalf("got %v, want item 3", err)
		}
	}
}

// TestForHonoursContext guards the old grid pool, which checked its context
// only when the node index matched its worker modulo 64 and so never for
// workers above 64: with 100 workers a cancelled context still stops every
// one of them.
func TestForHonoursContext(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	var calls atomic.Int64
	err := For(ctx, 100000, 100, func(w, i int) error {
		if calls.Add(1) == 10 {
			cancel()
		}
		return nil
	})
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("err = %v, want context.Canceled", err)
	}
	// Each of the 100 goroutines may have started one call after the
	// tenth before seeing the cancellation.
	if n := calls.Load(); n > 10+100 {
		t.Fatalf("%d calls after cancellation at 10, want at most 110", n)
	}
}
