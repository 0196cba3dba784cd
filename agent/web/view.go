// Package web is plumb's HTTP face: the dashboard (server-rendered HTML
// with inline SVG charts, no JavaScript), the JSON API, /healthz and the
// Prometheus /metrics endpoint.
//
// Everything it shows comes through View, a small read-only interface
// over what the agent knows (its state store; agent/web/storeview adapts
// it). The package computes no diagnostics or alerts itself: it lays out
// what the View gives. TrendForecast is a helper for Views whose store
// keeps no forecast; WriteTimelineSVG and WriteTimelinePNG draw the
// timeline charts into files.
package web

import (
	"cmp"
	"context"
	"encoding/json"
	"errors"
	"math"
	"slices"
	"time"

	"plumb/diagnostics"
)

// View is the read side of plumb's state that the server renders. An
// implementation must be safe for concurrent use; every call may hit the
// store, so the server calls it once per page, API request or scrape.
//
// Watches lists every configured watch, in the order they should appear
// (configuration order). Watch returns one watch in full; an unknown name
// returns an error that wraps ErrNotFound.
type View interface {
	Watches(ctx context.Context) ([]WatchSummary, error)
	Watch(ctx context.Context, name string) (*WatchDetail, error)
}

// ErrNotFound is wrapped by View.Watch for a watch that does not exist.
var ErrNotFound = errors.New("not found")

// State is the verdict on a watch or a segment.
type State string

// States, from best to worst. A watch is blind when its recent runs
// failed, so its numbers are stale.
const (
	StateOK       State = "ok"
	StateWarning  State = "warning"
	StateCritical State = "critical"
	StateBlind    State = "blind"
)

// rank orders states for "worst of".
func (s State) rank() int {
	switch s {
	case StateWarning:
		return 1
	case StateCritical:
		return 2
	case StateBlind:
		return 3
	}
	return 0
}

// Worse returns the worse of s and t.
func (s State) Worse(t State) State {
	if t.rank() > s.rank() {
		return t
	}
	if s == "" {
		return StateOK
	}
	return s
}

// Limits are a watch's configured levels. A zero level is not drawn.
type Limits struct {
	VIFWarn      float64 `json:"vif_warn"`
	VIFCritical  float64 `json:"vif_critical"`
	CondWarn     float64 `json:"condition_warn"`
	CondCritical float64 `json:"condition_critical"`
	// CondBasis says which condition number the condition levels judge:
	// "centered" (the columns among themselves) or "intercept".
	CondBasis string        `json:"condition_basis"`
	Horizon   time.Duration `json:"-"`
}

// WatchSummary is one row of the overview.
type WatchSummary struct {
	Name      string `json:"name"`
	Source    string `json:"source"` // the source's name, never its URL
	Table     string `json:"table"`  // table name, or "query"
	Target    string `json:"target,omitempty"`
	SegmentBy string `json:"segment_by,omitempty"`
	Schedule  string `json:"schedule,omitempty"`
	Limits    Limits `json:"limits"`

	// State is the worst of the segments' states, or blind.
	State State `json:"state"`
	// Segments has one entry per segment; the whole table has Segment ""
	// (connectors.WholeTable) and, when present, comes first.
	Segments []SegmentSummary `json:"segments"`
	// OpenAlerts are the alerts not yet resolved, most severe first.
	OpenAlerts []Alert `json:"open_alerts"`
	// LastRun is the most recent run, nil before the first.
	LastRun *Run `json:"last_run"`
	// RunFailures counts every failed run; ConsecutiveFailures the
	// failures since the last run that succeeded.
	RunFailures         int64 `json:"run_failures"`
	ConsecutiveFailures int   `json:"consecutive_failures"`
}

// SegmentCount is the number of segments (values of SegmentBy), not
// counting the whole table.
func (w *WatchSummary) SegmentCount() int {
	n := 0
	for _, s := range w.Segments {
		if s.Segment != "" {
			n++
		}
	}
	return n
}

// Headline returns the segment the overview shows for the watch: the
// whole table when present, else the first segment; nil when none.
func (w *WatchSummary) Headline() *SegmentSummary {
	for i := range w.Segments {
		if w.Segments[i].Segment == "" {
			return &w.Segments[i]
		}
	}
	if len(w.Segments) > 0 {
		return &w.Segments[0]
	}
	return nil
}

