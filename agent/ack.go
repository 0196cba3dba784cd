package agent

import (
	"encoding/json"
	"slices"
	"strconv"
	"time"
)

// Acknowledgements. An owner acknowledges an open alert, optionally for a
// while (a snooze), with a note. Until the acknowledgement lapses the
// alert is not notified again: an opening still waiting is held, and
// escalations up to the acknowledged severity are not sent. It lapses
// when the alert escalates past the acknowledged severity (that
// escalation is notified) or when the snooze ends: the next run then
// notifies once more (event snooze_ended) if the alert is still open, or
// sends the opening it held. Resolutions are notified as always.

// AckHolds reports whether ack keeps an alert of severity sev quiet at
// now.
func AckHolds(ack *Ack, sev Severity, now time.Time) bool {
	if ack == nil || !ack.EndedAt.IsZero() {
		return false
	}
	if !ack.Until.IsZero() && !now.Before(ack.Until) {
		return false
	}
	return sevRank(sev) <= sevRank(ack.Severity)
}

// ackOf returns the stored acknowledgement of alert a: runs never change
// it, so the stored one is the truth.
func (e *evaluation) ackOf(a *Alert) *Ack {
	if b, ok := e.before[a.ID]; ok && b.Ack != nil {
		return b.Ack
	}
	return a.Ack
}

// quiet reports whether the owner's acknowledgement holds back a's
// opening or escalation at now.
func (e *evaluation) quiet(a *Alert, now time.Time) bool {
	return AckHolds(e.ackOf(a), a.Severity, now)
}

// snoozesEnded finds the open alerts whose snooze has ended by now and
// was not yet seen to end. It records each end in res and returns the
// deliveries that say so for the alerts whose opening was sent (an opening
// still held is sent by finish, as the acknowledgement no longer holds).
// sent lists the alerts notified in this run already: they get no second
// notification.
func (e *evaluation) snoozesEnded(res *RunResult, now time.Time, sent map[string]bool) []Delivery {
	ids := make([]string, 0, len(e.before))
	for id, b := range e.before {
		if b.Ack != nil && b.Ack.EndedAt.IsZero() && !b.Ack.Until.IsZero() && !now.Before(b.Ack.Until) {
			ids = append(ids, id)
		}
	}
	slices.Sort(ids)
	var out []Delivery
	for _, id := range ids {
		a := e.before[id]
		if cur := e.alerts[id]; cur != nil {
			a = *cur
		}
		if !a.Open() {
			continue
		}
		ack := e.before[id].Ack
		res.SnoozesEnded = append(res.SnoozesEnded, SnoozeEnd{AlertID: id, Until: ack.Until, At: now})
		if a.NotifyState != NotifySent || sent[id] {
			continue
		}
		ended := *ack
		ended.EndedAt = now
		a.Ack = &ended
		body := e.notification(&a, EventSnoozeEnded, now)
		for _, n := range e.w.Notify {
			eid := id + ":" + EventSnoozeEnded + ":" + strconv.FormatInt(ack.Until.UnixMicro(), 10) + ":" + n
			b := body
			b.ID = eid
			raw, _ := json.Marshal(b)
			out = append(out, Delivery{EventID: eid, AlertID: id, Notifier: n, Event: EventSnoozeEnded,
				Body: raw, CreatedAt: now, NextAttemptAt: now})
		}
	}
	return out
}
