// Package agent runs plumb unattended: it schedules the configured watches,
// keeps their history (runs, points, bucket accumulators) in a state store,
// turns the history into alerts with hysteresis and delivers them.
//
// The domain types and the Store interface live here; agent/sqlstore
// implements the store on SQLite and PostgreSQL.
package agent

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"time"

	"plumb/diagnostics"
)

// RunKind says what started a run.
type RunKind string

const (
	RunLive     RunKind = "live"     // the agent's schedule
	RunCheck    RunKind = "check"    // plumb check
	RunBackfill RunKind = "backfill" // plumb backfill
)

// Run is one pass over one watch.
type Run struct {
	ID             int64     `json:"id"`
	Watch          string    `json:"watch"`
	Kind           RunKind   `json:"kind"`
	Status         string    `json:"status"` // "ok" or "failed"
	StartedAt      time.Time `json:"started_at"`
	FinishedAt     time.Time `json:"finished_at"`
	RowsRead       int64     `json:"rows_read"`
	RowsDropped    int64     `json:"rows_dropped"`
	BucketsScanned int       `json:"buckets_scanned"`
	Points         int       `json:"points"`
	AsOf           time.Time `json:"as_of,omitzero"` // window end of the latest point
	Error          string    `json:"error,omitempty"`
}

// Run statuses.
const (
	StatusOK     = "ok"
	StatusFailed = "failed"
)

// Point is one step of a watch's history: the diagnostics of the window
// ending at At, for the whole table (Segment "") or one segment. Values
// that are undefined (a singular design makes the condition number and
// some VIFs infinite) are +Inf in memory and NULL in the store.
type Point struct {
	Watch             string          `json:"watch"`
	Segment           string          `json:"-"` // series key, shown decoded (segmentjson.go)
	At                time.Time       `json:"at"`
	RunID             int64           `json:"run_id"`
	RowsUsed          int64           `json:"rows"`
	RowsDropped       int64           `json:"rows_dropped"`
	ConditionNumber   float64         `json:"condition_number"`
	CenteredCondition float64         `json:"centered_condition_number"`
	MaxVIF            float64         `json:"max_vif"`
	MaxVIFColumn      string          `json:"max_vif_column,omitempty"`
	Rank              int             `json:"rank"`
	Columns           int             `json:"columns"`
	Report            json.RawMessage `json:"-"` // diagnostics.Report as JSON
	PerColumn         []ColumnMetric  `json:"-"`
}

// ColumnMetric is one column's numbers at a point. NaN means undefined.
type ColumnMetric struct {
	Name        string  `json:"name"`
	VIF         float64 `json:"vif"`
	Tolerance   float64 `json:"tolerance"`
	R2          float64 `json:"r2"`
	SEInflation float64 `json:"se_inflation"`
	Constant    bool    `json:"constant"`
	Mean        float64 `json:"mean"`
	SD          float64 `json:"sd"`
}

// Bucket is a stored accumulator: one watch, segment and time bucket.
type Bucket struct {
	Watch   string
	Segment string
	Start   time.Time
	Columns []string
	Rows    int64
	Moments []byte // stream.Moments.MarshalBinary
	QR      []byte // stream.QR.MarshalBinary, or nil
}

// Rule names an alert rule.
type Rule string

const (
	RuleLevel    Rule = "level"
	RuleTrend    Rule = "trend"
	RuleExact    Rule = "exact"
	RuleConstant Rule = "constant"
	RuleJump     Rule = "jump"
	RuleBlind    Rule = "blind"
	// RuleBroken: an expected exact dependency that held stopped holding.
	RuleBroken Rule = "broken"
)

// Severity of an alert.
type Severity string

const (
	Warning  Severity = "warning"
	Critical Severity = "critical"
)

// Notification states of an alert's opening.
const (
	NotifyPending    = "pending"    // to be delivered by the next live run
	NotifySent       = "sent"       // enqueued in the outbox
	NotifySuppressed = "suppressed" // recorded by a backfill and resolved there: never delivered
)

// Alert is one condition of one watch and segment, from opening to
// resolution. AsOf is the data time (window end) that opened it.
type Alert struct {
	ID           string      `json:"id"`
	Watch        string      `json:"watch"`
	Segment      string      `json:"-"` // series key, shown decoded (segmentjson.go)
	Rule         Rule        `json:"rule"`
	Subject      string      `json:"subject"`
	Severity     Severity    `json:"severity"`
	AsOf         time.Time   `json:"as_of"`
	OpenedAt     time.Time   `json:"opened_at"`
	UpdatedAsOf  time.Time   `json:"updated_as_of"`
	UpdatedAt    time.Time   `json:"updated_at"`
	ResolvedAsOf time.Time   `json:"resolved_as_of,omitzero"`
	ResolvedAt   time.Time   `json:"resolved_at,omitzero"`
	Message      string      `json:"message"`
	Detail       AlertDetail `json:"detail"`
	NotifyState  string      `json:"-"`

	// Onset is the data time from which the alert's cause holds (the
	// first bucket of an exact dependency's or constant column's run, the
	// first point at or above a level, the first point of a fitted rise).
	Onset time.Time `json:"onset"`
	// Columns are all the columns the cause involves.
	Columns []string `json:"columns"`
	// Drivers, for VIF-based alerts, are the partner columns that explain
	// the column with the largest VIF and their shares of its R².
	Drivers []diagnostics.Driver `json:"drivers,omitempty"`
	// Window is the data window of the latest point the alert was judged on.
	Window *AlertWindow `json:"window,omitempty"`
	// Ack is the owner's acknowledgement, nil when there is none. Runs
	// never change it; Store.Acknowledge does.
	Ack *Ack `json:"acknowledged,omitempty"`
}

