package agent_test

import (
	"context"
	"fmt"
	"io"
	"net/http"
	"net/http/httptest"
	"strings"
	"sync"
	"testing"
	"time"

	"plumb/agent"
	"plumb/agent/notify"
	"plumb/agent/sqlstore"
)

// hangingReceiver is a webhook endpoint that holds every request until
// the test lets it go (one request per token on release) or the sender
// gives up. It tells of each arrival and the most requests it held at
// once.
type hangingReceiver struct {
	srv     *httptest.Server
	arrived chan struct{}
	release chan struct{}

	mu      sync.Mutex
	inside  int
	most    int
	answers int
}

func newHangingReceiver(t *testing.T) *hangingReceiver {
	h := &hangingReceiver{arrived: make(chan struct{}, 1000), release: make(chan struct{})}
	h.srv = httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		io.ReadAll(r.Body)
		h.mu.Lock()
		h.inside++
		h.most = max(h.most, h.inside)
		h.mu.Unlock()
		defer func() {
			h.mu.Lock()
			h.inside--
			h.mu.Unlock()
		}()
		h.arrived <- struct{}{}
		select {
		case <-h.release:
			h.mu.Lock()
			h.answers++
			h.mu.Unlock()
			w.WriteHeader(http.StatusNoContent)
		case <-r.Context().Done():
		}
	}))
	t.Cleanup(func() {
		h.srv.CloseClientConnections()
		h.srv.Close()
	})
	return h
}

func (h *hangingReceiver) waitArrival(t *testing.T) {
	t.Helper()
	select {
	case <-h.arrived:
	case <-time.After(20 * time.Second):
		t.Fatal("no request arrived")
	}
}

// seedOutbox records n alerts of one watch, each with one undelivered
// opening for the notifier oncall.
func seedOutbox(t *testing.T, st *sqlstore.Store, n int, at time.Time) {
	t.Helper()
	res := &agent.RunResult{Run: agent.Run{Watch: "billing", Kind: agent.RunLive, Status: agent.StatusOK, StartedAt: at, FinishedAt: at}}
	for i := range n {
		id := fmt.Sprintf("alert-%02d", i)
		res.Alerts = append(res.Alerts, agent.Alert{ID: id, Watch: "billing", Rule: agent.RuleLevel, Subject: fmt.Sprintf("s%02d", i),
			Severity: agent.Warning, AsOf: at, OpenedAt: at, UpdatedAsOf: at, UpdatedAt: at, Message: "seeded", NotifyState: agent.NotifySent})
		res.Outbox = append(res.Outbox, agent.Delivery{EventID: id + ":opened", AlertID: id, Notifier: "oncall",
			Event: agent.EventOpened, Body: []byte(`{}`), CreatedAt: at, NextAttemptAt: at})
	}
	if _, err := st.CommitRun(context.Background(), res); err != nil {
		t.Fatal(err)
	}
}

// TestDeliveryConcurrencyBounded: twelve alerts to one receiver go at
// most three at a time, and indeed three at a time (it used to be one).
func TestDeliveryConcurrencyBounded(t *testing.T) {
	h := newHarness(t)
	recv := newHangingReceiver(t)
	seedOutbox(t, h.store, 12, start)
	h.del.Concurrency = 3
	h.del.Notifiers["oncall"] = agent.NotifierConfig{Notifier: &notify.Webhook{URL: recv.srv.URL, Secrets: []string{"k"}}, Timeout: time.Hour}
	done := make(chan agent.DeliverResult, 1)
	go func() {
		res, err := h.del.Once(context.Background())
		if err != nil {
			t.Error(err)
		}
		done <- res
	}()
	// Three requests are held at once before any is answered.
	for range 3 {
		recv.waitArrival(t)
	}
	// Then each answer lets one more in.
	for i := 0; i < 12; i++ {
		recv.release <- struct{}{}
		if i+3 < 12 {
			recv.waitArrival(t)
		}
	}
	res := <-done
	recv.mu.Lock()
	most := recv.most
	recv.mu.Unlock()
	if res.Delivered != 12 || most != 3 {
		t.Fatalf("delivered %d, at most %d at once; want 12 and 3", res.Delivered, most)
	}
}