// SegmentSummary is a segment's state and its latest point.
type SegmentSummary struct {
	// Segment is the series key (connectors.SegmentKey; "" = the whole
	// table). JSON shows it decoded: see segmentjson.go.
	Segment string `json:"-"`
	State   State  `json:"state"`
	Latest  *Point `json:"latest"` // nil before the first successful run
	// Trend holds recent points, oldest first, for a sparkline.
	Trend []Point `json:"trend"`
}

// WatchDetail is everything the watch page shows.
type WatchDetail struct {
	Summary  WatchSummary    `json:"summary"`
	Segments []SegmentDetail `json:"segments"` // same order as Summary.Segments
	// Runs are the recent runs, newest first.
	Runs []Run `json:"runs"`
	// Alerts are the open and recently resolved alerts, newest first.
	Alerts []Alert `json:"alerts"`
}

// Segment returns the segment of a key, or nil.
func (d *WatchDetail) Segment(name string) *SegmentDetail {
	for i := range d.Segments {
		if d.Segments[i].Segment == name {
			return &d.Segments[i]
		}
	}
	return nil
}

// SegmentDetail is one segment's history and last report.
type SegmentDetail struct {
	SegmentSummary
	// Timeline holds one point per window end, oldest first.
	Timeline []Point `json:"timeline"`
	// Forecasts extend the timeline (at most one per metric).
	Forecasts []Forecast `json:"forecasts"`
	// Report is the last successful run's diagnostics, nil before one.
	Report *diagnostics.Report `json:"report"`
	// Factors are the categorical columns of the latest point (the
	// timeline's last), and NewLevels the levels that first occur in
	// the rows after the timeline's first full window. Summarize fills
	// both.
	Factors   []Factor   `json:"factors"`
	NewLevels []NewLevel `json:"new_levels"`
}

// Forecast returns the forecast of metric, or nil.
func (s *SegmentDetail) Forecast(metric string) *Forecast { return forecastOf(s.Forecasts, metric) }

// forecastOf returns the forecast of metric in fs, nil when there is none.
func forecastOf(fs []Forecast, metric string) *Forecast {
	for i := range fs {
		if fs[i].Metric == metric {
			return &fs[i]
		}
	}
	return nil
}

// Point is one entry of a timeline: the diagnostics of the window ending
// at At. Its JSON form is the one of `plumb history --format json`, with
// extra fields beside. A metric that is not finite (an exact dependency
// makes the condition number unbounded) is +Inf here and null in JSON.
type Point struct {
	At time.Time `json:"at"`
	// ConditionNumber (with the intercept) and CenteredCondition describe
	// the whole design: +Inf (null in JSON) when it is singular.
	ConditionNumber   float64 `json:"condition_number"`
	CenteredCondition float64 `json:"centered_condition_number"`
	// Judged is the condition number the limits apply to (the watch's
	// basis), on the design without the columns that exact and constant
	// alerts explain.
	Judged float64 `json:"judged_condition_number"`
	// Filling marks a window that is not yet full: no alert comes from it.
	Filling     bool    `json:"filling,omitempty"`
	MaxVIF      float64 `json:"max_vif"`
	Rank        int     `json:"rank"`
	Rows        int64   `json:"rows"`
	RowsDropped int64   `json:"rows_dropped"`
	// Columns is the number of regressors; the design [1 X] has full
	// rank Columns+1.
	Columns int `json:"columns"`
	// Factors are the categorical columns' generalized VIFs in this
	// window, in the report's order (empty for a watch without one).
	Factors []Factor `json:"factors"`
}

// RankDeficiency is the number of exact dependencies: Columns+1−Rank.
func (p Point) RankDeficiency() int {
	if p.Columns == 0 {
		return 0
	}
	return max(p.Columns+1-p.Rank, 0)
}

// Metric names, used by Forecast.Metric and in the JSON API.
const (
	MetricCondition = "condition_number"
	MetricMaxVIF    = "max_vif"
)