// Ack is an owner's acknowledgement of an open alert. Until it lapses the
// alert is not notified again, except when it escalates past Severity or
// resolves. Its times are wall-clock times.
type Ack struct {
	By    string    `json:"by"`
	At    time.Time `json:"at"`
	Until time.Time `json:"until,omitzero"` // end of the snooze; zero: until it resolves or escalates
	Note  string    `json:"note,omitempty"`
	// Severity is the alert's severity when it was acknowledged.
	Severity Severity `json:"severity"`
	// EndedAt is when a run noticed that the snooze had ended.
	EndedAt time.Time `json:"snooze_ended_at,omitzero"`
}

// AlertWindow is the data window an alert was judged on.
type AlertWindow struct {
	Start time.Time `json:"start"`
	End   time.Time `json:"end"`
	Rows  int64     `json:"rows"`
}

// Open reports whether the alert is not resolved.
func (a *Alert) Open() bool { return a.ResolvedAt.IsZero() }

// AlertDetail is what a notification carries beside the message.
type AlertDetail struct {
	Metric string  `json:"metric,omitempty"` // condition_number, centered_condition_number, max_vif
	Value  float64 `json:"value,omitempty"`
	Limit  float64 `json:"limit,omitempty"`
	// Basis says which condition number a condition metric is:
	// "centered" or "intercept".
	Basis string `json:"basis,omitempty"`
	// Column is the column with the largest VIF (VIF alerts).
	Column string `json:"column,omitempty"`
	// Peak and PeakOn are the highest value while the alert is open and
	// its data day; Since is the data day the current severity began.
	Peak   float64   `json:"peak,omitempty"`
	PeakOn time.Time `json:"peak_on,omitzero"`
	Since  time.Time `json:"since,omitzero"`
	// R2Onset and R2Now are the R² of the column with the largest VIF on
	// the other columns, at the onset and now (VIF alerts).
	R2Onset  *float64           `json:"r2_onset,omitempty"`
	R2Now    *float64           `json:"r2_now,omitempty"`
	Values   map[string]float64 `json:"values,omitempty"`
	Columns  []string           `json:"columns,omitempty"`
	Equation string             `json:"equation,omitempty"`
	// Words says an exact dependency among categorical columns in plain
	// words ("supply_source determines chlorine_mg_l: …").
	Words     string    `json:"words,omitempty"`
	Remedy    string    `json:"remedy,omitempty"`
	Forecast  *Forecast `json:"forecast,omitempty"`
	LastError string    `json:"last_error,omitempty"`
}

// Forecast is a trend rule's projection.
type Forecast struct {
	RatePerDay float64   `json:"rate_per_day"` // relative change per day, e.g. 0.08 for +8 %/day
	Crossing   time.Time `json:"crossing"`     // when the critical limit is reached
	Limit      float64   `json:"limit"`
}

// Delivery is one notification in the outbox.
type Delivery struct {
	ID            int64
	EventID       string // unique: the receiver's deduplication key
	AlertID       string
	Notifier      string
	Event         string // opened, escalated, resolved
	Body          []byte // JSON
	CreatedAt     time.Time
	Attempts      int
	NextAttemptAt time.Time
	LastError     string
	DeliveredAt   time.Time
	GivenUpAt     time.Time
}

// Delivery events.
const (
	EventOpened    = "opened"
	EventEscalated = "escalated"
	EventResolved  = "resolved"
	// EventSnoozeEnded: an acknowledged alert's snooze ended and it is
	// still open.
	EventSnoozeEnded = "snooze_ended"
)

// WatchState is the rule state of one watch and segment.
type WatchState struct {
	Watch            string
	Segment          string
	EvaluatedThrough time.Time       // the latest point the rules have seen
	State            json.RawMessage // the rules' own state
	Failures         int             // consecutive failed runs (segment "")
	LastRunAt        time.Time
}

