package agent

import (
	"encoding/json"
	"strings"
	"testing"
	"time"

	"plumb/agent/config"
)

// ackFixture is an evaluation of a watch with one stored alert, judged at
// now, with the rules' changes given by the test.
func ackFixture(t *testing.T, stored Alert, changes []Change, now time.Time) *RunResult {
	t.Helper()
	w := &config.Watch{Name: "district_daily", Source: "districts", Table: "district_daily", Notify: []string{"oncall"}}
	r := &Runner{Config: &config.Config{PublicURL: "https://plumb.example.org"}}
	e := newEvaluation(r, w, RunOptions{Kind: RunLive}, []Alert{stored}, nil)
	e.apply(changes)
	res := &RunResult{}
	e.finish(res, now)
	return res
}

func outboxEvents(res *RunResult) []string {
	var out []string
	for _, d := range res.Outbox {
		out = append(out, d.Event)
	}
	return out
}

func TestAckHoldsAndLapses(t *testing.T) {
	day := func(d int) time.Time { return time.Date(2026, 8, 10+d, 6, 0, 0, 0, time.UTC) }
	base := Alert{ID: "a1", Watch: "district_daily", Rule: RuleLevel, Subject: MetricMaxVIF, Severity: Warning,
		AsOf: day(-1), OpenedAt: day(0), UpdatedAsOf: day(-1), UpdatedAt: day(0), NotifyState: NotifySent,
		Message: "max VIF 6.1 is at or above the warning level 5", Detail: AlertDetail{Metric: MetricMaxVIF, Value: 6.1, Limit: 5}}
	ack := &Ack{By: "hydro-analyst", At: day(0), Note: "meter rollout", Severity: Warning}
	escalated := base
	escalated.Severity, escalated.UpdatedAsOf = Critical, day(1)

	// Not acknowledged: the escalation is notified (the old behaviour).
	if got := outboxEvents(ackFixture(t, base, []Change{{Alert: escalated, Event: EventEscalated}}, day(2))); strings.Join(got, " ") != "escalated" {
		t.Fatalf("without an ack: %v", got)
	}
	// Acknowledged at warning: escalating past it is notified.
	acked := base
	acked.Ack = ack
	esc := escalated
	esc.Ack = ack
	if got := outboxEvents(ackFixture(t, acked, []Change{{Alert: esc, Event: EventEscalated}}, day(2))); strings.Join(got, " ") != "escalated" {
		t.Fatalf("escalation past the acknowledged severity: %v", got)
	}
	// Acknowledged at critical: a later "escalation" to critical is not
	// news to the owner.
	critAck := &Ack{By: "hydro-analyst", At: day(0), Severity: Critical}
	acked.Ack = critAck
	if got := outboxEvents(ackFixture(t, acked, []Change{{Alert: escalated, Event: EventEscalated}}, day(2))); len(got) != 0 {
		t.Fatalf("escalation within the acknowledged severity notified: %v", got)
	}
	// A resolution is notified even while acknowledged.
	resolved := base
	resolved.ResolvedAsOf, resolved.ResolvedAt = day(3), day(4)
	acked.Ack = ack
	if got := outboxEvents(ackFixture(t, acked, []Change{{Alert: resolved, Event: EventResolved}}, day(4))); strings.Join(got, " ") != "resolved" {
		t.Fatalf("resolution while acknowledged: %v", got)
	}

	// A snooze: quiet until it ends; the first run after it says so once,
	// with the acknowledgement in the body, and records the end.
	snoozed := base
	snoozed.Ack = &Ack{By: "hydro-analyst", At: day(0), Until: day(3), Note: "meter rollout", Severity: Critical}
	if res := ackFixture(t, snoozed, nil, day(2)); len(res.Outbox) != 0 || len(res.SnoozesEnded) != 0 {
		t.Fatalf("during the snooze: %v, %v", outboxEvents(res), res.SnoozesEnded)
	}
	res := ackFixture(t, snoozed, nil, day(3))
	if strings.Join(outboxEvents(res), " ") != "snooze_ended" || len(res.SnoozesEnded) != 1 ||
		!res.SnoozesEnded[0].Until.Equal(day(3)) || !res.SnoozesEnded[0].At.Equal(day(3)) {
		t.Fatalf("at the end of the snooze: %v, %+v", outboxEvents(res), res.SnoozesEnded)
	}
	var n Notification
	if err := json.Unmarshal(res.Outbox[0].Body, &n); err != nil {
		t.Fatal(err)
	}
	if n.Acknowledged == nil || n.Acknowledged.By != "hydro-analyst" || n.Acknowledged.Note != "meter rollout" ||
		!strings.HasSuffix(n.Summary, "still open after the snooze") || n.Event != EventSnoozeEnded {
		t.Fatalf("snooze_ended body: %+v", n)
	}
	if res.Outbox[0].EventID != "a1:snooze_ended:"+itoa(day(3).UnixMicro())+":oncall" {
		t.Fatalf("event id %q", res.Outbox[0].EventID)
	}
	// Once the end is recorded, later runs do not repeat it.
	snoozed.Ack.EndedAt = day(3)
	if res := ackFixture(t, snoozed, nil, day(5)); len(res.Outbox) != 0 || len(res.SnoozesEnded) != 0 {
		t.Fatalf("after the recorded end: %v, %v", outboxEvents(res), res.SnoozesEnded)
	}
	// A snooze that ends after the alert resolved says nothing.
	gone := resolved
	gone.Ack = &Ack{By: "x", At: day(0), Until: day(3), Severity: Warning}
	if res := ackFixture(t, gone, nil, day(5)); len(res.Outbox) != 0 || len(res.SnoozesEnded) != 0 {
		t.Fatalf("resolved alert: %v, %v", outboxEvents(res), res.SnoozesEnded)
	}

	// An opening still waiting (a backfill recorded it) is held while
	// acknowledged, and sent once the snooze ends, with no snooze_ended
	// beside it.
	pending := base
	pending.NotifyState = NotifyPending
	pending.Ack = &Ack{By: "hydro-analyst", At: day(0), Until: day(3), Severity: Warning}
	res = ackFixture(t, pending, nil, day(1))
	if len(res.Outbox) != 0 {
		t.Fatalf("held opening sent: %v", outboxEvents(res))
	}
	for _, a := range res.Alerts {
		if a.ID == "a1" && a.NotifyState != NotifyPending {
			t.Fatalf("held opening marked %s", a.NotifyState)
		}
	}
	res = ackFixture(t, pending, nil, day(3))
	if strings.Join(outboxEvents(res), " ") != "opened" || len(res.SnoozesEnded) != 1 {
		t.Fatalf("opening after the snooze: %v, %+v", outboxEvents(res), res.SnoozesEnded)
	}
}

