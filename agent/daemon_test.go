package agent_test

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"sync"
	"testing"
	"time"

	"plumb/agent"
	"plumb/agent/config"
	"plumb/connectors"
)

// fakeTime is a clock and timer that move only when told.
type fakeTime struct {
	mu      sync.Mutex
	now     time.Time
	waiters []waiter
	// asked is signalled whenever someone starts waiting, so a test can
	// tell that the daemon has gone back to sleep.
	asked chan struct{}
}

type waiter struct {
	at time.Time
	ch chan time.Time
}

func newFakeTime(t time.Time) *fakeTime { return &fakeTime{now: t, asked: make(chan struct{}, 1000)} }

func (f *fakeTime) Now() time.Time {
	f.mu.Lock()
	defer f.mu.Unlock()
	return f.now
}

func (f *fakeTime) After(d time.Duration) <-chan time.Time {
	f.mu.Lock()
	defer f.mu.Unlock()
	ch := make(chan time.Time, 1)
	if d <= 0 {
		ch <- f.now
	} else {
		f.waiters = append(f.waiters, waiter{f.now.Add(d), ch})
	}
	f.asked <- struct{}{}
	return ch
}

// Advance moves time and fires the timers that are due.
func (f *fakeTime) Advance(d time.Duration) {
	f.mu.Lock()
	defer f.mu.Unlock()
	f.now = f.now.Add(d)
	kept := f.waiters[:0]
	for _, w := range f.waiters {
		if !w.at.After(f.now) {
			w.ch <- f.now
		} else {
			kept = append(kept, w)
		}
	}
	f.waiters = kept
}

// gatedSource wraps a real source; Scan waits for the gate when it is set.
type gatedSource struct {
	connectors.Source
	gate    chan struct{}
	entered chan struct{} // told of each Scan that reaches the gate, when set
}

func (g *gatedSource) Scan(ctx context.Context, req connectors.Request) (*connectors.Result, error) {
	if g.entered != nil {
		g.entered <- struct{}{}
	}
	if g.gate != nil {
		select {
		case <-g.gate:
		case <-ctx.Done():
			return nil, ctx.Err()
		}
	}
	return g.Source.Scan(ctx, req)
}

type daemonRig struct {
	h       *harness
	ft      *fakeTime
	runs    chan *agent.Outcome
	errs    chan error
	gate    chan struct{}
	gated   bool
	entered chan struct{}
	d       *agent.Daemon
}

func newDaemonRig(t *testing.T, at time.Time) *daemonRig {
	h := newHarness(t)
	r := &daemonRig{h: h, ft: newFakeTime(at), runs: make(chan *agent.Outcome, 100), errs: make(chan error, 100)}
	h.cfg.Watches[0].Schedule = "0 6 * * *"
	sched, err := config.ParseSchedule("0 6 * * *", time.UTC)
	if err != nil || sched == nil {
		t.Fatal(err)
	}
	h.run.Clock = r.ft
	h.del.Clock = r.ft
	h.run.OpenSource = func(ctx context.Context, url string) (connectors.Source, error) {
		src, err := connectors.Open(ctx, url, connectors.Options{})
		if err != nil {
			return nil, err
		}
		g := &gatedSource{Source: src, entered: r.entered}
		if r.gated {
			g.gate = r.gate
		}
		return g, nil
	}
	r.d = &agent.Daemon{Runner: h.run, Deliverer: h.del, Watches: h.cfg.Watches, Clock: r.ft, Timer: r.ft,
		Jitter: -1, DeliverEvery: time.Hour, Grace: 30 * time.Second,
		OnRun: func(w *config.Watch, out *agent.Outcome, err error) {
			if err != nil {
				r.errs <- err
				return
			}
			r.runs <- out
		}}
	return r
}

func (r *daemonRig) expectRun(t *testing.T) *agent.Outcome {
	t.Helper()
	select {
	case out := <-r.runs:
		return out
	case err := <-r.errs:
		t.Fatalf("run error: %v", err)
	case <-time.After(20 * time.Second):
		t.Fatal("no run")
	}
	return nil
}

func (r *daemonRig) expectNoRun(t *testing.T) {
	t.Helper()
	// Let the daemon go back to sleep, then check nothing ran.
	settle(r.ft)
	select {
	case out := <-r.runs:
		t.Fatalf("unexpected run %+v", out.Run)
	case err := <-r.errs:
		t.Fatalf("unexpected run error %v", err)
	default:
	}
}

// settle waits until the daemon has asked for a timer again and stays
// quiet for a moment (this waits on the test's own progress, it asserts
// no timing).
func settle(ft *fakeTime) {
	for {
		select {
		case <-ft.asked:
		case <-time.After(100 * time.Millisecond):
			return
		}
	}
}

func TestDaemonSchedule(t *testing.T) {
	// The agent was down: the last run was on day 9 at 06:00, it starts
	// on day 12 at 08:00. It runs once at start, not once per missed tick.
	r := newDaemonRig(t, start.AddDate(0, 0, 12).Add(8*time.Hour))
	for d := 0; d < 9; d++ {
		r.h.src.addDay(t, d)
	}
	r.h.clock.Set(start.AddDate(0, 0, 9).Add(6 * time.Hour))
	r.h.run.Clock = r.h.clock
	if out, err := r.h.run.Run(context.Background(), r.h.cfg.Watches[0], agent.RunOptions{}); err != nil || out.Err != nil {
		t.Fatal(err, out)
	}
	r.h.run.Clock = r.ft
	ctx, cancel := context.WithCancel(context.Background())
	stopped := make(chan error, 1)
	go func() { stopped <- r.d.Run(ctx) }()
	r.expectRun(t)
	r.expectNoRun(t)

	// The next tick is day 13 at 06:00.
	r.ft.Advance(21*time.Hour + 59*time.Minute)
	r.expectNoRun(t)
	r.ft.Advance(time.Minute)
	r.expectRun(t)
	r.expectNoRun(t)

	// Three days pass at once: one run.
	r.ft.Advance(3 * 24 * time.Hour)
	r.expectRun(t)
	r.expectNoRun(t)

	cancel()
	if err := <-stopped; err != nil {
		t.Fatal(err)
	}
}

