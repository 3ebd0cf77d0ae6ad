package worker

import (
	"context"
	"sync"
	"time"

	"discrimen/recovery"
)

// compiledCache keeps the compiled studies of one worker process, keyed by
// study id, least recently used first out. Shards of one study arriving
// together wait for a single compile.
type compiledCache struct {
	mu      sync.Mutex
	max     int
	entries map[string]*compiledEntry
	order   []string // least recently used first
}

type compiledEntry struct {
	ready   chan struct{}
	c       *recovery.Compiled
	err     error
	seconds float64
}

func newCompiledCache(max int) *compiledCache {
	return &compiledCache{max: max, entries: map[string]*compiledEntry{}}
}

// get returns the study's compiled form, building it with build when it is
// not cached. fresh reports whether this call built it. The build runs
// detached from ctx so that one canceled shard does not fail the others
// waiting on the same compile; ctx only bounds the wait.
func (cc *compiledCache) get(ctx context.Context, id string, build func(context.Context) (*recovery.Compiled, error)) (c *recovery.Compiled, seconds float64, fresh bool, err error) {
	cc.mu.Lock()
	e, ok := cc.entries[id]
	if ok {
		cc.touch(id)
		cc.mu.Unlock()
	} else {
		e = &compiledEntry{ready: make(chan struct{})}
		cc.entries[id] = e
		cc.order = append(cc.order, id)
		for len(cc.order) > cc.max {
			delete(cc.entries, cc.order[0])
			cc.order = cc.order[1:]
		}
		cc.mu.Unlock()
		start := time.Now()
		e.c, e.err = build(context.WithoutCancel(ctx))
		e.seconds = time.Since(start).Seconds()
		close(e.ready)
		fresh = true
		if e.err != nil {
			cc.drop(id, e)
		}
	}
	select {
	case <-e.ready:
		return e.c, e.seconds, fresh, e.err
	case <-ctx.Done():
		return nil, 0, false, ctx.Err()
	}
}

func (cc *compiledCache) touch(id string) {
	for i, x := range cc.order {
		if x == id {
			copy(cc.order[i:], cc.order[i+1:])
			cc.order[len(cc.order)-1] = id
			return
		}
	}
}

// drop removes a failed entry so the next call builds again.
func (cc *compiledCache) drop(id string, e *compiledEntry) {
	cc.mu.Lock()
	defer cc.mu.Unlock()
	if cc.entries[id] != e {
		return
	}
	delete(cc.entries, id)
	for i, x := range cc.order {
		if x == id {
			cc.order = append(cc.order[:i], cc.order[i+1:]...)
			break
		}
	}
}

// forget removes a study (finished or canceled) from the cache.
func (cc *compiledCache) forget(id string) {
	cc.mu.Lock()
	e := cc.entries[id]
	cc.mu.Unlock()
	if e != nil {
		cc.drop(id, e)
	}
}
