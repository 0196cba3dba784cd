package agent

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"log/slog"
	"sync"
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
//
// Attempts run at most Concurrency at once. The entries of one alert for
// one notifier go in order, one at a time. A notifier whose attempt fails
// for a reason worth retrying (a timeout, a 5xx) gets no more attempts in
// the same pass: its other entries wait for the next one, so a receiver
// that hangs costs a pass about one timeout, not one per entry.
type Deliverer struct {
	Store     Store
	Notifiers map[string]NotifierConfig
	Clock     Clock
	Logger    *slog.Logger
	// BaseDelay and MaxDelay bound the backoff; zero means 30 s and 1 h.
	BaseDelay, MaxDelay time.Duration
	// Concurrency is the most attempts in flight at once; 0 means 4.
	Concurrency int
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

// DeliverResult counts what one pass did. Withheld entries were
// openings, escalations or snooze ends that an owner acknowledged after
// they were queued (a receiver was down, say): they are not sent.
type DeliverResult struct {
	Delivered, Failed, GaveUp, Withheld int
}

// withheldPrefix starts the last error of an entry withheld by an
// acknowledgement.
const withheldPrefix = "withheld: "

// pages reports whether an event pages the owner, so that an
// acknowledgement can hold it back (a resolution is always sent).
func pages(event string) bool {
	return event == EventOpened || event == EventEscalated || event == EventSnoozeEnded
}

// withholding returns, for the entries of due that page the owner, why
// each one that an acknowledgement recorded after it was queued now
// holds back is not to be sent, by entry id.
func (p *pass) withholding(ctx context.Context, due []Delivery) (map[int64]string, error) {
	need := false
	for _, e := range due {
		need = need || pages(e.Event)
	}
	if !need {
		return nil, nil
	}
	open, err := p.d.Store.Alerts(ctx, AlertQuery{OpenOnly: true})
	if err != nil {
		return nil, err
	}
	byID := make(map[string]*Alert, len(open))
	for i := range open {
		byID[open[i].ID] = &open[i]
	}
	now := p.clock.Now()
	out := map[int64]string{}
	for _, e := range due {
		a := byID[e.AlertID]
		if !pages(e.Event) || a == nil || a.Ack == nil || a.Ack.At.Before(e.CreatedAt) || !AckHolds(a.Ack, a.Severity, now) {
			continue
		}
		why := fmt.Sprintf("%sacknowledged by %s at %s, after this %s was queued", withheldPrefix, cmp.Or(a.Ack.By, "an owner"),
			a.Ack.At.UTC().Format(time.RFC3339), e.Event)
		out[e.ID] = why
	}
	return out, nil
}

// pass is the shared state of one Once.
type pass struct {
	d     *Deliverer
	clock Clock
	log   *slog.Logger

	mu       sync.Mutex
	res      DeliverResult
	err      error           // the first store error
	failing  map[string]bool // notifiers that failed in this pass
	progress bool
}

// Once attempts every entry due now, oldest first.
func (d *Deliverer) Once(ctx context.Context) (DeliverResult, error) {
	p := &pass{d: d, clock: d.Clock, log: d.Logger, failing: map[string]bool{}}
	if p.clock == nil {
		p.clock = SystemClock{}
	}
	if p.log == nil {
		p.log = slog.Default()
	}
	conc := d.Concurrency
	if conc <= 0 {
		conc = 4
	}
	for {
		due, err := d.Store.Due(ctx, p.clock.Now(), 100)
		if err != nil {
			return p.res, err
		}
		hold, err := p.withholding(ctx, due)
		if err != nil {
			return p.res, err
		}
		if len(hold) > 0 {
			kept := due[:0:0]
			for _, e := range due {
				why, ok := hold[e.ID]
				if !ok {
					kept = append(kept, e)
					continue
				}
				if err := d.Store.Failed(ctx, e.ID, e.Attempts, p.clock.Now(), why, true); err != nil {
					return p.res, err
				}
				p.res.Withheld++
				p.log.Info("notification withheld", "notifier", e.Notifier, "event", e.EventID, "reason", why)
			}
			due = kept
		}
		// Lanes: the entries of one alert and notifier, in order.
		var lanes [][]Delivery
		index := map[[2]string]int{}
		for _, e := range due {
			if p.failing[e.Notifier] {
				continue
			}
			k := [2]string{e.Notifier, e.AlertID}
			i, ok := index[k]
			if !ok {
				i = len(lanes)
				index[k] = i
				lanes = append(lanes, nil)
			}
			lanes[i] = append(lanes[i], e)
		}
		if len(lanes) == 0 {
			return p.res, nil
		}
		p.progress = false
		sem := make(chan struct{}, conc)
		var wg sync.WaitGroup
		for _, lane := range lanes {
			sem <- struct{}{}
			wg.Add(1)
			go func() {
				defer wg.Done()
				defer func() { <-sem }()
				p.lane(ctx, lane)
			}()
		}
		wg.Wait()
		if p.err != nil {
			return p.res, p.err
		}
		if ctx.Err() != nil {
			return p.res, ctx.Err()
		}
		if !p.progress {
			// Everything due failed or waits; the next attempts are later.
			return p.res, nil
		}
	}
}

// lane attempts one lane's entries in order until one fails.
func (p *pass) lane(ctx context.Context, lane []Delivery) {
	for _, e := range lane {
		p.mu.Lock()
		stop := p.err != nil || p.failing[e.Notifier]
		p.mu.Unlock()
		if stop || ctx.Err() != nil {
			return
		}
		if !p.attempt(ctx, e) {
			return
		}
	}
}

// attempt tries one entry and records the outcome; it reports whether
// the entry was delivered.
func (p *pass) attempt(ctx context.Context, e Delivery) bool {
	d := p.d
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
		retry, aerr = notifySafely(actx, nc.Notifier, e)
		cancel()
		if aerr != nil && errors.Is(actx.Err(), context.DeadlineExceeded) && ctx.Err() == nil {
			retry = true
		}
	}
	now := p.clock.Now()
	if aerr == nil {
		err := d.Store.Delivered(ctx, e.ID, now)
		p.mu.Lock()
		defer p.mu.Unlock()
		if err != nil {
			p.err = cmp.Or(p.err, err)
			return false
		}
		p.res.Delivered++
		p.progress = true
		return true
	}
	if ctx.Err() != nil {
		return false // shutting down: the attempt does not count
	}
	maxAge := nc.MaxAge
	if maxAge <= 0 {
		maxAge = 24 * time.Hour
	}
	next := now.Add(d.Backoff(attempts))
	giveUp := !retry || next.Sub(e.CreatedAt) > maxAge
	err := d.Store.Failed(ctx, e.ID, attempts, next, aerr.Error(), giveUp)
	p.mu.Lock()
	defer p.mu.Unlock()
	if err != nil {
		p.err = cmp.Or(p.err, err)
		return false
	}
	if retry {
		p.failing[e.Notifier] = true
	}
	if giveUp {
		p.res.GaveUp++
		p.log.Error("notification given up", "notifier", e.Notifier, "event", e.EventID, "attempts", attempts, "err", aerr)
	} else {
		p.res.Failed++
		p.log.Warn("notification failed; will retry", "notifier", e.Notifier, "event", e.EventID,
			"attempts", attempts, "next", next.UTC().Format(time.RFC3339), "err", aerr)
	}
	return false
}

// notifySafely calls the notifier; a panic in it is a failed attempt not
// worth retrying.
func notifySafely(ctx context.Context, n Notifier, e Delivery) (retry bool, err error) {
	defer func() {
		if p := recover(); p != nil {
			retry, err = false, fmt.Errorf("notifier panicked: %v (a bug in plumb; please report it)", p)
		}
	}()
	return n.Notify(ctx, e)
}
