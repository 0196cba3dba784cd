package agent_test

import (
	"context"
	"errors"
	"slices"
	"strings"
	"testing"
	"time"

	"plumb/agent"
	"plumb/connectors"
)

// panickySource is a real source whose Scan panics for requests of
// exactly `columns` columns, as a bug met by some data would.
type panickySource struct {
	connectors.Source
	columns int
}

func (p *panickySource) Scan(ctx context.Context, req connectors.Request) (*connectors.Result, error) {
	if len(req.Columns) == p.columns {
		var idx []int
		_ = idx[len(req.Columns)-10] // index out of range
	}
	return p.Source.Scan(ctx, req)
}

func openPanicky(columns int) func(ctx context.Context, url string) (connectors.Source, error) {
	return func(ctx context.Context, url string) (connectors.Source, error) {
		src, err := connectors.Open(ctx, url, connectors.Options{})
		if err != nil {
			return nil, err
		}
		return &panickySource{Source: src, columns: columns}, nil
	}
}

// TestPanickingRunIsAFailedRun: a run that panics used to record
// nothing, so its watch stayed ok and never went blind. Now each is a
// failed run, recorded and counted; the third opens the blind alert, and
// a good run closes it.
func TestPanickingRunIsAFailedRun(t *testing.T) {
	h := newHarness(t)
	for d := 0; d < 10; d++ {
		h.liveDay(d)
	}
	ctx := context.Background()
	h.run.OpenSource = openPanicky(4)
	for i := 1; i <= 3; i++ {
		h.clock.Set(h.clock.Now().Add(24 * time.Hour))
		out, err := h.run.Run(ctx, h.cfg.Watches[0], agent.RunOptions{})
		if err != nil {
			t.Fatalf("run %d: %v", i, err)
		}
		var pe *agent.PanicError
		if !errors.As(out.Err, &pe) || pe.Watch != "billing" || out.Run.Status != agent.StatusFailed ||
			!strings.Contains(out.Run.Error, "run panicked") || !strings.Contains(out.Run.Error, "index out of range") {
			t.Fatalf("run %d: %+v, err %v", i, out.Run, out.Err)
		}
		blind := slices.ContainsFunc(out.Open, func(a agent.Alert) bool { return a.Rule == agent.RuleBlind })
		if blind != (i >= 3) {
			t.Fatalf("after %d panics blind=%v", i, blind)
		}
	}
	runs, _ := h.store.Runs(ctx, "billing", 3)
	states, _ := h.store.States(ctx, "billing")
	if len(runs) != 3 || runs[0].Status != agent.StatusFailed || len(states) == 0 || states[0].Failures != 3 {
		t.Fatalf("recorded runs %+v, states %+v", runs, states)
	}
	h.run.OpenSource = nil
	out := h.liveDay(10)
	if slices.ContainsFunc(out.Open, func(a agent.Alert) bool { return a.Rule == agent.RuleBlind }) {
		t.Fatal("blind alert still open after a good run")
	}
}

// TestDaemonGoesOnAfterPanic: in the agent, a panicking watch is a failed
// watch (backing off like one); the other watch runs on its schedule.
func TestDaemonGoesOnAfterPanic(t *testing.T) {
	r := newDaemonRig(t, start.AddDate(0, 0, 5).Add(5*time.Hour))
	for d := 0; d < 5; d++ {
		r.h.src.addDay(t, d)
	}
	w2 := *r.h.cfg.Watches[0]
	w2.Name = "billing_short"
	w2.Columns = []string{"temperature_c", "residential_connections", "commercial_connections"}
	r.h.cfg.Watches = append(r.h.cfg.Watches, &w2)
	r.d.Watches = r.h.cfg.Watches
	for _, w := range r.d.Watches {
		w.Schedule = "*/10 * * * *"
	}
	r.h.run.OpenSource = openPanicky(4) // billing panics, billing_short does not
	got := map[string][]string{}
	ctx, cancel := context.WithCancel(context.Background())
	stopped := make(chan error, 1)
	go func() { stopped <- r.d.Run(ctx) }()
	// Every 10 minutes for an hour: billing_short runs each time; billing
	// fails and backs off 1, 2, 4, 8, 16 minutes, each to the next
	// 10-minute tick: it runs at 05:00, 05:10, 05:20, 05:30, 05:40, 06:00.
	for m := 0; m <= 60; m += 10 {
		want := 2
		if m == 50 {
			want = 1
		}
		for range want {
			out := r.expectRun(t)
			got[out.Run.Watch] = append(got[out.Run.Watch], out.Run.Status)
		}
		r.expectNoRun(t)
		if m < 60 {
			r.ft.Advance(10 * time.Minute)
		}
	}
	cancel()
	if err := <-stopped; err != nil {
		t.Fatal(err)
	}
	if n := len(got["billing_short"]); n != 7 || slices.Contains(got["billing_short"], agent.StatusFailed) {
		t.Fatalf("billing_short runs %v, want 7 good ones", got["billing_short"])
	}
	if n := len(got["billing"]); n != 6 || slices.Contains(got["billing"], agent.StatusOK) {
		t.Fatalf("billing runs %v, want 6 failed ones", got["billing"])
	}
	runs, _ := r.h.store.Runs(context.Background(), "billing", 0)
	if len(runs) != 6 || !strings.Contains(runs[0].Error, "run panicked") {
		t.Fatalf("recorded %d runs of billing, latest %+v", len(runs), runs[0])
	}
}
