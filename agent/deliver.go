package agent

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"time"
)

// Notifier delivers one outbox entry. retry says whether a failure is
// transient (network, timeout, 5xx) and worth another attempt.
type Notifier interface {
	Notify(ctx context.Context, d Delivery) (retry bool, err error)
}

// NotifierConfig is how the deliverer uses one notifier.
type NotifierConfig struct {
	Notifier Notifier
	Timeout  time.Duration // per attempt; 0 means 10s
	MaxAge   time.Duration // retries stop this long after the event; 0 means 24h
}

// Deliverer works through the outbox: every due entry is attempted under
// its notifier's timeout; failures are retried with exponential backoff
// (30 s doubling to at most 1 h) until delivered or too old. Delivery state
// lives in the store, so a restart resumes where it was.
type Deliverer struct {
	Store     Store
	Notifiers map[string]NotifierConfig
	Clock     Clock
	Logger    *slog.Logger
	// BaseDelay and MaxDelay bound the backoff; zero means 30 s and 1 h.
	BaseDelay, MaxDelay time.Duration
}

// Backoff returns the wait after the given number of failed attempts.
func (d *Deliverer) Backoff(attempts int) time.Duration {
	base, limit := d.BaseDelay, d.MaxDelay
	if base <= 0 {
		base = 30 * time.Second
	}
	if limit <= 0 {
		limit = time.Hour
	}
	w := base
	for i := 1; i < attempts && w < limit; i++ {
		w *= 2
	}
	return min(w, limit)
}

// DeliverResult counts what one pass did.
type DeliverResult struct {
	Delivered, Failed, GaveUp int
}

// Once attempts every entry due now, oldest first.
func (d *Deliverer) Once(ctx context.Context) (DeliverResult, error) {
	var res DeliverResult
	clock := d.Clock
	if clock == nil {
		clock = SystemClock{}
	}
	log := d.Logger
	if log == nil {
		log = slog.Default()
	}
	for {
		due, err := d.Store.Due(ctx, clock.Now(), 100)
		if err != nil {
			return res, err
		}
		if len(due) == 0 {
			return res, nil
		}
		progressed := false
		for _, e := range due {
			if ctx.Err() != nil {
				return res, ctx.Err()
			}
			nc, ok := d.Notifiers[e.Notifier]
			attempts := e.Attempts + 1
			var (
				retry bool
				aerr  error
			)
			if !ok || nc.Notifier == nil {
				aerr = fmt.Errorf("notifier %q is not configured any more", e.Notifier)
			} else {
				timeout := nc.Timeout
				if timeout <= 0 {
					timeout = 10 * time.Second
				}
				actx, cancel := context.WithTimeout(ctx, timeout)
				retry, aerr = nc.Notifier.Notify(actx, e)
				cancel()
				if aerr != nil && errors.Is(actx.Err(), context.DeadlineExceeded) && ctx.Err() == nil {
					retry = true
				}
			}
			now := clock.Now()
			if aerr == nil {
				if err := d.Store.Delivered(ctx, e.ID, now); err != nil {
					return res, err
				}
				res.Delivered++
				progressed = true
				continue
			}
			if ctx.Err() != nil {
				return res, ctx.Err() // shutting down: the attempt does not count
			}
			maxAge := nc.MaxAge
			if maxAge <= 0 {
				maxAge = 24 * time.Hour
			}
			next := now.Add(d.Backoff(attempts))
			giveUp := !retry || next.Sub(e.CreatedAt) > maxAge
			if err := d.Store.Failed(ctx, e.ID, attempts, next, aerr.Error(), giveUp); err != nil {
				return res, err
			}
			if giveUp {
				res.GaveUp++
				log.Error("notification given up", "notifier", e.Notifier, "event", e.EventID, "attempts", attempts, "err", aerr)
			} else {
				res.Failed++
				log.Warn("notification failed; will retry", "notifier", e.Notifier, "event", e.EventID,
					"attempts", attempts, "next", next.UTC().Format(time.RFC3339), "err", aerr)
			}
		}
		if !progressed {
			// Everything due failed; the next attempts are in the future.
			return res, nil
		}
	}
}
