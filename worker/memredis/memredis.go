// Package memredis holds what the embedded in-memory Redis needs, shared by
// `discrimen serve` and the tests.
package memredis

import (
	"time"

	"github.com/alicebob/miniredis/v2"
)

// FollowClock makes an embedded miniredis count its TTLs down with the
// wall clock, once a second, so retention behaves as on a real server
// (miniredis moves time only when told to). Call stop to end it.
func FollowClock(m *miniredis.Miniredis) (stop func()) {
	done := make(chan struct{})
	go func() {
		t := time.NewTicker(time.Second)
		defer t.Stop()
		for {
			select {
			case <-done:
				return
			case <-t.C:
				m.FastForward(time.Second)
			}
		}
	}()
	return func() { close(done) }
}
