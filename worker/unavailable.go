package worker

import (
	"context"
	"errors"
	"io"
	"net"
	"strings"
	"syscall"

	"github.com/redis/go-redis/v9"
)

// Unavailable reports whether err says Redis could not be reached or could
// not serve: a refused, reset or timed-out connection, a closed socket, an
// exhausted connection pool, a deadline, or a Redis that is loading its
// data or has lost its primary. The api answers these 503 with
// Retry-After; anything else is a fault of ours. asynq's errors wrap the
// go-redis ones, so the same test serves both.
func Unavailable(err error) bool {
	if err == nil {
		return false
	}
	var ne net.Error
	switch {
	case errors.Is(err, context.DeadlineExceeded),
		errors.Is(err, redis.ErrPoolTimeout),
		errors.Is(err, redis.ErrPoolExhausted),
		errors.Is(err, io.EOF), errors.Is(err, io.ErrUnexpectedEOF),
		errors.Is(err, syscall.ECONNREFUSED), errors.Is(err, syscall.ECONNRESET),
		errors.Is(err, syscall.EPIPE), errors.Is(err, net.ErrClosed),
		errors.As(err, &ne):
		return true
	}
	var re redis.Error
	if errors.As(err, &re) {
		// Redis's own error prefixes for "not now": the data set is still
		// loading, a replica lost its primary, the cluster is down or
		// resharding.
		for _, p := range []string{"LOADING ", "MASTERDOWN ", "CLUSTERDOWN ", "TRYAGAIN "} {
			if strings.HasPrefix(re.Error(), p) {
				return true
			}
		}
	}
	return false
}
