package agent

import (
	"context"
	"errors"
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
//     skipped (and logged). The next tick is set when a run starts, so only
//     a run that is still going when its next tick comes counts.
//   - Jitter: each run starts up to Jitter after its tick, so watches on
//     the same schedule do not hit one database at the same instant.
//   - Missed runs: at start a watch whose last run is older than its
//     previous tick (the agent was down) runs once at once, not once per
//     missed tick; a watch that never ran runs at once (its first run
//     backfills the history).
//   - Failures: a watch whose runs keep failing backs off (1 minute,
//     doubling to an hour) and then runs at the next tick.
//   - No next tick: a schedule with no time ahead (configuration check
//     refuses the ones that never fire; the cron library looks only five
//     years ahead) parks the watch, logged, and is looked at again daily;
//     it never makes the watch run at once.
//   - Bounded: at most MaxRuns runs scan at once; the others wait for a
//     slot (they count as running, so their next tick is skipped if they
//     are still waiting then).
//   - Delivery: the outbox is worked through beside the schedule, never on
//     its path: a slow or dead receiver delays no run. It is kicked after
//     every run and every DeliverEvery.
//   - Shutdown: when ctx ends no new run starts and delivery stops (an
//     attempt cut short does not count; the outbox keeps the entry); runs
//     in flight get Grace to finish, then their context is cancelled and
//     they are abandoned without writing anything (the next start redoes
//     them).
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
	// MaxRuns bounds the runs that scan at once (0 means 4): a tick that
	// finds every slot taken waits for one, so the first runs of many
	// watches (each backfilling its history) do not all start together.
	MaxRuns int

	// OnRun, when set, is called after every run (tests).
	OnRun func(w *config.Watch, out *Outcome, err error)
}

type watchSched struct {
	w        *config.Watch
	sched    cron.Schedule
	next     time.Time // the next tick; for a parked watch, when to look again
	parked   bool      // the schedule had no next tick
	running  bool
	started  time.Time // the tick of the run in flight
	failures int       // consecutive failed runs
}

// parkedRecheck is how often a watch whose schedule has no next tick is
// looked at again.
const parkedRecheck = 24 * time.Hour

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