// TestAckHoldsInBackfill: a backfill that notifies replays each alert's
// events as they happened, but not the openings and escalations an
// owner's acknowledgement holds back, as a live run would not send them;
// the resolution is sent, and without the acknowledgement everything is.
func TestAckHoldsInBackfill(t *testing.T) {
	day := func(d int) time.Time { return time.Date(2026, 8, 10+d, 6, 0, 0, 0, time.UTC) }
	base := Alert{ID: "a1", Watch: "district_daily", Rule: RuleLevel, Subject: MetricMaxVIF, Severity: Warning,
		AsOf: day(-1), OpenedAt: day(0), UpdatedAsOf: day(-1), UpdatedAt: day(0), NotifyState: NotifySent,
		Message: "max VIF 6.1 is at or above the warning level 5", Detail: AlertDetail{Metric: MetricMaxVIF, Value: 6.1, Limit: 5}}
	escalated := base
	escalated.Severity, escalated.UpdatedAsOf = Critical, day(1)
	resolved := escalated
	resolved.ResolvedAsOf, resolved.ResolvedAt = day(3), day(4)
	run := func(stored Alert, changes []Change) []string {
		w := &config.Watch{Name: "district_daily", Source: "districts", Table: "district_daily", Notify: []string{"oncall"}}
		r := &Runner{Config: &config.Config{PublicURL: "https://plumb.example.org"}}
		e := newEvaluation(r, w, RunOptions{Kind: RunBackfill, Notify: true}, []Alert{stored}, nil)
		e.apply(changes)
		res := &RunResult{}
		e.finish(res, day(5))
		return outboxEvents(res)
	}
	esc := []Change{{Alert: base, Event: EventOpened}, {Alert: escalated, Event: EventEscalated}}
	if got := strings.Join(run(base, esc), " "); got != "escalated" {
		t.Fatalf("not acknowledged: %q, want the escalation (the opening was sent before)", got)
	}
	acked := base
	acked.Ack = &Ack{By: "hydro-analyst", At: day(0), Severity: Critical}
	if got := run(acked, esc); len(got) != 0 {
		t.Fatalf("acknowledged at critical: %v, want nothing", got)
	}
	withEnd := append(esc, Change{Alert: resolved, Event: EventResolved})
	if got := strings.Join(run(acked, withEnd), " "); got != "resolved" {
		t.Fatalf("acknowledged, then resolved: %q, want the resolution alone", got)
	}
	// Acknowledged at warning: the escalation past it is news.
	acked.Ack = &Ack{By: "hydro-analyst", At: day(0), Severity: Warning}
	if got := strings.Join(run(acked, esc), " "); got != "escalated" {
		t.Fatalf("escalation past the acknowledged severity: %q", got)
	}
}

func itoa(v int64) string { b, _ := json.Marshal(v); return string(b) }

func TestAckHolds(t *testing.T) {
	now := time.Date(2026, 8, 12, 0, 0, 0, 0, time.UTC)
	for _, c := range []struct {
		name string
		ack  *Ack
		sev  Severity
		want bool
	}{
		{"none", nil, Warning, false},
		{"open-ended", &Ack{Severity: Warning}, Warning, true},
		{"escalated past", &Ack{Severity: Warning}, Critical, false},
		{"critical covers warning", &Ack{Severity: Critical}, Warning, true},
		{"snoozed", &Ack{Severity: Critical, Until: now.Add(time.Minute)}, Critical, true},
		{"snooze over", &Ack{Severity: Critical, Until: now}, Critical, false},
		{"ended", &Ack{Severity: Critical, Until: now.Add(time.Hour), EndedAt: now}, Critical, false},
	} {
		if got := AckHolds(c.ack, c.sev, now); got != c.want {
			t.Errorf("%s: %v, want %v", c.name, got, c.want)
		}
	}
}
