// Package storeview shows the agent's state store through web.View: the
// configured watches, their history points, runs and alerts. It only
// reads the store, so `plumb serve` can run it beside a running agent.
package storeview

import (
	"bytes"
	"cmp"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"slices"
	"sync"
	"time"

	"plumb/agent"
	"plumb/agent/config"
	"plumb/agent/web"
	"plumb/connectors"
	"plumb/diagnostics"
)

// View reads a state store for the dashboard.
//
// Everything a watch shows changes only when a run is committed (points,
// runs and alerts are written in the run's transaction), so a watch's
// detail is cached until its newest run id changes, or for at most
// CacheFor: a scrape or a page then costs one small query per watch.
type View struct {
	store   agent.Store
	watches []*config.Watch

	mu    sync.Mutex
	cache map[string]cached

	// CacheFor bounds how long a cached detail is reused even when no
	// run was committed (the alert history window slides; default 1 min).
	CacheFor time.Duration
	// RecentRuns is how many runs the watch page lists (default 50).
	RecentRuns int
	// AlertHistory is how long resolved alerts stay on the watch page
	// (default 30 days).
	AlertHistory time.Duration
	// SparkPoints is the length of the overview's trend (default 30).
	SparkPoints int
	// Now is the clock; nil means time.Now.
	Now func() time.Time
}

var (
	_ web.View         = (*View)(nil)
	_ web.Acknowledger = (*View)(nil)
)

// Acknowledge records an owner's acknowledgement of an open alert of a
// configured watch: the dashboard's one write.
func (v *View) Acknowledge(ctx context.Context, watch, id, by, note string, until time.Time) error {
	var w *config.Watch
	for _, c := range v.watches {
		if c.Name == watch {
			w = c
		}
	}
	if w == nil {
		return fmt.Errorf("watch %q: %w", watch, web.ErrNotFound)
	}
	as, err := v.store.Alerts(ctx, agent.AlertQuery{Watch: watch})
	if err != nil {
		return fmt.Errorf("watch %q: %w", watch, err)
	}
	if !slices.ContainsFunc(as, func(a agent.Alert) bool { return a.ID == id }) {
		return fmt.Errorf("watch %q: alert %s: %w", watch, id, web.ErrNotFound)
	}
	_, err = v.store.Acknowledge(ctx, id, agent.Ack{By: by, At: v.now(), Until: until, Note: note})
	v.mu.Lock()
	delete(v.cache, watch)
	v.mu.Unlock()
	switch {
	case errors.Is(err, agent.ErrNoAlert):
		return fmt.Errorf("watch %q: alert %s: %w", watch, id, web.ErrNotFound)
	case errors.Is(err, agent.ErrAlertResolved):
		return fmt.Errorf("watch %q: alert %s: %w", watch, id, web.ErrResolved)
	}
	return err
}

// New returns a view of st for the watches of cfg, in their order.
func New(st agent.Store, cfg *config.Config) *View {
	return &View{store: st, watches: cfg.Watches}
}

// cached is a watch's detail as of its newest run.
type cached struct {
	runID    int64
	full     bool
	loadedAt time.Time
	detail   *web.WatchDetail
}

// load returns the watch's detail, from the cache when its newest run is
// the one the cached detail was built from.
func (v *View) load(ctx context.Context, w *config.Watch, full bool) (*web.WatchDetail, error) {
	newest, err := v.store.Runs(ctx, w.Name, 1)
	if err != nil {
		return nil, fmt.Errorf("watch %q: %w", w.Name, err)
	}
	var id int64
	if len(newest) > 0 {
		id = newest[0].ID
	}
	now := v.now()
	v.mu.Lock()
	c, ok := v.cache[w.Name]
	v.mu.Unlock()
	if ok && c.runID == id && (c.full || !full) && now.Sub(c.loadedAt) < cmp.Or(v.CacheFor, time.Minute) && !now.Before(c.loadedAt) {
		d := *c.detail
		return &d, nil
	}
	d, err := v.detail(ctx, w, full)
	if err != nil {
		return nil, err
	}
	v.mu.Lock()
	if v.cache == nil {
		v.cache = make(map[string]cached)
	}
	v.cache[w.Name] = cached{runID: id, full: full, loadedAt: now, detail: d}
	v.mu.Unlock()
	c2 := *d
	return &c2, nil
}