// nextTick is the schedule's first tick after t; ok is false when it has
// none (the library gives the zero time) or gives one that is not later.
func nextTick(s cron.Schedule, t time.Time) (time.Time, bool) {
	n := s.Next(t)
	return n, !n.IsZero() && n.After(t)
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

	// advance sets the watch's next tick after t, or parks it.
	advance := func(x *watchSched, t time.Time) {
		if n, ok := nextTick(x.sched, t); ok {
			if x.parked {
				log.Info("schedule has a next run again", "watch", x.w.Name, "schedule", x.w.Schedule, "next", n.UTC().Format(time.RFC3339))
			}
			x.next, x.parked = n, false
			return
		}
		if !x.parked {
			log.Error("schedule has no next run: the watch is not scheduled until it has one; fix its schedule",
				"watch", x.w.Name, "schedule", x.w.Schedule, "after", t.UTC().Format(time.RFC3339))
		}
		x.next, x.parked = t.Add(parkedRecheck), true
	}

	now := clock.Now()
	var ws []*watchSched
	for _, w := range d.Watches {
		s, err := config.ParseSchedule(w.Schedule, w.Location)
		if err != nil {
			return fmt.Errorf("watch %q: %w", w.Name, err)
		}
		x := &watchSched{w: w, sched: s}
		runs, err := d.Runner.Store.Runs(ctx, w.Name, 1)
		if err != nil {
			return err
		}
		if len(runs) == 0 {
			x.next = now
			log.Info("first run now", "watch", w.Name)
		} else if prev, ok := nextTick(s, runs[0].StartedAt); ok && !prev.After(now) {
			x.next = now
			log.Info("missed run: running once now", "watch", w.Name, "last_run", runs[0].StartedAt.UTC().Format(time.RFC3339))
		} else {
			advance(x, now)
		}
		ws = append(ws, x)
	}

	runCtx, cancelRuns := context.WithCancel(context.WithoutCancel(ctx))
	defer cancelRuns()
	maxRuns := d.MaxRuns
	if maxRuns <= 0 {
		maxRuns = 4
	}
	slots := make(chan struct{}, maxRuns)
	done := make(chan runDone)
	var wg sync.WaitGroup
	inFlight := 0
	start := func(x *watchSched, now time.Time) {
		x.running = true
		x.started = x.next
		advance(x, now)
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
			select {
			case slots <- struct{}{}:
			case <-runCtx.Done():
				done <- runDone{ws: x, err: runCtx.Err()}
				return
			}
			out, err := d.runOne(runCtx, x.w)
			<-slots
			done <- runDone{ws: x, out: out, err: err}
		}()
	}

	// Delivery runs beside the schedule; kick asks it for a pass now.
	kick := make(chan struct{}, 1)
	deliverCtx, stopDelivery := context.WithCancel(ctx)
	defer stopDelivery()
	var dwg sync.WaitGroup
	if d.Deliverer != nil {
		dwg.Add(1)
		go func() {
			defer dwg.Done()
			d.deliverLoop(deliverCtx, kick, timer, deliverEvery, log)
		}()
	}

	finish := func(r runDone) {
		x := r.ws
		x.running = false
		inFlight--
		lost := errors.Is(r.err, ErrLockLost)
		switch {
		case lost:
			// Not the watch's fault: its run could not be recorded.
		case r.err != nil || r.out != nil && r.out.Err != nil:
			x.failures++
		default:
			x.failures = 0
		}
		if x.failures > 0 && !x.parked {
			// The first tick at or after the backoff.
			now := clock.Now()
			if after, ok := nextTick(x.sched, now.Add(failureBackoff(x.failures)-time.Second)); ok && after.After(x.next) {
				x.next = after
			}
		}
		if d.OnRun != nil {
			d.OnRun(x.w, r.out, r.err)
		}
		switch {
		case r.err == nil || ctx.Err() != nil:
		case lost:
			log.Error("run not recorded: this agent does not hold the state store's lock", "watch", x.w.Name, "err", r.err)
		default:
			log.Error("run could not be recorded", "watch", x.w.Name, "err", r.err)
		}
		select {
		case kick <- struct{}{}:
		default:
		}
	}

	for ctx.Err() == nil {
		now = clock.Now()
		for _, x := range ws {
			if x.next.After(now) {
				continue
			}
			switch {
			case x.parked:
				advance(x, now)
			case x.running:
				log.Warn("tick skipped: the previous run is still going", "watch", x.w.Name,
					"tick", x.next.UTC().Format(time.RFC3339), "run_tick", x.started.UTC().Format(time.RFC3339))
				advance(x, now)
			default:
				start(x, now)
			}
		}
		wake := now.Add(parkedRecheck)
		for _, x := range ws {
			if x.next.Before(wake) {
				wake = x.next
			}
		}
		select {
		case <-ctx.Done():
		case r := <-done:
			finish(r)
		case <-timer.After(max(wake.Sub(now), 0)):
		}
	}
	stopDelivery()

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
	dwg.Wait()
	return nil
}

// deliverLoop works through the outbox until ctx ends: a pass at once,
// then one after every kick and every interval.
func (d *Daemon) deliverLoop(ctx context.Context, kick <-chan struct{}, timer Timer, every time.Duration, log *slog.Logger) {
	for {
		if _, err := d.deliverOnce(ctx); err != nil && ctx.Err() == nil {
			log.Warn("delivering notifications", "err", err)
		}
		select {
		case <-ctx.Done():
			return
		case <-kick:
		case <-timer.After(every):
		}
	}
}

// deliverOnce is one pass; a panic in it is an error, not the end of
// the agent.
func (d *Daemon) deliverOnce(ctx context.Context) (res DeliverResult, err error) {
	defer func() {
		if p := recover(); p != nil {
			err = fmt.Errorf("delivery panicked: %v (a bug in plumb; please report it)", p)
		}
	}()
	return d.Deliverer.Once(ctx)
}

// runOne runs a live run; Runner.Run turns panics into failed runs, and
// this recover is the last resort that keeps the agent up.
func (d *Daemon) runOne(ctx context.Context, w *config.Watch) (out *Outcome, err error) {
	defer func() {
		if p := recover(); p != nil {
			out, err = nil, &PanicError{Watch: w.Name, Value: p}
		}
	}()
	return d.Runner.Run(ctx, w, RunOptions{Kind: RunLive})
}