// RunResult is everything one run writes. Store.CommitRun writes it in
// one transaction: all of it or none.
type RunResult struct {
	Run Run

	// ReplaceBucketsFrom, when set, deletes the watch's buckets starting
	// at or after it before Buckets are written (a rescan or backfill
	// replaces what it reread). ReplaceAllBuckets deletes them all.
	ReplaceBucketsFrom time.Time
	ReplaceAllBuckets  bool
	Buckets            []Bucket

	// ReplacePointsFrom deletes the watch's points at or after it first.
	ReplacePointsFrom time.Time
	Points            []Point

	// DeleteAlerts are alert ids to remove (a backfill that no longer
	// finds them); Alerts are written by id.
	DeleteAlerts []string
	Alerts       []Alert

	States []WatchState
	Outbox []Delivery // inserted; an existing EventID is left as it is

	// SnoozesEnded mark acknowledgements whose snooze ended (only when
	// the alert still carries that snooze: a newer acknowledgement stays).
	SnoozesEnded []SnoozeEnd
}

// SnoozeEnd records that the snooze of an alert's acknowledgement, ending
// at Until, was seen to end at At.
type SnoozeEnd struct {
	AlertID string
	Until   time.Time
	At      time.Time
}

// AlertQuery selects alerts.
type AlertQuery struct {
	Watch    string    // "" for every watch
	OpenOnly bool      // only unresolved
	Since    time.Time // resolved at or after, or still open; zero for all
	Limit    int       // 0 for no limit
}

// PointQuery selects points of a watch.
type PointQuery struct {
	Segment  string // "" is the whole table
	AllSegs  bool   // every segment
	From, To time.Time
	Limit    int // the latest Limit points; 0 for all
}

// LockInfo describes who holds a store.
type LockInfo struct {
	Holder     string
	PID        int
	Host       string
	AcquiredAt time.Time
}

// Errors of Store.Acknowledge.
var (
	ErrNoAlert       = errors.New("no such alert")
	ErrAlertResolved = errors.New("the alert is resolved")
)

// ErrLocked is wrapped by Store.Lock when another process holds the store.
var ErrLocked = errors.New("the state store is in use by another plumb")

// ErrLockLost is wrapped by the store's writes once this process no longer
// holds the lock it took (the connection that held it dropped, or another
// process took the store over): nothing more is written until the lock is
// re-acquired.
var ErrLockLost = errors.New("this plumb no longer holds the state store's lock")

// LockedError says who holds the store.
type LockedError struct {
	Info *LockInfo // nil when unknown
}

func (e *LockedError) Error() string {
	if e.Info == nil {
		return ErrLocked.Error() + "; stop it first"
	}
	return fmt.Sprintf("%v: %s (pid %d on %s, since %s); stop it first",
		ErrLocked, e.Info.Holder, e.Info.PID, e.Info.Host, e.Info.AcquiredAt.UTC().Format(time.RFC3339))
}

func (e *LockedError) Unwrap() error { return ErrLocked }

// Store keeps the agent's state. Implementations are safe for concurrent
// use.
type Store interface {
	// Lock makes this process the store's only writer until release is
	// called or the process dies. It fails at once with a *LockedError
	// when another process holds it.
	Lock(ctx context.Context, holder string) (release func() error, err error)

	// LastBucket returns the start of the watch's newest bucket.
	LastBucket(ctx context.Context, watch string) (time.Time, bool, error)
	// FirstBuckets returns the start of the oldest bucket of each of the
	// watch's segments (the key is the bucket's segment).
	FirstBuckets(ctx context.Context, watch string) (map[string]time.Time, error)
	// Buckets returns the watch's buckets starting in [from, to) (zero
	// times are open ends), ordered by start, then segment.
	Buckets(ctx context.Context, watch string, from, to time.Time) ([]Bucket, error)

	// Points returns points of a watch, oldest first.
	Points(ctx context.Context, watch string, q PointQuery) ([]Point, error)
	// Runs returns the watch's latest runs, newest first ("" for all
	// watches).
	Runs(ctx context.Context, watch string, limit int) ([]Run, error)
	// States returns the rule states of a watch.
	States(ctx context.Context, watch string) ([]WatchState, error)
	// Alerts returns alerts, ordered by as_of, then opened_at, then id.
	Alerts(ctx context.Context, q AlertQuery) ([]Alert, error)

	// Acknowledge records an owner's acknowledgement of the open alert
	// id, replacing an earlier one, and returns the alert. ack.Severity
	// is set to the alert's severity at that moment. An unknown id wraps
	// ErrNoAlert, a resolved alert ErrAlertResolved. It does not need the
	// store's lock: a running agent keeps what it records.
	Acknowledge(ctx context.Context, id string, ack Ack) (Alert, error)

	// CommitRun writes a run's results in one transaction and returns
	// the run's id; the points, buckets and alerts of r get it too.
	CommitRun(ctx context.Context, r *RunResult) (int64, error)

	// Due returns undelivered outbox entries whose next attempt is due at
	// now, oldest first.
	Due(ctx context.Context, now time.Time, limit int) ([]Delivery, error)
	// Delivered marks an entry done.
	Delivered(ctx context.Context, id int64, at time.Time) error
	// Failed records a failed attempt and when to try next; with giveUp
	// the entry is not tried again.
	Failed(ctx context.Context, id int64, attempts int, next time.Time, lastErr string, giveUp bool) error

	Close() error
}
