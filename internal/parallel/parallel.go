// Package parallel runs a bounded number of goroutines over an index range.
// It is the one worker pool of discrimen: the prediction grids, the shards of
// an in-process run, the surrogate checks and the group sweep all use it, so
// that every loop honours its context and stops on its first error the same
// way.
package parallel

import (
	"context"
	"sync"
	"sync/atomic"
)

// For calls fn(w, i) once for every i in [0, n), on at most workers
// goroutines (fewer when n is smaller; at least one). w in [0, workers)
// names the goroutine, so a caller can keep per-goroutine scratch space in
// a slice indexed by w; calls with the same w never overlap. Indices are
// handed out in increasing order.
//
// The context is checked before every call: once it is done, or once any
// call has failed, no new call starts. For returns the error of the
// lowest index that failed, so the error does not depend on scheduling,
// or else ctx.Err() if the context ended before every index ran, or nil.
func For(ctx context.Context, n, workers int, fn func(w, i int) error) error {
	if n <= 0 {
		return ctx.Err()
	}
	workers = max(1, min(workers, n))
	var (
		next    atomic.Int64
		failed  atomic.Bool
		mu      sync.Mutex
		errIdx  = n
		firstEr error
		wg      sync.WaitGroup
	)
	run := func(w int) {
		defer wg.Done()
		for {
			if failed.Load() || ctx.Err() != nil {
				return
			}
			i := int(next.Add(1) - 1)
			if i >= n {
				return
			}
			if err := fn(w, i); err != nil {
				mu.Lock()
				if i < errIdx {
					errIdx, firstEr = i, err
				}
				mu.Unlock()
				failed.Store(true)
			}
		}
	}
	wg.Add(workers)
	for w := 1; w < workers; w++ {
		go run(w)
	}
	run(0)
	wg.Wait()
	if firstEr != nil {
		return firstEr
	}
	if int(next.Load()) < n {
		return ctx.Err()
	}
	return nil
}
