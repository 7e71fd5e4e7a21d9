package natsjs

import (
	"context"
	"errors"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// retryFor bounds how long an operation is retried through a transient
// failure: a node stopping, a stream electing a new leader, the client
// reconnecting to another node. A three-node cluster elects a new leader
// within a few seconds.
const retryFor = 30 * time.Second

// attemptTimeout bounds one attempt, so that a request lost with a
// stopped node is tried again on another.
const attemptTimeout = 5 * time.Second

// permanent reports whether err is an answer rather than a failure to
// get one: not found, exists, a revision conflict, an invalid name.
func permanent(err error) bool {
	for _, e := range []error{jetstream.ErrKeyNotFound, jetstream.ErrKeyDeleted, jetstream.ErrKeyExists,
		jetstream.ErrKeyRevisionMismatch, jetstream.ErrObjectNotFound, jetstream.ErrNoObjectsFound,
		jetstream.ErrInvalidKey, jetstream.ErrBadObjectMeta, jetstream.ErrMsgNotFound, jetstream.ErrStreamNotFound,
		jetstream.ErrMaxBytesExceeded, nats.ErrConnectionClosed, jobs.ErrQueueFull, jobs.ErrExists, nats.ErrMaxPayload, nats.ErrBadSubject} {
		if errors.Is(err, e) {
			return true
		}
	}
	var apiErr *jetstream.APIError
	if errors.As(err, &apiErr) && apiErr.Code >= 400 && apiErr.Code < 500 && apiErr.Code != 408 {
		// A request the server refused (a bad configuration), except a
		// timeout; unavailability during an election is a 503.
		return true
	}
	return false
}

// retry runs op until it succeeds, fails permanently, ctx ends or
// retryFor has passed. Each attempt gets its own timeout.
func retry(ctx context.Context, op func(ctx context.Context) error) error {
	return retryWithin(ctx, attemptTimeout, op)
}

// retryWithin is retry with a time limit per attempt.
func retryWithin(ctx context.Context, per time.Duration, op func(ctx context.Context) error) error {
	deadline := time.Now().Add(retryFor)
	wait := 50 * time.Millisecond
	for {
		actx, cancel := context.WithTimeout(ctx, per)
		err := op(actx)
		cancel()
		if err == nil || permanent(err) || ctx.Err() != nil || time.Now().After(deadline) {
			return err
		}
		select {
		case <-ctx.Done():
			return err
		case <-time.After(wait):
		}
		wait = min(2*wait, time.Second)
	}
}
