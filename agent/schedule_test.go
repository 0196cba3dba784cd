package agent_test

import (
	"bytes"
	"context"
	"log/slog"
	"strings"
	"sync"
	"testing"
	"time"
)

// logBuffer collects a component's log lines for a test.
type logBuffer struct {
	mu  sync.Mutex
	buf bytes.Buffer
}

func (b *logBuffer) Write(p []byte) (int, error) {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.buf.Write(p)
}

func (b *logBuffer) String() string {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.buf.String()
}

// count counts the lines holding s.
func (b *logBuffer) count(s string) int { return strings.Count(b.String(), s) }

func newLogBuffer() (*logBuffer, *slog.Logger) {
	b := &logBuffer{}
	return b, slog.New(slog.NewTextHandler(b, &slog.HandlerOptions{Level: slog.LevelDebug}))
}

// TestDaemonScheduleWithoutNextTick: the cron library looks five years
// ahead, so "the 29th of February" has no next tick from March 2097 (2100
// is no leap year). The watch runs once (its first run) and is then parked
// and looked at again daily; before, a zero next tick made it run again at
// once, thousands of times.
func TestDaemonScheduleWithoutNextTick(t *testing.T) {
	at := time.Date(2097, 3, 1, 6, 0, 0, 0, time.UTC)
	r := newDaemonRig(t, at)
	for d := 0; d < 10; d++ {
		r.h.src.addDay(t, d)
	}
	r.h.cfg.Watches[0].Schedule = "0 0 29 2 *"
	logs, log := newLogBuffer()
	r.d.Logger = log
	ctx, cancel := context.WithCancel(context.Background())
	stopped := make(chan error, 1)
	go func() { stopped <- r.d.Run(ctx) }()
	r.expectRun(t)
	r.expectNoRun(t)
	// Days pass: still no run, and the watch is not forgotten either.
	for range 3 {
		r.ft.Advance(24 * time.Hour)
		r.expectNoRun(t)
	}
	cancel()
	if err := <-stopped; err != nil {
		t.Fatal(err)
	}
	if n := logs.count("schedule has no next run"); n != 1 {
		t.Fatalf("%d 'no next run' messages, want 1 (said once, when parked):\n%s", n, logs)
	}
	if !strings.Contains(logs.String(), `schedule="0 0 29 2 *"`) || !strings.Contains(logs.String(), "watch=billing") {
		t.Fatalf("the message names neither the watch nor its schedule:\n%s", logs)
	}
	runs, _ := r.h.store.Runs(context.Background(), "billing", 0)
	if len(runs) != 1 {
		t.Fatalf("%d runs recorded, want 1", len(runs))
	}
}

// TestDaemonRefusesScheduleThatNeverFires: a schedule that never fires,
// handed to the daemon past the configuration check, stops it at start
// with the watch and the schedule named.
func TestDaemonRefusesScheduleThatNeverFires(t *testing.T) {
	for _, spec := range []string{"0 0 31 2 *", "0 0 30 2 *", "0 0 31 4 *"} {
		r := newDaemonRig(t, start.Add(6*time.Hour))
		r.h.cfg.Watches[0].Schedule = spec
		// Cancelled: a daemon that accepted the schedule returns at once.
		ctx, cancel := context.WithCancel(context.Background())
		cancel()
		err := r.d.Run(ctx)
		if err == nil || !strings.Contains(err.Error(), `watch "billing"`) || !strings.Contains(err.Error(), `schedule "`+spec+`" never fires`) {
			t.Fatalf("%s: %v", spec, err)
		}
	}
}

// TestDaemonWarnsOnlyOnRealOverlap: a run in flight is not an overlap
// until its watch's next tick comes. The daemon wakes meanwhile (here for
// the outbox every 10 minutes); it used to take each wake for a skipped
// tick, because the tick that started the run was still the watch's next.
func TestDaemonWarnsOnlyOnRealOverlap(t *testing.T) {
	r := newDaemonRig(t, start.AddDate(0, 0, 5).Add(5*time.Hour))
	for d := 0; d < 5; d++ {
		r.h.src.addDay(t, d)
	}
	r.gate = make(chan struct{})
	r.gated = true
	r.d.DeliverEvery = 10 * time.Minute
	logs, log := newLogBuffer()
	r.d.Logger = log
	ctx, cancel := context.WithCancel(context.Background())
	stopped := make(chan error, 1)
	go func() { stopped <- r.d.Run(ctx) }()
	// The first run starts at 05:00 and hangs in its scan.
	settle(r.ft)
	for range 5 {
		r.ft.Advance(10 * time.Minute)
		settle(r.ft)
	}
	if n := logs.count("tick skipped"); n != 0 {
		t.Fatalf("%d overlap warnings before the next tick, want none:\n%s", n, logs)
	}
	// 06:00: the next tick finds the run still going: one real overlap.
	r.ft.Advance(10 * time.Minute)
	for deadline := time.Now().Add(20 * time.Second); logs.count("tick skipped") == 0 && time.Now().Before(deadline); {
		settle(r.ft)
	}
	settle(r.ft)
	if n := logs.count("tick skipped"); n != 1 {
		t.Fatalf("%d overlap warnings at the next tick, want 1:\n%s", n, logs)
	}
	r.gate <- struct{}{}
	r.expectRun(t)
	// The next day's run does not overlap anything.
	r.ft.Advance(24 * time.Hour)
	r.gate <- struct{}{}
	r.expectRun(t)
	cancel()
	if err := <-stopped; err != nil {
		t.Fatal(err)
	}
	if n := logs.count("tick skipped"); n != 1 {
		t.Fatalf("%d overlap warnings in all, want 1:\n%s", n, logs)
	}
}
