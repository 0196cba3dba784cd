package agent_test

import (
	"context"
	"testing"
	"time"

	"plumb/agent"
)

// TestAckInDrift lives through the drift scenario with a real store and
// webhook receiver: every notification carries the content owners need,
// and the first alert, acknowledged with a two-day snooze as soon as it
// opens, is heard of again only when it escalates past what was
// acknowledged, once when the snooze ends, and when it resolves.
func TestAckInDrift(t *testing.T) {
	h := newHarness(t)
	ctx := context.Background()
	var (
		acked string
		until time.Time
		sev   agent.Severity
	)
	for d := 0; d < 100; d++ {
		out := h.liveDay(d)
		if acked == "" && len(out.Open) > 0 {
			a := out.Open[0]
			until = h.clock.Now().Add(48 * time.Hour)
			got, err := h.store.Acknowledge(ctx, a.ID, agent.Ack{By: "hydro-analyst", At: h.clock.Now(), Until: until, Note: "billing migration"})
			if err != nil {
				t.Fatal(err)
			}
			acked, sev = a.ID, got.Ack.Severity
		}
	}
	if acked == "" {
		t.Fatal("no alert opened")
	}
	var ackedEvents []agent.Notification
	for _, n := range h.recv.notifications() {
		if n.Summary == "" || n.Caution != agent.CautionGovernance || n.RecordedAt.IsZero() || n.AsOf.IsZero() || n.Columns == nil {
			t.Errorf("notification lacks content: %+v", n)
		}
		if n.Rule != agent.RuleBlind && (n.Window == nil || n.Window.Rows == 0 || n.Onset == nil || len(n.Columns) == 0) {
			t.Errorf("notification %s lacks its window or onset: %+v", n.ID, n)
		}
		if (n.Event == agent.EventResolved) != (n.ResolvedAsOf != nil) {
			t.Errorf("notification %s: event %s, resolved_as_of %v", n.ID, n.Event, n.ResolvedAsOf)
		}
		if n.AlertID == acked {
			ackedEvents = append(ackedEvents, n)
		}
	}
	var sawEnd bool
	for _, n := range ackedEvents[1:] {
		switch n.Event {
		case agent.EventEscalated:
			if n.Severity == sev {
				t.Errorf("escalation within the acknowledged severity notified: %+v", n)
			}
		case agent.EventSnoozeEnded:
			if sawEnd || n.RecordedAt.Before(until) || n.Acknowledged == nil || n.Acknowledged.By != "hydro-analyst" {
				t.Errorf("snooze_ended: %+v", n)
			}
			sawEnd = true
		case agent.EventResolved:
		default:
			t.Errorf("acknowledged alert notified with %s", n.Event)
		}
	}
	as, err := h.store.Alerts(ctx, agent.AlertQuery{})
	if err != nil {
		t.Fatal(err)
	}
	for _, a := range as {
		if a.ID != acked {
			continue
		}
		stillOpenAfter := a.Open() || a.ResolvedAt.After(until)
		if stillOpenAfter != sawEnd {
			t.Errorf("alert open after the snooze: %v; snooze_ended sent: %v (%+v)", stillOpenAfter, sawEnd, a.Ack)
		}
		if a.Ack == nil || a.Ack.Note != "billing migration" {
			t.Errorf("acknowledgement lost by the runs: %+v", a.Ack)
		}
	}
	for _, n := range ackedEvents {
		t.Logf("%s %s: %s", n.Event, n.Severity, n.Summary)
	}
	t.Logf("acknowledged alert %s: %d notifications (%v snooze_ended)", acked, len(ackedEvents), sawEnd)
}
