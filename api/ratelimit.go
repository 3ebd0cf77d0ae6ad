package api

import (
	"math"
	"sync"

	"golang.org/x/time/rate"
)

// limiters holds one token bucket per key name. Names come from the keys
// file, so the map stays as small as the file.
type limiters struct {
	mu    sync.Mutex
	rate  rate.Limit
	burst int
	m     map[string]*rate.Limiter
}

func newLimiters(r rate.Limit, burst int) *limiters {
	return &limiters{rate: r, burst: burst, m: map[string]*rate.Limiter{}}
}

// allow takes a token for name; when there is none it returns how long
// until one is due, rounded up to whole seconds for Retry-After.
func (l *limiters) allow(name string) (ok bool, retryAfter int) {
	l.mu.Lock()
	lim := l.m[name]
	if lim == nil {
		lim = rate.NewLimiter(l.rate, l.burst)
		l.m[name] = lim
	}
	l.mu.Unlock()
	r := lim.Reserve()
	if !r.OK() {
		return false, 1
	}
	d := r.Delay()
	if d == 0 {
		return true, 0
	}
	r.Cancel()
	return false, max(1, int(math.Ceil(d.Seconds())))
}