// Forecast is a trend's projection of one metric, with its uncertainty.
type Forecast struct {
	Metric string `json:"metric"` // MetricCondition or MetricMaxVIF
	// Points start at the last observed point, oldest first.
	Points []ForecastPoint `json:"points"`
	// Crosses is when the central line reaches the critical level; zero
	// when not within the horizon.
	Crosses time.Time `json:"crosses,omitzero"`
	// Message says it in words, e.g. "reaches 30 in about 5 days".
	Message string `json:"message,omitempty"`
}

// ForecastPoint is the central value and the band around it.
type ForecastPoint struct {
	At    time.Time `json:"at"`
	Value float64   `json:"value"`
	Low   float64   `json:"low"`
	High  float64   `json:"high"`
}

// Run is one execution of a watch.
type Run struct {
	ID          int64         `json:"id"`
	Watch       string        `json:"watch"`
	StartedAt   time.Time     `json:"started_at"`
	Duration    time.Duration `json:"-"`
	Status      string        `json:"status"` // RunOK, RunFailed or RunRunning
	AsOf        time.Time     `json:"as_of,omitzero"`
	Backfill    bool          `json:"backfill,omitempty"`
	RowsRead    int64         `json:"rows_read"`
	RowsDropped int64         `json:"rows_dropped"`
	Error       string        `json:"error,omitempty"`
}

// Run statuses.
const (
	RunOK      = "ok"
	RunFailed  = "failed"
	RunRunning = "running"
)

// Alert is one alert in its lifecycle. The first fields are those of
// `plumb alerts --format json`.
type Alert struct {
	ID       string `json:"id"`
	Watch    string `json:"watch"`
	Rule     string `json:"rule"`     // level, trend, jump, exact, constant, broken, blind
	Severity string `json:"severity"` // warning or critical
	// Data times: since when the cause holds, the window end that opened
	// the alert and the one that resolved it (null while open).
	Onset        time.Time  `json:"onset"`
	AsOf         time.Time  `json:"as_of"`
	ResolvedAsOf *time.Time `json:"resolved_as_of"`
	// UpdatedAsOf: the window end that last changed the alert; the
	// message gives that window's figures.
	UpdatedAsOf time.Time `json:"updated_as_of"`
	// Wall-clock times: when plumb recorded the opening and resolution.
	OpenedAt   time.Time  `json:"opened_at"`
	ResolvedAt *time.Time `json:"resolved_at"`
	Message    string     `json:"message"`

	Segment  string               `json:"-"` // series key, shown decoded (segmentjson.go)
	Columns  []string             `json:"columns"`
	Drivers  []diagnostics.Driver `json:"drivers,omitempty"`
	Equation string               `json:"equation,omitempty"`
	Remedy   string               `json:"remedy,omitempty"`
	// Metric is the metric a level, trend or jump alert is about
	// (MetricCondition or MetricMaxVIF), "" for the other rules.
	Metric string `json:"metric,omitempty"`
	// Acknowledged is the owner's acknowledgement, nil when none.
	Acknowledged *AlertAck `json:"acknowledged,omitempty"`
}

// Open reports whether the alert is not resolved.
func (a *Alert) Open() bool { return a.ResolvedAt == nil }

// Severities of alerts.
const (
	SeverityWarning  = "warning"
	SeverityCritical = "critical"
)

// Summarize fills d.Summary's derived fields from the rest of d: the
// segment summaries (with Trend the last trendPoints of each timeline),
// each segment's factors and new levels (from its timeline), the open
// alerts, and the state. A store-backed View can fill the
// details and call it, so that every View derives them the same way.
//
// A segment's state is critical when its latest point is rank deficient
// or at or above a critical level, warning when at or above a warn level,
// else ok; an open alert for the segment raises it to the alert's
// severity. The watch is blind when an open blind alert exists, otherwise
// it takes the worst segment state.
func Summarize(d *WatchDetail, trendPoints int) {
	s := &d.Summary
	s.Segments = s.Segments[:0]
	s.OpenAlerts = s.OpenAlerts[:0]
	for _, a := range d.Alerts {
		if a.Open() {
			s.OpenAlerts = append(s.OpenAlerts, a)
		}
	}
	sortAlerts(s.OpenAlerts)
	s.State = StateOK
	for i := range d.Segments {
		seg := &d.Segments[i]
		seg.Latest = nil
		seg.Factors = []Factor{}
		if n := len(seg.Timeline); n > 0 {
			p := seg.Timeline[n-1]
			seg.Latest = &p
			seg.Trend = seg.Timeline[max(0, n-trendPoints):]
			if p.Factors != nil {
				seg.Factors = p.Factors
			}
		}
		seg.NewLevels = newLevels(seg.Timeline)
		seg.State = levelState(seg.Latest, s.Limits)
		for _, a := range s.OpenAlerts {
			if a.Segment == seg.Segment {
				seg.State = seg.State.Worse(alertState(a))
			}
		}
		s.State = s.State.Worse(seg.State)
		s.Segments = append(s.Segments, seg.SegmentSummary)
	}
	for _, a := range s.OpenAlerts {
		if a.Rule == "blind" {
			s.State = StateBlind
		}
	}
	if len(d.Runs) > 0 {
		r := d.Runs[0]
		s.LastRun = &r
	}
}