func TestDaemonNoOverlapAndShutdown(t *testing.T) {
	r := newDaemonRig(t, start.AddDate(0, 0, 5).Add(5*time.Hour))
	for d := 0; d < 5; d++ {
		r.h.src.addDay(t, d)
	}
	r.gate = make(chan struct{})
	r.gated = true
	ctx, cancel := context.WithCancel(context.Background())
	stopped := make(chan error, 1)
	go func() { stopped <- r.d.Run(ctx) }()
	// The first run starts at once and hangs in Scan; the 06:00 tick
	// finds it still going and is skipped.
	settle(r.ft)
	r.ft.Advance(time.Hour)
	r.expectNoRun(t)
	// Release it: one run completes.
	r.gate <- struct{}{}
	r.expectRun(t)

	// The next run (day 6 06:00) hangs; SIGTERM; after the grace period it
	// is abandoned and nothing of it is written.
	before, _ := r.h.store.Runs(context.Background(), "billing", 0)
	r.ft.Advance(24 * time.Hour)
	settle(r.ft)
	cancel()
	settle(r.ft)
	r.ft.Advance(31 * time.Second)
	select {
	case err := <-stopped:
		if err != nil {
			t.Fatal(err)
		}
	case <-time.After(20 * time.Second):
		t.Fatal("daemon did not stop after the grace period")
	}
	after, _ := r.h.store.Runs(context.Background(), "billing", 0)
	if len(after) != len(before) {
		t.Fatalf("an abandoned run was recorded: %d runs before, %d after", len(before), len(after))
	}
}

func TestDaemonBacksOffFailingSource(t *testing.T) {
	r := newDaemonRig(t, start.Add(6*time.Hour))
	r.h.cfg.Watches[0].Schedule = "* * * * *" // every minute
	r.h.run.OpenSource = func(ctx context.Context, url string) (connectors.Source, error) {
		return nil, errDown
	}
	ctx, cancel := context.WithCancel(context.Background())
	stopped := make(chan error, 1)
	go func() { stopped <- r.d.Run(ctx) }()
	failed := 0
	for m := 0; m < 180; m++ {
		settle(r.ft)
		for drained := false; !drained; {
			select {
			case out := <-r.runs:
				if out.Err == nil {
					t.Fatal("run succeeded against a source that is down")
				}
				failed++
			default:
				drained = true
			}
		}
		r.ft.Advance(time.Minute)
	}
	cancel()
	if err := <-stopped; err != nil {
		t.Fatal(err)
	}
	// Waits of 1, 2, 4, 8, 16, 32 minutes and then an hour: in 180
	// minutes the runs start at minutes 0, 1, 3, 7, 15, 31, 63, 123 (by
	// hand), 8 runs instead of 180.
	if failed != 8 {
		t.Fatalf("%d failed runs in 3 hours, want 8", failed)
	}
	runs, _ := r.h.store.Runs(context.Background(), "billing", 0)
	if len(runs) != 8 || runs[0].Status != agent.StatusFailed || !strings.Contains(runs[0].Error, "source is down") {
		t.Fatalf("recorded runs %d, latest %+v", len(runs), runs[0])
	}
}

var errDown = errors.New("source is down")

// TestDaemonBoundsRunsInFlight: five watches due at once with MaxRuns 2:
// two scans start, the third waits for a slot and starts when one ends,
// and all five run, never more than two at a time.
func TestDaemonBoundsRunsInFlight(t *testing.T) {
	r := newDaemonRig(t, start.AddDate(0, 0, 5).Add(5*time.Hour))
	for d := 0; d < 5; d++ {
		r.h.src.addDay(t, d)
	}
	base := r.h.cfg.Watches[0]
	var ws []*config.Watch
	for i := range 5 {
		w := *base
		w.Name = fmt.Sprintf("billing_%d", i)
		ws = append(ws, &w)
	}
	r.d.Watches = ws
	r.d.MaxRuns = 2
	r.gate = make(chan struct{})
	r.gated = true
	r.entered = make(chan struct{}, 10)
	ctx, cancel := context.WithCancel(context.Background())
	stopped := make(chan error, 1)
	go func() { stopped <- r.d.Run(ctx) }()
	enter := func() {
		t.Helper()
		select {
		case <-r.entered:
		case <-time.After(20 * time.Second):
			t.Fatal("no scan started")
		}
	}
	// quiet checks that no further scan has started by the time the
	// daemon sleeps again.
	quiet := func(what string) {
		t.Helper()
		settle(r.ft)
		select {
		case <-r.entered:
			t.Fatalf("%s: a scan started beyond MaxRuns", what)
		default:
		}
	}
	enter()
	enter()
	quiet("at start")
	for done := 0; done < 5; done++ {
		r.gate <- struct{}{}
		r.expectRun(t)
		if done+2 < 5 {
			enter() // the freed slot goes to a waiting watch
		}
		quiet(fmt.Sprintf("after %d runs", done+1))
	}
	cancel()
	if err := <-stopped; err != nil {
		t.Fatal(err)
	}
}