// TestDeadReceiverCostsOneTimeout: a receiver that never answers costs a
// pass the attempts in flight when the first is cut at its timeout, not
// one timeout per entry; the others wait, untouched, for the next pass.
func TestDeadReceiverCostsOneTimeout(t *testing.T) {
	h := newHarness(t)
	recv := newHangingReceiver(t)
	seedOutbox(t, h.store, 12, start)
	h.clock.Set(start)
	h.del.Concurrency = 3
	h.del.Notifiers["oncall"] = agent.NotifierConfig{Notifier: &notify.Webhook{URL: recv.srv.URL, Secrets: []string{"k"}},
		Timeout: 200 * time.Millisecond, MaxAge: 24 * time.Hour}
	res, err := h.del.Once(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if res.Failed != 3 || res.Delivered != 0 || res.GaveUp != 0 {
		t.Fatalf("pass %+v: want 3 failed attempts (the ones in flight), nothing else", res)
	}
	ob, err := h.store.Outbox(context.Background(), "")
	if err != nil {
		t.Fatal(err)
	}
	tried := 0
	for _, e := range ob {
		tried += e.Attempts
	}
	if tried != 3 {
		t.Fatalf("%d attempts recorded, want 3", tried)
	}
}

// TestDaemonRunsWhileReceiverHangs: delivery used to run inside the
// scheduler's loop, so a receiver that hangs stopped every watch. Now
// the next tick's run happens while the delivery hangs, and shutdown cuts
// the delivery short without counting it: the outbox keeps every entry.
func TestDaemonRunsWhileReceiverHangs(t *testing.T) {
	r := newDaemonRig(t, start.AddDate(0, 0, 50).Add(5*time.Hour))
	for d := 0; d < 50; d++ {
		r.h.src.addDay(t, d)
	}
	recv := newHangingReceiver(t)
	r.h.del.Notifiers["oncall"] = agent.NotifierConfig{Notifier: &notify.Webhook{URL: recv.srv.URL, Secrets: []string{"k"}}, Timeout: time.Hour}
	ctx, cancel := context.WithCancel(context.Background())
	stopped := make(chan error, 1)
	go func() { stopped <- r.d.Run(ctx) }()
	out := r.expectRun(t)
	if len(out.Open) == 0 {
		t.Fatal("the first run opened no alert: nothing to deliver")
	}
	recv.waitArrival(t) // the delivery hangs from here on
	settle(r.ft)
	r.ft.Advance(time.Hour) // 06:00
	r.expectRun(t)
	cancel()
	select {
	case err := <-stopped:
		if err != nil {
			t.Fatal(err)
		}
	case <-time.After(20 * time.Second):
		t.Fatal("the daemon did not stop while a delivery hung")
	}
	ob, err := r.h.store.Outbox(context.Background(), "")
	if err != nil || len(ob) == 0 {
		t.Fatalf("outbox %v %v", ob, err)
	}
	for _, e := range ob {
		if !e.DeliveredAt.IsZero() || e.Attempts != 0 || !e.GivenUpAt.IsZero() {
			t.Fatalf("entry %s: delivered %v, attempts %d, given up %v; want it untouched", e.EventID, e.DeliveredAt, e.Attempts, e.GivenUpAt)
		}
	}
}

// TestAckWithholdsQueuedOpening: an alert opens while the receiver is
// down, so its opening waits in the outbox; the owner acknowledges it
// (from the dashboard, say) before the receiver is back. The opening
// is then withheld, not sent late, and says why; without the
// acknowledgement the same opening is delivered.
func TestAckWithholdsQueuedOpening(t *testing.T) {
	ctx := context.Background()
	for _, ack := range []bool{false, true} {
		h := newHarness(t)
		h.recv.mu.Lock()
		h.recv.down = true
		h.recv.mu.Unlock()
		var opened *agent.Alert
		for d := 0; d < 100 && opened == nil; d++ {
			if out := h.liveDay(d); len(out.Open) > 0 {
				opened = &out.Open[0]
			}
		}
		if opened == nil {
			t.Fatal("no alert opened")
		}
		if ack {
			if _, err := h.store.Acknowledge(ctx, opened.ID, agent.Ack{By: "hydro-analyst", At: h.clock.Now(), Note: "known: meter swap"}); err != nil {
				t.Fatal(err)
			}
		}
		h.recv.mu.Lock()
		h.recv.down = false
		h.recv.mu.Unlock()
		h.clock.Set(h.clock.Now().Add(2 * time.Hour)) // past the backoff
		res, err := h.del.Once(ctx)
		if err != nil {
			t.Fatal(err)
		}
		heard := 0
		for _, n := range h.recv.notifications() {
			if n.AlertID == opened.ID {
				heard++
			}
		}
		ob, err := h.store.Outbox(ctx, opened.ID)
		if err != nil {
			t.Fatal(err)
		}
		if len(ob) != 1 || ob[0].Event != agent.EventOpened {
			t.Fatalf("ack %v: outbox of the alert %+v, want its one opening", ack, ob)
		}
		e := ob[0]
		if !ack {
			if heard != 1 || res.Withheld != 0 || e.DeliveredAt.IsZero() {
				t.Fatalf("not acknowledged: heard %d times, pass %+v, entry delivered %v, last error %q; want the opening delivered", heard, res, e.DeliveredAt, e.LastError)
			}
			continue
		}
		if heard != 0 || res.Withheld != 1 || e.GivenUpAt.IsZero() || !e.DeliveredAt.IsZero() ||
			!strings.HasPrefix(e.LastError, "withheld: acknowledged by hydro-analyst at ") {
			t.Fatalf("acknowledged: heard %d times, pass %+v, entry delivered %v, given up %v, last error %q; want the opening withheld", heard, res, e.DeliveredAt, e.GivenUpAt, e.LastError)
		}
		// Withheld once: the next pass finds nothing of it due.
		h.clock.Set(h.clock.Now().Add(2 * time.Hour))
		if res, err := h.del.Once(ctx); err != nil || res.Withheld != 0 || res.Delivered != 0 {
			t.Fatalf("second pass %+v, %v: want nothing to do", res, err)
		}
	}
}