func alertState(a Alert) State {
	if a.Rule == "blind" {
		return StateBlind
	}
	if a.Severity == SeverityCritical {
		return StateCritical
	}
	return StateWarning
}

func levelState(p *Point, l Limits) State {
	if p == nil {
		return StateOK
	}
	over := func(v, level float64) bool { return level > 0 && (v >= level || math.IsNaN(v)) }
	switch {
	case p.RankDeficiency() > 0, over(p.Judged, l.CondCritical), over(p.MaxVIF, l.VIFCritical):
		return StateCritical
	case over(p.Judged, l.CondWarn), over(p.MaxVIF, l.VIFWarn):
		return StateWarning
	}
	return StateOK
}

// sortAlerts orders alerts most severe first, then newest first.
func sortAlerts(as []Alert) {
	sev := func(a Alert) int {
		if a.Severity == SeverityCritical {
			return 0
		}
		return 1
	}
	slices.SortStableFunc(as, func(a, b Alert) int {
		if c := cmp.Compare(sev(a), sev(b)); c != 0 {
			return c
		}
		return b.OpenedAt.Compare(a.OpenedAt)
	})
}

// MarshalJSON writes non-finite metrics as null.
func (p Point) MarshalJSON() ([]byte, error) {
	type plain Point
	return json.Marshal(struct {
		plain
		ConditionNumber   *float64 `json:"condition_number"`
		CenteredCondition *float64 `json:"centered_condition_number"`
		Judged            *float64 `json:"judged_condition_number"`
		Singular          bool     `json:"singular"`
		MaxVIF            *float64 `json:"max_vif"`
		Factors           []Factor `json:"factors"`
	}{plain(p), finite(p.ConditionNumber), finite(p.CenteredCondition), finite(p.Judged), p.RankDeficiency() > 0, finite(p.MaxVIF),
		nonNil(p.Factors)})
}

// MarshalJSON writes non-finite values as null.
func (p ForecastPoint) MarshalJSON() ([]byte, error) {
	return json.Marshal(struct {
		At    time.Time `json:"at"`
		Value *float64  `json:"value"`
		Low   *float64  `json:"low"`
		High  *float64  `json:"high"`
	}{p.At, finite(p.Value), finite(p.Low), finite(p.High)})
}

// MarshalJSON writes the duration in seconds.
func (r Run) MarshalJSON() ([]byte, error) {
	type plain Run
	return json.Marshal(struct {
		plain
		Duration float64 `json:"duration_seconds"`
	}{plain(r), r.Duration.Seconds()})
}

// MarshalJSON writes the horizon in seconds.
func (l Limits) MarshalJSON() ([]byte, error) {
	type plain Limits
	return json.Marshal(struct {
		plain
		Horizon float64 `json:"horizon_seconds"`
	}{plain(l), l.Horizon.Seconds()})
}

func finite(v float64) *float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	return &v
}

// sortNewest orders alerts newest first (by opening time, then id).
func sortNewest(as []Alert) {
	slices.SortStableFunc(as, func(a, b Alert) int {
		if c := b.OpenedAt.Compare(a.OpenedAt); c != 0 {
			return c
		}
		return cmp.Compare(b.ID, a.ID)
	})
}
