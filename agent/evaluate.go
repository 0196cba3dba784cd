package agent

import (
	"cmp"
	"context"
	"encoding/json"
	"fmt"
	"slices"
	"strconv"
	"strings"
	"time"

	"plumb/agent/config"
	"plumb/connectors"
)

// evaluation carries the alert side of one run: the alerts and rule
// states before it, the changes the rules make, and at the end the
// notifications to enqueue.
type evaluation struct {
	r   *Runner
	w   *config.Watch
	opt RunOptions

	before   map[string]Alert             // stored alerts by id, as they were
	alerts   map[string]*Alert            // current version of touched alerts by id
	open     map[string]map[string]*Alert // segment → key → open alert
	states   map[string]*WatchState       // by segment
	rule     map[string]*RuleState        // by segment, decoded lazily
	touched  map[string]bool              // segments whose state changed
	events   []eventRec
	failures int
	deleted  []string
}

type eventRec struct {
	id    string
	event string
	alert Alert
}

func newEvaluation(r *Runner, w *config.Watch, opt RunOptions, stored []Alert, states []WatchState) *evaluation {
	e := &evaluation{r: r, w: w, opt: opt,
		before: map[string]Alert{}, alerts: map[string]*Alert{}, open: map[string]map[string]*Alert{},
		states: map[string]*WatchState{}, rule: map[string]*RuleState{}, touched: map[string]bool{}}
	for _, a := range stored {
		e.before[a.ID] = a
		if a.Open() {
			c := a
			e.openOf(a.Segment)[a.Key()] = &c
		}
	}
	for i := range states {
		st := states[i]
		e.states[st.Segment] = &st
	}
	if st := e.states[""]; st != nil {
		e.failures = st.Failures
	}
	return e
}

func (e *evaluation) openOf(seg string) map[string]*Alert {
	m := e.open[seg]
	if m == nil {
		m = map[string]*Alert{}
		e.open[seg] = m
	}
	return m
}

func (e *evaluation) rules(seg string) *Rules {
	return &Rules{Watch: e.w.Name, Segment: seg, Limits: e.w.Limits, Expected: e.w.ExpectedDependencies,
		Bucket: e.w.Bucket, Loc: e.w.Location}
}

func (e *evaluation) ruleState(seg string) (*RuleState, error) {
	if st := e.rule[seg]; st != nil {
		return st, nil
	}
	var raw []byte
	if ws := e.states[seg]; ws != nil {
		raw = ws.State
	}
	st, err := DecodeRuleState(raw)
	if err != nil {
		return nil, fmt.Errorf("watch %q segment %s: %w", e.w.Name, connectors.ParseSegmentKey(seg), err)
	}
	e.rule[seg] = st
	return st, nil
}

func (e *evaluation) apply(changes []Change) {
	for _, ch := range changes {
		a := ch.Alert
		if b, ok := e.before[a.ID]; ok {
			a.OpenedAt = b.OpenedAt
			a.NotifyState = b.NotifyState
		} else if prev := e.alerts[a.ID]; prev != nil {
			a.NotifyState = prev.NotifyState
		}
		e.alerts[a.ID] = &a
		if ch.Event != "" {
			e.events = append(e.events, eventRec{id: a.ID, event: ch.Event, alert: a})
		}
	}
}

func (e *evaluation) failure(err error, now time.Time) {
	e.failures++
	e.touched[""] = true
	e.apply(e.rules("").Failure(e.openOf(""), e.failures, err.Error(), now))
}

func (e *evaluation) success(ctx context.Context, col *collected, now time.Time) error {
	e.failures = 0
	e.touched[""] = true
	e.apply(e.rules("").Success(e.openOf(""), now))
	if col.rebuilt {
		return e.replay(ctx, col, now)
	}
	for _, seg := range col.segmentOrder {
		st, err := e.ruleState(seg)
		if err != nil {
			return err
		}
		var through time.Time
		if ws := e.states[seg]; ws != nil {
			through = ws.EvaluatedThrough
		}
		rules := e.rules(seg)
		for _, po := range col.points[seg] {
			if !po.p.At.After(through) {
				continue // already judged when first seen
			}
			e.apply(rules.Step(st, e.openOf(seg), po.o, now))
			e.setThrough(seg, po.p.At)
		}
	}
	return nil
}

func (e *evaluation) setThrough(seg string, at time.Time) {
	ws := e.states[seg]
	if ws == nil {
		ws = &WatchState{Watch: e.w.Name, Segment: seg}
		e.states[seg] = ws
	}
	ws.EvaluatedThrough = at
	e.touched[seg] = true
}