func (v *View) now() time.Time {
	if v.Now != nil {
		return v.Now()
	}
	return time.Now()
}

// Watches returns every configured watch's summary.
func (v *View) Watches(ctx context.Context) ([]web.WatchSummary, error) {
	out := make([]web.WatchSummary, 0, len(v.watches))
	for _, w := range v.watches {
		d, err := v.load(ctx, w, false)
		if err != nil {
			return nil, err
		}
		out = append(out, d.Summary)
	}
	return out, nil
}

// Watch returns one watch with its history, reports, runs and alerts.
func (v *View) Watch(ctx context.Context, name string) (*web.WatchDetail, error) {
	for _, w := range v.watches {
		if w.Name == name {
			return v.load(ctx, w, true)
		}
	}
	return nil, fmt.Errorf("watch %q is not in the configuration: %w", name, web.ErrNotFound)
}

func (v *View) detail(ctx context.Context, w *config.Watch, full bool) (*web.WatchDetail, error) {
	lim := w.Limits
	d := &web.WatchDetail{Summary: web.WatchSummary{
		Name: w.Name, Source: w.Source, Table: w.Table, Target: w.Target, SegmentBy: w.SegmentBy, Schedule: w.Schedule,
		Limits: web.Limits{VIFWarn: lim.VIF.Warn, VIFCritical: lim.VIF.Critical, CondWarn: lim.Condition.Warn,
			CondCritical: lim.Condition.Critical, CondBasis: cmp.Or(lim.ConditionBasis, config.DefaultConditionBasis), Horizon: lim.Horizon.D()},
	}}
	if d.Summary.Table == "" {
		d.Summary.Table = "query"
	}

	points, err := v.store.Points(ctx, w.Name, agent.PointQuery{AllSegs: true})
	if err != nil {
		return nil, fmt.Errorf("watch %q: %w", w.Name, err)
	}
	bySeg := map[string][]agent.Point{}
	for _, p := range points {
		bySeg[p.Segment] = append(bySeg[p.Segment], p)
	}
	segs := make([]string, 0, len(bySeg)+1)
	for s := range bySeg {
		segs = append(segs, s)
	}
	if len(segs) == 0 {
		segs = append(segs, "")
	}
	slices.Sort(segs) // "" (the whole table) first
	trendPoints := cmp.Or(lim.TrendPoints, config.DefaultTrendPoints)
	for _, s := range segs {
		ps := bySeg[s]
		seg := web.SegmentDetail{SegmentSummary: web.SegmentSummary{Segment: s}}
		for _, p := range ps {
			// The numbers the rules judged: the condition number of the
			// watch's basis on the design without the columns that exact
			// and constant alerts explain, and whether the window was full.
			o, err := agent.ObservationFromPoint(p, lim.ConditionBasis)
			if err != nil {
				return nil, err
			}
			fs, err := PointFactors(p)
			if err != nil {
				return nil, fmt.Errorf("watch %q segment %s: %w", w.Name, connectors.ParseSegmentKey(s), err)
			}
			seg.Timeline = append(seg.Timeline, web.Point{At: p.At, ConditionNumber: p.ConditionNumber,
				CenteredCondition: p.CenteredCondition, Judged: o.Cond, Filling: !o.Full, MaxVIF: p.MaxVIF,
				Rank: p.Rank, Rows: p.RowsUsed, RowsDropped: p.RowsDropped, Columns: p.Columns, Factors: fs})
		}
		if full && len(ps) > 0 {
			if raw := ps[len(ps)-1].Report; len(raw) > 0 {
				var rep diagnostics.Report
				if err := json.Unmarshal(raw, &rep); err != nil {
					return nil, fmt.Errorf("watch %q segment %s: the stored report of %s does not decode: %w",
						w.Name, connectors.ParseSegmentKey(s), ps[len(ps)-1].At.Format(time.RFC3339), err)
				}
				seg.Report = &rep
			}
			if fc, ok := web.TrendForecast(seg.Timeline, web.MetricCondition, trendPoints, lim.Horizon.D(), lim.Condition.Critical); ok {
				seg.Forecasts = append(seg.Forecasts, fc)
			}
			if fc, ok := web.TrendForecast(seg.Timeline, web.MetricMaxVIF, trendPoints, lim.Horizon.D(), lim.VIF.Critical); ok {
				seg.Forecasts = append(seg.Forecasts, fc)
			}
		}
		d.Segments = append(d.Segments, seg)
	}

	runs, err := v.store.Runs(ctx, w.Name, 0)
	if err != nil {
		return nil, fmt.Errorf("watch %q: %w", w.Name, err)
	}
	keep := cmp.Or(v.RecentRuns, 50)
	for i, r := range runs { // newest first
		if r.Status == agent.StatusFailed {
			d.Summary.RunFailures++
			if i == d.Summary.ConsecutiveFailures {
				d.Summary.ConsecutiveFailures++
			}
		}
		if i < keep && (full || i == 0) {
			d.Runs = append(d.Runs, web.Run{ID: r.ID, Watch: r.Watch, StartedAt: r.StartedAt,
				Duration: r.FinishedAt.Sub(r.StartedAt), Status: r.Status, AsOf: r.AsOf,
				Backfill: r.Kind == agent.RunBackfill, RowsRead: r.RowsRead, RowsDropped: r.RowsDropped, Error: r.Error})
		}
	}

	since := v.now().Add(-cmp.Or(v.AlertHistory, 30*24*time.Hour))
	q := agent.AlertQuery{Watch: w.Name, Since: since}
	if !full {
		q = agent.AlertQuery{Watch: w.Name, OpenOnly: true}
	}
	alerts, err := v.store.Alerts(ctx, q)
	if err != nil {
		return nil, fmt.Errorf("watch %q: %w", w.Name, err)
	}
	for _, a := range alerts {
		wa := web.Alert{ID: a.ID, Watch: a.Watch, Rule: string(a.Rule), Severity: string(a.Severity), Onset: a.Onset, AsOf: a.AsOf,
			UpdatedAsOf: a.UpdatedAsOf, OpenedAt: a.OpenedAt, Message: a.Message, Segment: a.Segment,
			Columns: a.Columns, Equation: a.Detail.Equation, Remedy: a.Detail.Remedy, Metric: a.Detail.Metric}
		if wa.Columns == nil {
			wa.Columns = []string{}
		}
		if wa.Onset.IsZero() {
			wa.Onset = a.AsOf
		}
		if a.Detail.Metric == agent.MetricMaxVIF {
			wa.Drivers = a.Drivers
		}
		if !a.ResolvedAt.IsZero() {
			t, d := a.ResolvedAt, a.ResolvedAsOf
			wa.ResolvedAt, wa.ResolvedAsOf = &t, &d
		}
		if k := a.Ack; k != nil {
			wa.Acknowledged = &web.AlertAck{By: k.By, At: k.At, Until: k.Until, Note: k.Note,
				Lapsed: a.Open() && !agent.AckHolds(k, a.Severity, v.now())}
		}
		d.Alerts = append(d.Alerts, wa)
	}
	slices.SortStableFunc(d.Alerts, func(a, b web.Alert) int { return b.OpenedAt.Compare(a.OpenedAt) })
	web.Summarize(d, cmp.Or(v.SparkPoints, 30))
	return d, nil
}

// PointFactors returns the categorical columns of a stored point: the
// factor entries of its report's generalized VIFs (groups[]), empty when
// it has none. Only that part of the report is decoded.
func PointFactors(p agent.Point) ([]web.Factor, error) {
	if !bytes.Contains(p.Report, []byte(`"groups"`)) {
		return []web.Factor{}, nil
	}
	var r struct {
		Groups []diagnostics.GroupReport `json:"groups"`
	}
	if err := json.Unmarshal(p.Report, &r); err != nil {
		return nil, fmt.Errorf("the stored report of %s does not decode: %w", p.At.UTC().Format(time.RFC3339), err)
	}
	return web.FactorsOf(r.Groups), nil
}
