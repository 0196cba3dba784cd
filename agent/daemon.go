package agent

import (
	"context"
	"fmt"
	"log/slog"
	"math/rand/v2"
	"sync"
	"time"

	"github.com/robfig/cron/v3"

	"plumb/agent/config"
)

// Timer is what the daemon waits with; tests inject a controllable one.
type Timer interface {
	After(d time.Duration) <-chan time.Time
}

type realTimer struct{}

func (realTimer) After(d time.Duration) <-chan time.Time { return time.After(d) }

// Daemon runs every watch on its cron schedule and delivers the outbox.
//
//   - No overlap: a tick that finds the watch's previous run still going is
//     skipped (and logged).
//   - Jitter: each run starts up to Jitter after its tick, so watches on
//     the same schedule do not hit one database at the same instant.
//   - Missed runs: at start a watch whose last run is older than its
//     previous tick (the agent was down) runs once at once, not once per
//     missed tick; a watch that never ran runs at once (its first run
//     backfills the history).
//   - Failures: a watch whose runs keep failing backs off (1 minute,
//     doubling to an hour) and then runs at the next tick.
//   - Shutdown: when ctx ends no new run starts; runs in flight get Grace
//     to finish, then their context is cancelled and they are abandoned
//     without writing anything (the next start redoes them).
type Daemon struct {
	Runner    *Runner
	Deliverer *Deliverer
	Watches   []*config.Watch
	Clock     Clock // nil means SystemClock
	Timer     Timer // nil means real timers
	Logger    *slog.Logger

	Jitter       time.Duration // 0 means 10 s; negative means none
	DeliverEvery time.Duration // 0 means 15 s
	Grace        time.Duration // 0 means 30 s

	// OnRun, when set, is called after every run (tests).
	OnRun func(w *config.Watch, out *Outcome, err error)
}

type watchSched struct {
	w        *config.Watch
	sched    cron.Schedule
	next     time.Time
	running  bool
	failures int // consecutive failed runs
}

// failureBackoff is how long a watch whose runs keep failing waits at
// least before its next run: 1 minute after the first failure, doubling to
// at most an hour. The run then happens at the first tick after it.
func failureBackoff(failures int) time.Duration {
	if failures <= 0 {
		return 0
	}
	d := time.Minute
	for i := 1; i < failures && d < time.Hour; i++ {
		d *= 2
	}
	return min(d, time.Hour)
}

type runDone struct {
	ws  *watchSched
	out *Outcome
	err error
}

// Run schedules until ctx ends, then shuts down within Grace.
func (d *Daemon) Run(ctx context.Context) error {
	clock := d.Clock
	if clock == nil {
		clock = SystemClock{}
	}
	timer := d.Timer
	if timer == nil {
		timer = realTimer{}
	}
	log := d.Logger
	if log == nil {
		log = slog.Default()
	}
	jitter := d.Jitter
	if jitter == 0 {
		jitter = 10 * time.Second
	}
	deliverEvery := d.DeliverEvery
	if deliverEvery <= 0 {
		deliverEvery = 15 * time.Second
	}
	grace := d.Grace
	if grace <= 0 {
		grace = 30 * time.Second
	}

	now := clock.Now()
	var ws []*watchSched
	for _, w := range d.Watches {
		s, err := config.ParseSchedule(w.Schedule, w.Location)
		if err != nil {
			return err
		}
		x := &watchSched{w: w, sched: s}
		x.next = s.Next(now)
		runs, err := d.Runner.Store.Runs(ctx, w.Name, 1)
		if err != nil {
			return err
		}
		switch {
		case len(runs) == 0:
			x.next = now
			log.Info("first run now", "watch", w.Name)
		case !s.Next(runs[0].StartedAt).After(now):
			x.next = now
			log.Info("missed run: running once now", "watch", w.Name, "last_run", runs[0].StartedAt.UTC().Format(time.RFC3339))
		}
		ws = append(ws, x)
	}

	runCtx, cancelRuns := context.WithCancel(context.WithoutCancel(ctx))
	defer cancelRuns()
	done := make(chan runDone)
	var wg sync.WaitGroup
	inFlight := 0
	start := func(x *watchSched) {
		x.running = true
		inFlight++
		wg.Add(1)
		var delay time.Duration
		if jitter > 0 {
			delay = time.Duration(rand.Int64N(int64(jitter)))
		}
		go func() {
			defer wg.Done()
			if delay > 0 {
				select {
				case <-timer.After(delay):
				case <-runCtx.Done():
					done <- runDone{ws: x, err: runCtx.Err()}
					return
				}
			}
			out, err := d.runOne(runCtx, x.w)
			done <- runDone{ws: x, out: out, err: err}
		}()
	}
	deliver := func() {
		if d.Deliverer == nil {
			return
		}
		if _, err := d.Deliverer.Once(ctx); err != nil && ctx.Err() == nil {
			log.Warn("delivering notifications", "err", err)
		}
	}
	finish := func(r runDone) {
		r.ws.running = false
		inFlight--
		if r.err != nil || r.out != nil && r.out.Err != nil {
			r.ws.failures++
		} else {
			r.ws.failures = 0
		}
		now := clock.Now()
		r.ws.next = r.ws.sched.Next(now)
		if r.ws.failures > 0 {
			// The first tick at or after the backoff.
			if after := r.ws.sched.Next(now.Add(failureBackoff(r.ws.failures) - time.Second)); after.After(r.ws.next) {
				r.ws.next = after
			}
		}
		if d.OnRun != nil {
			d.OnRun(r.ws.w, r.out, r.err)
		}
		if r.err != nil && ctx.Err() == nil {
			log.Error("run could not be recorded", "watch", r.ws.w.Name, "err", r.err)
		}
	}

	nextDeliver := now
	for ctx.Err() == nil {
		now = clock.Now()
		for _, x := range ws {
			if x.next.After(now) {
				continue
			}
			if x.running {
				log.Warn("tick skipped: the previous run is still going", "watch", x.w.Name)
				x.next = x.sched.Next(now)
				continue
			}
			start(x)
		}
		if !nextDeliver.After(now) {
			deliver()
			nextDeliver = now.Add(deliverEvery)
		}
		wake := nextDeliver
		for _, x := range ws {
			if !x.running && x.next.Before(wake) {
				wake = x.next
			}
		}
		wait := wake.Sub(now)
		if wait < 0 {
			wait = 0
		}
		select {
		case <-ctx.Done():
		case r := <-done:
			finish(r)
			deliver()
		case <-timer.After(wait):
		}
	}

	// Shutdown: let the runs in flight finish within the grace period.
	if inFlight > 0 {
		log.Info("stopping: waiting for runs in flight", "runs", inFlight, "grace", grace)
		deadline := timer.After(grace)
	wait:
		for inFlight > 0 {
			select {
			case r := <-done:
				finish(r)
			case <-deadline:
				log.Warn("stopping: abandoning runs in flight", "runs", inFlight)
				cancelRuns()
				break wait
			}
		}
		for inFlight > 0 {
			finish(<-done)
		}
	}
	wg.Wait()
	return nil
}

func (d *Daemon) runOne(ctx context.Context, w *config.Watch) (out *Outcome, err error) {
	defer func() {
		if r := recover(); r != nil {
			out, err = nil, &panicError{watch: w.Name, v: r}
		}
	}()
	return d.Runner.Run(ctx, w, RunOptions{Kind: RunLive})
}

type panicError struct {
	watch string
	v     any
}

func (e *panicError) Error() string {
	return fmt.Sprintf("watch %q: run panicked: %v", e.watch, e.v)
}