// replay re-evaluates the rules over the whole history (the stored points
// before the rescan and the new ones) from a fresh state, as a backfill
// must, and drops stored alerts that the replay no longer finds.
func (e *evaluation) replay(ctx context.Context, col *collected, now time.Time) error {
	history := map[string][]pointObs{}
	if !col.replaceAll {
		old, err := e.r.Store.Points(ctx, e.w.Name, PointQuery{AllSegs: true, To: col.replaceFrom.Add(time.Microsecond)})
		if err != nil {
			return err
		}
		for _, p := range old {
			o, err := ObservationFromPoint(p, e.w.Limits.ConditionBasis)
			if err != nil {
				return err
			}
			history[p.Segment] = append(history[p.Segment], pointObs{p, o})
		}
	}
	for seg, ps := range col.points {
		history[seg] = append(history[seg], ps...)
	}
	// Forget every alert but blind ones; the replay finds them again.
	for _, m := range e.open {
		for k, a := range m {
			if a.Rule != RuleBlind {
				delete(m, k)
			}
		}
	}
	segs := make([]string, 0, len(history))
	for s := range history {
		segs = append(segs, s)
	}
	slices.Sort(segs)
	for _, seg := range segs {
		st, _ := DecodeRuleState(nil)
		e.rule[seg] = st
		e.touched[seg] = true
		ps := history[seg]
		slices.SortFunc(ps, func(a, b pointObs) int { return a.p.At.Compare(b.p.At) })
		rules := e.rules(seg)
		for _, po := range ps {
			e.apply(rules.Step(st, e.openOf(seg), po.o, now))
			e.setThrough(seg, po.p.At)
		}
	}
	for id, a := range e.before {
		if a.Rule == RuleBlind {
			continue
		}
		if _, again := e.alerts[id]; !again {
			e.deleted = append(e.deleted, id)
		}
	}
	slices.Sort(e.deleted)
	return nil
}

// sameEquation groups the exact-dependency openings this run is about to
// notify by their equation: one equation found in several segments is one
// notification, sent with the first segment's alert (the leader) and
// listing them all; the others follow it.
func (e *evaluation) sameEquation(ids []string, now time.Time) (leaders map[string][]string, follows map[string]bool) {
	leaders, follows = map[string][]string{}, map[string]bool{}
	first := map[string]string{} // equation → leader id
	for _, id := range ids {
		a := e.alerts[id]
		b, existed := e.before[id]
		if a.Rule != RuleExact || !a.Open() || existed && b.NotifyState == NotifySent || e.quiet(a, now) {
			continue
		}
		k := a.Subject + "\x00" + a.Detail.Equation
		l, ok := first[k]
		if !ok {
			first[k] = id
			leaders[id] = []string{a.Segment}
			continue
		}
		leaders[l] = append(leaders[l], a.Segment)
		follows[id] = true
	}
	return leaders, follows
}

// finish decides the notifications and fills the run's alert, state and
// outbox parts.
func (e *evaluation) finish(res *RunResult, now time.Time) {
	var outbox []Delivery
	var together map[string][]string // leader id → the segments its opening speaks for
	enqueue := func(a *Alert, event string) {
		body := e.notification(a, event, now)
		if segs := together[a.ID]; event == EventOpened && len(segs) > 1 {
			body.Segments = segs
			labels := make([]string, len(segs))
			for i, s := range segs {
				labels[i] = connectors.SegmentLabel(s)
			}
			body.Message = fmt.Sprintf("in %d segments (%s): %s", len(segs), strings.Join(labels, ", "),
				strings.TrimPrefix(body.Message, "segment "+connectors.SegmentLabel(a.Segment)+": "))
		}
		for _, n := range e.w.Notify {
			eid := a.ID + ":" + event
			if event == EventEscalated {
				eid += ":" + strconv.FormatInt(a.UpdatedAsOf.UnixMicro(), 10)
			}
			eid += ":" + n
			b := body
			b.ID = eid
			raw, _ := json.Marshal(b)
			outbox = append(outbox, Delivery{EventID: eid, AlertID: a.ID, Notifier: n, Event: event,
				Body: raw, CreatedAt: now, NextAttemptAt: now})
		}
	}
	// Alerts from earlier backfills still waiting for their opening.
	for id, b := range e.before {
		if b.Open() && b.NotifyState == NotifyPending && e.alerts[id] == nil {
			c := b
			e.alerts[id] = &c
		}
	}
	ids := make([]string, 0, len(e.alerts))
	for id := range e.alerts {
		ids = append(ids, id)
	}
	slices.SortFunc(ids, func(x, y string) int {
		a, b := e.alerts[x], e.alerts[y]
		return cmp.Or(a.AsOf.Compare(b.AsOf), cmp.Compare(a.Segment, b.Segment), cmp.Compare(a.Rule, b.Rule),
			cmp.Compare(a.Subject, b.Subject), cmp.Compare(x, y))
	})

	switch {
	case e.opt.Kind == RunBackfill && !e.opt.Notify:
		for _, id := range ids {
			a := e.alerts[id]
			if a.NotifyState != NotifySent {
				a.NotifyState = NotifyPending
				if !a.Open() {
					a.NotifyState = NotifySuppressed
				}
			}
		}
	case e.opt.Kind == RunBackfill:
		// Every event as it happened, in data order.
		evs := slices.Clone(e.events)
		slices.SortStableFunc(evs, func(x, y eventRec) int { return x.alert.UpdatedAsOf.Compare(y.alert.UpdatedAsOf) })
		for _, ev := range evs {
			a := ev.alert
			b, existed := e.before[ev.id]
			if ev.event == EventOpened && existed && b.NotifyState == NotifySent {
				continue // delivered before the backfill
			}
			if pages(ev.event) && e.quiet(e.alerts[ev.id], now) {
				// Acknowledged: held, as in a live run (an opening
				// waits until the acknowledgement lapses).
				continue
			}
			enqueue(&a, ev.event)
			e.alerts[ev.id].NotifyState = NotifySent
		}
		for _, id := range ids {
			if a := e.alerts[id]; a.Open() && a.NotifyState == NotifyPending && !e.quiet(a, now) {
				enqueue(a, EventOpened)
				a.NotifyState = NotifySent
			}
		}
	default:
		var follows map[string]bool
		together, follows = e.sameEquation(ids, now)
		for _, id := range ids {
			a := e.alerts[id]
			b, existed := e.before[id]
			wasSent := existed && b.NotifyState == NotifySent
			if a.Open() {
				switch {
				case !wasSent && follows[id]:
					a.NotifyState = NotifySent // its leader's notification names its segment
				case !wasSent:
					if !e.quiet(a, now) { // else held until the acknowledgement lapses
						enqueue(a, EventOpened)
						a.NotifyState = NotifySent
					}
				case sevRank(a.Severity) > sevRank(b.Severity) && !e.quiet(a, now):
					enqueue(a, EventEscalated)
				}
				continue
			}
			if wasSent && b.Open() {
				enqueue(a, EventResolved)
			} else if !wasSent {
				a.NotifyState = NotifySuppressed
			}
		}
	}
	if e.opt.Kind != RunBackfill || e.opt.Notify {
		sent := map[string]bool{}
		for _, d := range outbox {
			sent[d.AlertID] = true
		}
		outbox = append(outbox, e.snoozesEnded(res, now, sent)...)
	}
	for _, id := range ids {
		res.Alerts = append(res.Alerts, *e.alerts[id])
	}
	res.DeleteAlerts = e.deleted
	res.Outbox = outbox

	segs := make([]string, 0, len(e.touched))
	for s := range e.touched {
		segs = append(segs, s)
	}
	slices.Sort(segs)
	for _, seg := range segs {
		ws := e.states[seg]
		if ws == nil {
			ws = &WatchState{Watch: e.w.Name, Segment: seg}
		}
		ws.Watch = e.w.Name
		if st := e.rule[seg]; st != nil {
			ws.State = st.Encode()
		}
		if seg == "" {
			ws.Failures = e.failures
		}
		ws.LastRunAt = now
		res.States = append(res.States, *ws)
	}
}

// openAlerts lists the watch's open alerts after the run.
func (e *evaluation) openAlerts() []Alert {
	var out []Alert
	for _, m := range e.open {
		for _, a := range m {
			if cur := e.alerts[a.ID]; cur != nil {
				out = append(out, *cur)
			} else {
				out = append(out, *a)
			}
		}
	}
	slices.SortFunc(out, func(a, b Alert) int {
		return cmp.Or(a.AsOf.Compare(b.AsOf), cmp.Compare(a.Segment, b.Segment), cmp.Compare(a.Rule, b.Rule), cmp.Compare(a.ID, b.ID))
	})
	return out
}
