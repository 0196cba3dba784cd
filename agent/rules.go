package agent

import (
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"
	"time"

	"plumb/agent/config"
	"plumb/connectors"
	"plumb/diagnostics"
)

// The alert rules. They are a deterministic function of the sequence of
// observations of one watch and segment (and of the run failures for the
// blind rule): the state they carry between points is RuleState, stored
// with the watch, so a backfill that replays the same points opens and
// resolves the same alerts, with the same ids, at the same data times.
//
// One alert per cause: a near dependency (level, trend, jump, on the design
// without the columns that exact and constant alerts already explain), an
// exact dependency, a constant column, a blind watch, an expected
// dependency that broke. Each alert knows its onset in data time.
//
//   - level: the judged condition number (centered by default) or max VIF
//     at or above its warn level (warning) or critical level (critical).
//   - exact: an exact linear dependency (rank drop): critical at once,
//     dated to the first bucket of the unbroken run in which it holds. An
//     exact dependency among the columns of one expected_dependencies set
//     is expected and not alerted.
//   - broken: an expected dependency that held stopped holding: warning.
//   - constant: a column that does not vary: critical at once, dated to
//     the first bucket of its constant run.
//   - trend: the Theil–Sen line of the log of the judged condition number
//     (or max VIF) over the last trend_points points rises significantly
//     (Mann–Kendall z ≥ 1.645, and Sen's 90 % slope interval above zero)
//     and reaches the critical level within the
//     horizon: warning, saying when, with Sen's 90 % range. It is fitted on
//     the numbers of each window's last bucket alone where buckets hold
//     enough rows (no window lag), else on full windows only.
//   - jump: the latest change of the log value is far outside the recent
//     changes (robust z ≥ jump) and at least 25 %, in the band where it is
//     news: the value before or after it at least half the warn level, the
//     value after it under the warn level: warning.
//   - blind: blind_after consecutive failed runs: warning, resolved by the
//     next run that succeeds.
//
// Warm-up: a window that is not yet full (fewer buckets of data than the
// watch's window) opens no level, exact, constant, jump or broken alert,
// and trends never read its composition.
//
// Hysteresis: an alert other than blind resolves only after its condition
// has been absent for clear_after consecutive points.

// Metric names.
const (
	MetricCondition = "condition_number"          // with the intercept column
	MetricCentered  = "centered_condition_number" // the columns among themselves
	MetricMaxVIF    = "max_vif"
)

// Trend and jump settings that are not configurable.
const (
	// trendZ is the one-sided 5 % normal quantile of the Mann–Kendall test.
	trendZ = 1.645
	// minTrendPoints is the fewest points a trend is fitted on.
	minTrendPoints = 5
	// minJumpChanges is the fewest earlier changes a jump is judged against.
	minJumpChanges = 7
	// minJump is the smallest relative change that counts as a jump
	// (common practice, no source: a window that moves by one bucket
	// changes little, so its point-to-point spread is tiny and the robust
	// z alone would flag ordinary days; below 25 % a change is not news).
	minJump = 0.25
	// jumpBand is the fraction of the warn level from which a jump is
	// news (common practice, no source). Near the metrics' floor of 1 a
	// change of 25 % is a small change in collinearity — a VIF moving from
	// 1.4 to 1.8 is an R² moving from 0.29 to 0.44 — and on windows of a
	// few dozen rows one influential day entering or leaving does that.
	// At or above the warn level the level rule speaks instead.
	jumpBand = 0.5
)

// RuleState is what the rules remember between points.
type RuleState struct {
	Recent []RecentPoint  `json:"recent,omitempty"` // the latest points, oldest first
	Clear  map[string]int `json:"clear,omitempty"`  // key → consecutive points without the condition
	// Above maps a metric to the first full point of its current unbroken
	// run at or above the warn level: the onset of a level alert.
	Above map[string]AboveSince `json:"above,omitempty"`
	// Expected maps an expected exact dependency to what was seen of it.
	Expected map[string]*ExpectedSeen `json:"expected,omitempty"`
}

// AboveSince is where a metric's run at or above the warn level began.
type AboveSince struct {
	Day time.Time `json:"day"`
	R2  jfloat    `json:"r2"` // of the column with the largest VIF then
}

// ExpectedSeen is the history of one expected exact dependency.
type ExpectedSeen struct {
	Equation string    `json:"equation"`
	Columns  []string  `json:"columns"`
	Since    time.Time `json:"since"` // onset of its latest run
	Holding  bool      `json:"holding"`
	BrokeOn  time.Time `json:"broke_on,omitzero"` // set while it does not hold after it did
}

// RecentPoint is a point remembered for trends and jumps.
type RecentPoint struct {
	At      time.Time `json:"at"`
	Day     time.Time `json:"day,omitzero"`
	Cond    jfloat    `json:"cond"`
	VIF     jfloat    `json:"vif"`
	BCond   jfloat    `json:"bcond"` // the last bucket's own numbers
	BVIF    jfloat    `json:"bvif"`
	Filling bool      `json:"filling,omitempty"` // the window was not yet full
	// LeftOut names the columns the judged design left out then: numbers
	// of different designs are not one series.
	LeftOut string `json:"left_out,omitempty"`
}

// dataDay is the data day the point's window ends on (its end, for a
// point stored before days were kept).
func (p RecentPoint) dataDay() time.Time {
	if p.Day.IsZero() {
		return p.At
	}
	return p.Day
}

func leftOutKey(o Observation) string {
	cols := slices.Clone(o.LeftOut)
	slices.Sort(cols)
	return strings.Join(cols, ",")
}

// comparable keeps the recent points judged on the same design as o.
func comparable(ps []RecentPoint, o Observation) []RecentPoint {
	k := leftOutKey(o)
	out := make([]RecentPoint, 0, len(ps))
	for _, p := range ps {
		if p.LeftOut == k {
			out = append(out, p)
		}
	}
	return out
}

// singular reports a rank-deficient design.
func (o Observation) singular() bool { return o.Columns > 0 && o.Rank < o.Columns+1 }

// jfloat is a float64 whose non-finite values travel through JSON as
// null (read back as NaN).
type jfloat float64

func (f jfloat) MarshalJSON() ([]byte, error) {
	if math.IsNaN(float64(f)) || math.IsInf(float64(f), 0) {
		return []byte("null"), nil
	}
	return []byte(strconv.FormatFloat(float64(f), 'g', -1, 64)), nil
}

func (f *jfloat) UnmarshalJSON(b []byte) error {
	if string(b) == "null" {
		*f = jfloat(math.NaN())
		return nil
	}
	v, err := strconv.ParseFloat(string(b), 64)
	*f = jfloat(v)
	return err
}

// DecodeRuleState reads a stored state; empty input is the initial state.
func DecodeRuleState(b []byte) (*RuleState, error) {
	st := &RuleState{}
	if len(b) > 0 {
		if err := json.Unmarshal(b, st); err != nil {
			return nil, fmt.Errorf("rule state: %w", err)
		}
	}
	if st.Clear == nil {
		st.Clear = map[string]int{}
	}
	if st.Above == nil {
		st.Above = map[string]AboveSince{}
	}
	if st.Expected == nil {
		st.Expected = map[string]*ExpectedSeen{}
	}
	return st, nil
}

// Encode writes the state for the store.
func (st *RuleState) Encode() json.RawMessage {
	b, err := json.Marshal(st)
	if err != nil {
		panic(err) // only plain types inside
	}
	return b
}

// Rules evaluates one watch and segment.
type Rules struct {
	Watch   string
	Segment string
	Limits  config.Limits
	// Expected are the watch's expected_dependencies.
	Expected [][]string
	// Bucket and Loc say how to name data days in messages ("" for a
	// watch without buckets).
	Bucket string
	Loc    *time.Location
}

// Change is what a step did to an alert.
type Change struct {
	Alert Alert  // the alert after the step
	Event string // EventOpened, EventEscalated, EventResolved, or "" for an update
}

// AlertKey identifies an alert's cause within a watch and segment. The
// level, trend and jump rules describe one cause, the near dependency
// among the judged columns: they share one key, so one alert carries
// them, whichever says the most at the time.
func AlertKey(rule Rule, subject string) string {
	if nearRule(rule) {
		return nearKey
	}
	return string(rule) + "/" + subject
}

// nearKey is the key of the near-dependency alert.
const nearKey = "near/"

func nearRule(r Rule) bool { return r == RuleLevel || r == RuleTrend || r == RuleJump }

// Key is the alert's cause within its watch and segment.
func (a *Alert) Key() string { return AlertKey(a.Rule, a.Subject) }

// AlertID is the alert's id: a hash of where it is and when it opened, so
// a replay of the same history yields the same id (receivers deduplicate
// on it).
func AlertID(watch, segment string, rule Rule, subject string, asOf time.Time) string {
	h := sha256.Sum256([]byte(fmt.Sprintf("%s\x00%s\x00%s\x00%s\x00%d", watch, segment, rule, subject, asOf.UnixMicro())))
	return hex.EncodeToString(h[:10])
}

type finding struct {
	rule     Rule
	subject  string
	severity Severity
	message  string
	detail   AlertDetail
	onset    time.Time
	columns  []string
	drivers  []diagnostics.Driver
	// limits are the warn and critical levels of a level finding.
	warn, crit float64
	// also are the clauses of the findings folded into this one.
	also []string
}

func sevRank(s Severity) int {
	if s == Critical {
		return 2
	}
	return 1
}

// condMetric is the metric the condition levels judge.
func (r *Rules) condMetric() string {
	if r.Limits.ConditionBasis == config.ConditionIntercept {
		return MetricCondition
	}
	return MetricCentered
}

// Step evaluates one observation: open maps AlertKey to the open alerts of
// this watch and segment and is updated in place; now is the wall clock
// (kept only as "recorded at").
func (r *Rules) Step(st *RuleState, open map[string]*Alert, o Observation, now time.Time) []Change {
	if st.Above == nil {
		st.Above = map[string]AboveSince{}
	}
	if st.Expected == nil {
		st.Expected = map[string]*ExpectedSeen{}
	}
	r.track(st, o)
	fs := r.findings(st, open, o)
	keys := make([]string, 0, len(fs)+len(open))
	for k := range fs {
		keys = append(keys, k)
	}
	for k, a := range open {
		if _, ok := fs[k]; !ok && a.Rule != RuleBlind {
			keys = append(keys, k)
		}
	}
	slices.Sort(keys)
	window := &AlertWindow{Start: o.WindowStart, End: o.At, Rows: o.Rows}
	var changes []Change
	for _, k := range keys {
		f, found := fs[k]
		a := open[k]
		switch {
		case found && a != nil:
			delete(st.Clear, k)
			// Severity only rises while an alert is open, so a value
			// wavering around the critical level escalates once.
			event := ""
			if sevRank(f.severity) > sevRank(a.Severity) {
				event = EventEscalated
				a.Severity = f.severity
				a.Detail.Since = o.Day
			}
			r.update(a, f, o)
			a.Window = window
			a.UpdatedAsOf, a.UpdatedAt = o.At, now
			changes = append(changes, Change{Alert: *a, Event: event})
		case found:
			delete(st.Clear, k)
			idRule, idSubject := f.rule, f.subject
			if nearRule(f.rule) {
				idRule, idSubject = "near", ""
			}
			a = &Alert{
				ID: AlertID(r.Watch, r.Segment, idRule, idSubject, o.At), Watch: r.Watch, Segment: r.Segment,
				Rule: f.rule, Subject: f.subject, Severity: f.severity,
				AsOf: o.At, OpenedAt: now, UpdatedAsOf: o.At, UpdatedAt: now,
				NotifyState: NotifyPending, Onset: f.onset, Window: window,
			}
			if a.Onset.IsZero() {
				a.Onset = o.Day
			}
			a.Detail.Since = a.Onset
			r.update(a, f, o)
			open[k] = a
			changes = append(changes, Change{Alert: *a, Event: EventOpened})
		default:
			st.Clear[k]++
			left := r.Limits.ClearAfter - st.Clear[k]
			if left <= 0 {
				delete(st.Clear, k)
				delete(open, k)
				a.ResolvedAsOf, a.ResolvedAt = o.At, now
				a.UpdatedAsOf, a.UpdatedAt = o.At, now
				a.Message = r.resolvedMessage(a, o)
				changes = append(changes, Change{Alert: *a, Event: EventResolved})
			} else if m := r.clearingMessage(a, o, left); m != "" {
				a.Message = m
				a.UpdatedAsOf, a.UpdatedAt = o.At, now
				changes = append(changes, Change{Alert: *a})
			}
		}
	}
	// Counters of conditions that are neither open nor found are stale.
	for k := range st.Clear {
		if _, ok := open[k]; !ok {
			delete(st.Clear, k)
		}
	}
	st.Recent = append(st.Recent, RecentPoint{At: o.At, Day: o.Day, Cond: jfloat(o.Cond), VIF: jfloat(o.MaxVIF),
		BCond: jfloat(o.BucketCond), BVIF: jfloat(o.BucketVIF), Filling: !o.Full, LeftOut: leftOutKey(o)})
	if n := r.Limits.TrendPoints; len(st.Recent) > n {
		st.Recent = slices.Delete(st.Recent, 0, len(st.Recent)-n)
	}
	return changes
}

// update brings an alert up to a finding: message, detail, columns,
// drivers, peak.
func (r *Rules) update(a *Alert, f finding, o Observation) {
	since, peak, peakOn := a.Detail.Since, a.Detail.Peak, a.Detail.PeakOn
	if a.Detail.Metric != f.detail.Metric {
		peak, peakOn = 0, time.Time{} // a peak belongs to its metric
	}
	a.Rule, a.Subject = f.rule, f.subject
	a.Detail = f.detail
	a.Detail.Since = since
	a.Columns = f.columns
	if a.Columns == nil {
		a.Columns = []string{}
	}
	a.Drivers = f.drivers
	if f.rule == RuleLevel || f.rule == RuleTrend {
		if f.detail.Value > peak || peakOn.IsZero() {
			peak, peakOn = f.detail.Value, o.Day
		}
		a.Detail.Peak, a.Detail.PeakOn = peak, peakOn
	}
	a.Message = f.message
	if f.rule == RuleLevel {
		a.Message = r.levelMessage(a, f.detail.Value, f.warn, f.crit)
	}
	if len(f.also) > 0 {
		a.Message += "; " + strings.Join(f.also, "; ")
	}
	a.Message = r.prefix() + a.Message
}

// levelMessage says where a level alert stands: its severity since when,
// its peak, the current value and the levels it is above or under.
func (r *Rules) levelMessage(a *Alert, v, warn, crit float64) string {
	what := r.metricLabel(a.Detail.Metric, a.Subject)
	if a.Detail.Column != "" {
		what += " (" + a.Detail.Column + ")"
	}
	word := string(a.Severity)
	var b strings.Builder
	switch {
	case a.Severity == Critical && v >= crit, a.Severity == Warning && v >= warn:
		fmt.Fprintf(&b, "%s %s is at or above the %s level %s", what, num(v), word, num(levelOf(a.Severity, warn, crit)))
		if !a.Detail.Since.IsZero() {
			fmt.Fprintf(&b, " since %s", r.day(a.Detail.Since))
		}
		if a.Detail.Peak > v {
			fmt.Fprintf(&b, "; peak %s on %s", num(a.Detail.Peak), r.day(a.Detail.PeakOn))
		}
	default:
		fmt.Fprintf(&b, "%s since %s", word, r.day(a.Detail.Since))
		if a.Detail.Peak > v {
			fmt.Fprintf(&b, ", peak %s %s on %s", what, num(a.Detail.Peak), r.day(a.Detail.PeakOn))
		}
		if v >= warn {
			fmt.Fprintf(&b, "; now %s, under the critical level %s but at or above the warning level %s", num(v), num(crit), num(warn))
		} else {
			fmt.Fprintf(&b, "; now %s, under the warning level %s", num(v), num(warn))
		}
	}
	return b.String()
}

func levelOf(s Severity, warn, crit float64) float64 {
	if s == Critical {
		return crit
	}
	return warn
}

// levelValue returns the current judged value of a level alert's metric.
func (r *Rules) levelValue(metric string, o Observation) float64 {
	if metric == MetricMaxVIF {
		return o.MaxVIF
	}
	return o.Cond
}

func (r *Rules) levelsOf(metric string) (warn, crit float64) {
	if metric == MetricMaxVIF {
		return r.Limits.VIF.Warn, r.Limits.VIF.Critical
	}
	return r.Limits.Condition.Warn, r.Limits.Condition.Critical
}

// clearingMessage rewrites the message of an open alert whose condition is
// absent while its hysteresis runs, so that severity and message agree.
func (r *Rules) clearingMessage(a *Alert, o Observation, left int) string {
	if a.Rule != RuleLevel || !o.Full {
		return ""
	}
	v := r.levelValue(a.Detail.Metric, o)
	if !isFinite(v) {
		return ""
	}
	warn, crit := r.levelsOf(a.Detail.Metric)
	return r.prefix() + r.levelMessage(a, v, warn, crit) + fmt.Sprintf(": resolves after %d more %s under it", left, plural(left, "point", "points"))
}

// resolvedMessage says how an alert ended, in data time.
func (r *Rules) resolvedMessage(a *Alert, o Observation) string {
	when := r.day(o.Day)
	switch a.Rule {
	case RuleLevel:
		v := r.levelValue(a.Detail.Metric, o)
		warn, _ := r.levelsOf(a.Detail.Metric)
		msg := fmt.Sprintf("resolved on %s: %s %s, under the warning level %s for %d points; was %s from %s",
			when, r.metricLabel(a.Detail.Metric, a.Subject), num(v), num(warn), r.Limits.ClearAfter, a.Severity, r.day(a.Onset))
		if a.Detail.Peak > 0 {
			msg += fmt.Sprintf(", peak %s on %s", num(a.Detail.Peak), r.day(a.Detail.PeakOn))
		}
		return r.prefix() + msg
	case RuleExact:
		return r.prefix() + fmt.Sprintf("resolved on %s: %s no longer holds (it held from %s)", when, a.Detail.Equation, r.day(a.Onset))
	case RuleConstant:
		return r.prefix() + fmt.Sprintf("resolved on %s: %s varies again (constant from %s)", when, strings.Join(a.Columns, ", "), r.day(a.Onset))
	case RuleBroken:
		return r.prefix() + fmt.Sprintf("resolved on %s: the expected dependency %s holds again", when, a.Detail.Equation)
	}
	return r.prefix() + fmt.Sprintf("resolved on %s: %s", when, a.Message)
}

// track updates what the rules remember across points before judging
// one: where the levels' runs began and the expected dependencies.
func (r *Rules) track(st *RuleState, o Observation) {
	if !o.Full {
		return
	}
	for _, m := range []string{r.condMetric(), MetricMaxVIF} {
		warn, _ := r.levelsOf(m)
		v := r.levelValue(m, o)
		if isFinite(v) && v >= warn {
			if _, ok := st.Above[m]; !ok {
				st.Above[m] = AboveSince{Day: o.Day, R2: jfloat(o.R2)}
			}
		} else {
			delete(st.Above, m)
		}
	}
	seen := map[string]bool{}
	for _, d := range o.Exact {
		if !r.expected(d.Columns) {
			continue
		}
		k := d.subjectKey()
		seen[k] = true
		e := st.Expected[k]
		if e == nil || !e.Holding && e.BrokeOn.IsZero() {
			e = &ExpectedSeen{Columns: d.Columns, Since: d.Onset}
			st.Expected[k] = e
		}
		e.Equation, e.Holding, e.BrokeOn = d.Equation, true, time.Time{}
		if e.Since.IsZero() {
			e.Since = o.Day
		}
	}
	for k, e := range st.Expected {
		if seen[k] {
			continue
		}
		if !r.expected(e.Columns) {
			delete(st.Expected, k) // no longer declared: forget it
			continue
		}
		if e.Holding {
			e.Holding, e.BrokeOn = false, o.Day
		}
	}
}

// expected reports whether all the columns lie in one declared set.
func (r *Rules) expected(cols []string) bool {
	for _, set := range r.Expected {
		if !slices.ContainsFunc(cols, func(c string) bool { return !slices.Contains(set, c) }) {
			return true
		}
	}
	return false
}

func (r *Rules) findings(st *RuleState, open map[string]*Alert, o Observation) map[string]finding {
	fs := map[string]finding{}
	var near []finding
	add := func(f finding) {
		if nearRule(f.rule) {
			near = append(near, f)
			return
		}
		fs[AlertKey(f.rule, f.subject)] = f
	}
	defer func() {
		if f, ok := foldNear(near); ok {
			fs[nearKey] = f
		}
	}()
	l := r.Limits
	values := map[string]float64{}
	for k, v := range map[string]float64{MetricCondition: o.ConditionNumber, MetricCentered: o.CenteredCondition, MetricMaxVIF: o.MaxVIF} {
		if isFinite(v) {
			values[k] = v
		}
	}
	if m := r.condMetric(); isFinite(o.Cond) {
		values[m] = o.Cond // the judged design's
	}
	remedy := r.remedy(o)
	condCols := r.involved(o)

	if !o.Full {
		// Warm-up: the window is still filling. Only a trend on the last
		// buckets' own numbers may speak.
		if f, ok := r.trendFinding(st, open, o, values, remedy, condCols); ok {
			for _, x := range f {
				add(x)
			}
		}
		return fs
	}

	// Levels.
	for _, m := range []struct {
		metric string
		v      float64
		lv     config.Level
	}{{r.condMetric(), o.Cond, l.Condition}, {MetricMaxVIF, o.MaxVIF, l.VIF}} {
		if !isFinite(m.v) || !(m.v >= m.lv.Warn) {
			continue
		}
		sev, limit := Warning, m.lv.Warn
		if m.v >= m.lv.Critical {
			sev, limit = Critical, m.lv.Critical
		}
		f := finding{rule: RuleLevel, subject: m.metric, severity: sev, onset: st.Above[m.metric].Day,
			warn: m.lv.Warn, crit: m.lv.Critical, columns: condCols,
			detail: AlertDetail{Metric: m.metric, Value: m.v, Limit: limit, Values: values, Remedy: remedy}}
		r.vifContext(&f, st, o)
		add(f)
	}

	// Exact dependencies (unless expected) and constant columns.
	for _, d := range o.Exact {
		if r.expected(d.Columns) {
			continue
		}
		eq := d.Equation
		if eq == "" {
			eq = strings.Join(d.Columns, ", ") + " are linearly dependent"
		}
		onset := d.Onset
		if onset.IsZero() {
			onset = o.Day
		}
		others := slices.DeleteFunc(slices.Clone(d.Columns), func(c string) bool { return c == d.Dependent })
		msg := fmt.Sprintf("%s holds in %s since %s", eq, r.every(), r.day(onset))
		if d.Words != "" {
			// Categorical columns take part: the words first, the
			// equation among their dummies after.
			msg = fmt.Sprintf("%s, in %s since %s (%s)", d.Words, r.every(), r.day(onset), eq)
		}
		add(finding{rule: RuleExact, subject: d.subjectKey(), severity: Critical, onset: onset, columns: d.Columns,
			message: msg,
			detail: AlertDetail{Values: values, Columns: d.Columns, Equation: d.Equation, Words: d.Words,
				Remedy: exactRemedy(d, others, dropCaution(o))}})
	}
	for _, c := range o.Constant {
		onset := c.Onset
		if onset.IsZero() {
			onset = o.Day
		}
		add(finding{rule: RuleConstant, subject: c.Name, severity: Critical, onset: onset, columns: []string{c.Name},
			message: fmt.Sprintf("%s is %s in %s since %s: its coefficient cannot be estimated", c.Name, constantWords(c), r.every(), r.day(onset)),
			detail: AlertDetail{Values: values, Columns: []string{c.Name},
				Remedy: "check what feeds " + c.Name + " (a stuck sensor, a default value?); widen the window so that it varies, or leave it out of the model until it does"}})
	}
	// Expected dependencies that stopped holding.
	for k, e := range st.Expected {
		if e.Holding || e.BrokeOn.IsZero() {
			continue
		}
		add(finding{rule: RuleBroken, subject: k, severity: Warning, onset: e.BrokeOn, columns: e.Columns,
			message: fmt.Sprintf("the expected dependency %s, which held from %s, stopped holding on %s: an upstream definition changed",
				e.Equation, r.day(e.Since), r.day(e.BrokeOn)),
			detail: AlertDetail{Values: values, Columns: e.Columns, Equation: e.Equation,
				Remedy: "find the upstream change to " + strings.Join(e.Columns, ", ") + "; if the new definition is intended, update expected_dependencies, or acknowledge this alert"}})
	}

	// Trends and jumps.
	if f, ok := r.trendFinding(st, open, o, values, remedy, condCols); ok {
		for _, x := range f {
			add(x)
		}
	}
	for _, m := range []struct {
		metric string
		v      float64
		warn   float64
		get    func(RecentPoint) float64
	}{
		{r.condMetric(), o.Cond, l.Condition.Warn, func(p RecentPoint) float64 { return float64(p.Cond) }},
		{MetricMaxVIF, o.MaxVIF, l.VIF.Warn, func(p RecentPoint) float64 { return float64(p.VIF) }},
	} {
		if !isFinite(m.v) || !(m.v > 0) {
			continue
		}
		if f, ok := r.jump(fullOnly(comparable(st.Recent, o)), m.get, o, m.v, m.metric, m.warn, values, remedy, condCols); ok {
			r.vifContext(&f, st, o)
			add(f)
		}
	}
	return fs
}

// foldNear makes the level, trend and jump findings of one point one
// finding: the strongest says the message (critical before warning, level
// before trend before jump, max VIF before the condition number), the
// others follow it in a clause, and the earliest onset dates it.
func foldNear(fs []finding) (finding, bool) {
	if len(fs) == 0 {
		return finding{}, false
	}
	rank := func(f finding) int {
		r := 10 * sevRank(f.severity)
		switch f.rule {
		case RuleLevel:
			r += 4
		case RuleTrend:
			r += 2
		}
		if f.subject == MetricMaxVIF {
			r++
		}
		return r
	}
	slices.SortStableFunc(fs, func(a, b finding) int { return rank(b) - rank(a) })
	out := fs[0]
	leveled := map[string]bool{}
	for _, f := range fs {
		if f.rule == RuleLevel {
			leveled[f.detail.Metric] = true
		}
	}
	for _, f := range fs[1:] {
		if !f.onset.IsZero() && (out.onset.IsZero() || f.onset.Before(out.onset)) {
			out.onset = f.onset
		}
		for _, c := range f.columns {
			if !slices.Contains(out.columns, c) {
				out.columns = append(out.columns, c)
			}
		}
		if f.rule != RuleLevel && leveled[f.detail.Metric] {
			continue // the level of the same metric says more
		}
		out.also = append(out.also, f.short())
	}
	return out, true
}

// short is a finding's clause for another finding's message.
func (f finding) short() string {
	switch f.rule {
	case RuleLevel:
		return fmt.Sprintf("%s %s is at or above its %s level %s", metricWords(f.detail.Metric), num(f.detail.Value), f.severity, num(f.detail.Limit))
	case RuleTrend:
		return fmt.Sprintf("%s is rising ~%s/day", metricWords(f.detail.Metric), pct(f.detail.Forecast.RatePerDay))
	}
	return f.message
}

func metricWords(m string) string {
	switch m {
	case MetricCondition:
		return "the condition number (with the intercept)"
	case MetricCentered:
		return "the centered condition number"
	case MetricMaxVIF:
		return "the max VIF"
	}
	return m
}

// vifContext adds the drivers and R² of a VIF finding.
func (r *Rules) vifContext(f *finding, st *RuleState, o Observation) {
	if f.subject != MetricMaxVIF && f.detail.Metric != MetricMaxVIF {
		if f.detail.Metric != "" {
			f.detail.Basis = r.Limits.ConditionBasis
			if f.detail.Basis == "" {
				f.detail.Basis = config.DefaultConditionBasis
			}
		}
		return
	}
	f.drivers = o.Drivers
	f.detail.Column = o.MaxVIFColumn
	if isFinite(o.R2) {
		v := o.R2
		f.detail.R2Now = &v
	}
	if a, ok := st.Above[MetricMaxVIF]; ok && isFinite(float64(a.R2)) {
		v := float64(a.R2)
		f.detail.R2Onset = &v
	}
	cols := []string{}
	if o.MaxVIFColumn != "" {
		cols = append(cols, o.MaxVIFColumn)
	}
	for _, d := range o.Drivers {
		if !slices.Contains(cols, d.Column) {
			cols = append(cols, d.Column)
		}
	}
	for _, c := range f.columns {
		if !slices.Contains(cols, c) {
			cols = append(cols, c)
		}
	}
	f.columns = cols
}

func fullOnly(ps []RecentPoint) []RecentPoint {
	out := make([]RecentPoint, 0, len(ps))
	for _, p := range ps {
		if !p.Filling {
			out = append(out, p)
		}
	}
	return out
}

// trendFinding fits the trends of the judged condition number and max VIF.
// It uses the last buckets' own numbers when every recent point has them,
// and otherwise the full windows only.
func (r *Rules) trendFinding(st *RuleState, open map[string]*Alert, o Observation, values map[string]float64, remedy string, condCols []string) ([]finding, bool) {
	l := r.Limits
	var out []finding
	for _, m := range []struct {
		metric     string
		v, bv      float64
		warn, crit float64
		get, bget  func(RecentPoint) float64
	}{
		{r.condMetric(), o.Cond, o.BucketCond, l.Condition.Warn, l.Condition.Critical,
			func(p RecentPoint) float64 { return float64(p.Cond) }, func(p RecentPoint) float64 { return float64(p.BCond) }},
		{MetricMaxVIF, o.MaxVIF, o.BucketVIF, l.VIF.Warn, l.VIF.Critical,
			func(p RecentPoint) float64 { return float64(p.VIF) }, func(p RecentPoint) float64 { return float64(p.BVIF) }},
	} {
		recent := comparable(st.Recent, o)
		if n := l.TrendPoints - 1; len(recent) > n {
			recent = recent[len(recent)-n:]
		}
		// The series: the last buckets' own numbers when all have them.
		useBuckets := positive(m.bv) && len(recent)+1 >= minTrendPoints
		for _, p := range recent {
			if !positive(m.bget(p)) {
				useBuckets = false
				break
			}
		}
		var pts []RecentPoint
		get, cur := m.get, m.v
		floor := 0.0
		switch {
		case useBuckets:
			// One bucket's numbers scatter: they forecast the window only
			// once the line fitted through them has reached the warn level
			// (common practice, no source), which a healthy table's
			// scatter does not.
			floor = m.warn
			pts, get, cur = recent, m.bget, m.bv
		case o.Full:
			pts = fullOnly(recent)
		default:
			continue // a filling window's composition is no trend
		}
		if !positive(cur) {
			continue
		}
		// A trend warns ahead of the critical level: it opens only while
		// the window is under it, and then stays open while the rise goes on.
		_, trendOpen := open[nearKey]
		if !trendOpen && !(isFinite(m.v) && m.v < m.crit) {
			continue
		}
		f, ok := r.trend(pts, get, o, cur, m.v, m.metric, floor, m.crit, values, remedy, condCols)
		if !ok {
			continue
		}
		r.vifContext(&f, st, o)
		out = append(out, f)
	}
	return out, len(out) > 0
}

func positive(v float64) bool { return v > 0 && isFinite(v) }

// trend fits the series and warns when it rises significantly, its fitted
// level now is at least floor, and it reaches crit within the horizon.
func (r *Rules) trend(recent []RecentPoint, get func(RecentPoint) float64, o Observation, cur, windowValue float64, metric string,
	floor, crit float64, values map[string]float64, remedy string, cols []string) (finding, bool) {
	if len(recent)+1 < minTrendPoints {
		return finding{}, false
	}
	at := o.At
	x := make([]float64, 0, len(recent)+1)
	y := make([]float64, 0, len(recent)+1)
	for _, p := range recent {
		x = append(x, days(p.At.Sub(at)))
		y = append(y, get(p))
	}
	x = append(x, 0)
	y = append(y, cur)
	tr, ok := diagnostics.LogTrend(x, y)
	// A rise must be significant twice over: by the Mann–Kendall test,
	// and with Sen's 90 % interval of the slope wholly above zero.
	if !ok || tr.N < minTrendPoints || tr.Z < trendZ || !(tr.Slope > 0) || !(tr.SlopeLo > 0) || math.Exp(tr.Intercept) < floor {
		return finding{}, false
	}
	cx, ok := tr.Crossing(crit)
	horizon := days(r.Limits.Horizon.D())
	if !ok || cx > horizon {
		return finding{}, false
	}
	dayOf := func(dx float64) time.Time { return o.Day.Add(time.Duration(dx * float64(24*time.Hour))) }
	when := dayOf(cx)
	var rng string
	if cx > 0 {
		gap := math.Log(crit) - tr.Intercept
		early, late := dayOf(gap/tr.SlopeHi), dayOf(gap/tr.SlopeLo)
		rng = fmt.Sprintf(", between %s and %s", r.day(early), r.day(late))
	}
	name := r.metricLabel(metric, metric)
	rate := fmt.Sprintf("rising ~%s/day", pct(tr.Rate))
	var msg string
	switch {
	case windowValue >= crit:
		msg = fmt.Sprintf("%s %s is above %s and still %s", name, num(windowValue), num(crit), rate)
	case cx <= 1:
		msg = fmt.Sprintf("%s %s %s: reaches %s within a day", name, num(windowValue), rate, num(crit))
	default:
		msg = fmt.Sprintf("%s %s %s: reaches %s around %s%s", name, num(windowValue), rate, num(crit), r.day(when), rng)
	}
	first := recent[0].dataDay()
	return finding{rule: RuleTrend, subject: metric, severity: Warning, message: msg, onset: first, columns: cols,
		detail: AlertDetail{Metric: metric, Value: windowValue, Limit: crit, Values: values, Remedy: remedy,
			Forecast: &Forecast{RatePerDay: tr.Rate, Crossing: when.UTC(), Limit: crit}}}, true
}

func (r *Rules) jump(recent []RecentPoint, get func(RecentPoint) float64, o Observation, v float64, metric string,
	warn float64, values map[string]float64, remedy string, cols []string) (finding, bool) {
	if len(recent) == 0 {
		return finding{}, false
	}
	var changes []float64
	for i := 1; i < len(recent); i++ {
		a, b := get(recent[i-1]), get(recent[i])
		if a > 0 && b > 0 && isFinite(a) && isFinite(b) {
			changes = append(changes, math.Log(b/a))
		}
	}
	prev := get(recent[len(recent)-1])
	if len(changes) < minJumpChanges || !(prev > 0) || !isFinite(prev) {
		return finding{}, false
	}
	if math.Max(prev, v) < jumpBand*warn || v >= warn {
		return finding{}, false
	}
	d := math.Log(v / prev)
	z, ok := diagnostics.RobustZ(changes, d)
	if !ok || math.Abs(z) < r.Limits.Jump || math.Abs(d) < math.Log1p(minJump) {
		return finding{}, false
	}
	dir := "jumped"
	if d < 0 {
		dir = "dropped"
	}
	prevDay := recent[len(recent)-1].dataDay()
	msg := fmt.Sprintf("%s %s from %s on %s to %s on %s (%+.0f%%), far outside the recent changes (robust z %.1f)",
		r.metricLabel(metric, metric), dir, num(prev), r.day(prevDay), num(v), r.day(o.Day), 100*math.Expm1(d), z)
	return finding{rule: RuleJump, subject: metric, severity: Warning, message: msg, onset: o.Day, columns: cols,
		detail: AlertDetail{Metric: metric, Value: v, Values: values, Remedy: remedy}}, true
}

// involved names the columns behind a near dependency: those whose VIF is
// at or above the VIF warn level, worst first; when none is, the column
// with the largest VIF and what explains it.
func (r *Rules) involved(o Observation) []string {
	type cv struct {
		name string
		v    float64
	}
	var cs []cv
	for n, v := range o.VIFs {
		if v >= r.Limits.VIF.Warn {
			cs = append(cs, cv{n, v})
		}
	}
	slices.SortFunc(cs, func(a, b cv) int {
		if a.v != b.v {
			if a.v > b.v {
				return -1
			}
			return 1
		}
		return strings.Compare(a.name, b.name)
	})
	out := make([]string, 0, len(cs))
	for _, c := range cs {
		out = append(out, c.name)
	}
	if len(out) == 0 && o.MaxVIFColumn != "" {
		out = append(out, o.MaxVIFColumn)
		for _, d := range o.Drivers {
			out = append(out, d.Column)
		}
	}
	return out
}

func dropCaution(o Observation) string {
	if o.DropCaution != "" {
		return o.DropCaution
	}
	return "dropping a relevant column trades variance for omitted-variable bias"
}

func (r *Rules) remedy(o Observation) string {
	if len(o.SuggestedDrops) > 0 {
		return "consider dropping or combining " + strings.Join(o.SuggestedDrops, ", ") + ", which brings every VIF under the limit; " + dropCaution(o)
	}
	return "look for columns that measure the same thing: combine them, or replace the correlated block by its principal components; " + dropCaution(o)
}

func (r *Rules) prefix() string {
	if r.Segment == "" {
		return ""
	}
	return "segment " + connectors.SegmentLabel(r.Segment) + ": "
}

// day names a data time the way the watch's buckets do: a date, or a date
// and hour for hourly buckets, in the watch's zone.
func (r *Rules) day(t time.Time) string {
	loc := r.Loc
	if loc == nil {
		loc = time.UTC
	}
	switch r.Bucket {
	case "hour", "":
		return t.In(loc).Format("2006-01-02 15:04")
	case "month":
		return t.In(loc).Format("2006-01")
	}
	return t.In(loc).Format("2006-01-02")
}

// exactRemedy says what to do about an exact dependency. Where
// categorical columns take part, their dummies are named by their column.
func exactRemedy(d ExactDependency, others []string, caution string) string {
	if d.Words == "" {
		return fmt.Sprintf("%s is an exact combination of %s, so OLS cannot estimate their coefficients together: "+
			"drop %s from the model (it is the derived column) or restore the upstream definition that made it so; %s",
			d.Dependent, strings.Join(others, ", "), d.Dependent, caution)
	}
	return fmt.Sprintf("%s carry the same information, so OLS cannot estimate their coefficients together: "+
		"keep one of them in the model (a categorical column counts as one), or restore the upstream definition that made it so; %s",
		strings.Join(tableColumns(d.Columns), " and "), caution)
}

// every names the stretch an exact or constant finding covers.
func (r *Rules) every() string {
	switch r.Bucket {
	case "":
		return "every row of the table"
	case "hour":
		return "every hour"
	case "week":
		return "every week"
	case "month":
		return "every month"
	}
	return "every day"
}

// Failure records a failed run: after blind_after consecutive failures
// the blind alert opens (or is updated with the latest error).
func (r *Rules) Failure(open map[string]*Alert, failures int, runErr string, now time.Time) []Change {
	if failures < r.Limits.BlindAfter {
		return nil
	}
	k := AlertKey(RuleBlind, "")
	msg := fmt.Sprintf("watch %s is blind: the last %d runs failed; latest error: %s", r.Watch, failures, runErr)
	if a := open[k]; a != nil {
		a.Message, a.Detail.LastError, a.UpdatedAt, a.UpdatedAsOf = msg, runErr, now, now
		return []Change{{Alert: *a}}
	}
	a := &Alert{
		ID: AlertID(r.Watch, "", RuleBlind, "", now), Watch: r.Watch, Rule: RuleBlind, Severity: Warning,
		AsOf: now, OpenedAt: now, UpdatedAsOf: now, UpdatedAt: now, Message: msg, NotifyState: NotifyPending,
		Onset: now, Columns: []string{},
		Detail: AlertDetail{LastError: runErr, Remedy: "check that the source is reachable and the table or query still exists; plumb retries at every scheduled run"},
	}
	open[k] = a
	return []Change{{Alert: *a, Event: EventOpened}}
}

// Success resolves the blind alert after a run that worked.
func (r *Rules) Success(open map[string]*Alert, now time.Time) []Change {
	k := AlertKey(RuleBlind, "")
	a := open[k]
	if a == nil {
		return nil
	}
	delete(open, k)
	a.ResolvedAt, a.ResolvedAsOf, a.UpdatedAt, a.UpdatedAsOf = now, now, now, now
	a.Message = fmt.Sprintf("watch %s sees again: a run succeeded", r.Watch)
	return []Change{{Alert: *a, Event: EventResolved}}
}

func isFinite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

func days(d time.Duration) float64 { return d.Hours() / 24 }

// metricLabel names a metric for a message.
func (r *Rules) metricLabel(metric, fallback string) string {
	switch metric {
	case MetricCondition:
		return "condition number (with the intercept)"
	case MetricCentered:
		return "centered condition number"
	case MetricMaxVIF:
		return "max VIF"
	}
	return fallback
}

func plural(n int, one, many string) string {
	if n == 1 {
		return one
	}
	return many
}

// num formats a value for a message: three significant digits, whole
// numbers from 100 on, plain digits up to a million.
func num(v float64) string {
	switch {
	case math.IsInf(v, 1):
		return "∞ (singular)"
	case math.IsNaN(v):
		return "undefined"
	case math.Abs(v) >= 1e6:
		return strconv.FormatFloat(v, 'g', 3, 64)
	case math.Abs(v) >= 100:
		return strconv.FormatFloat(v, 'f', 0, 64)
	}
	return strconv.FormatFloat(v, 'g', 3, 64)
}

// constantWords says at what value a column stays: the stored value
// exactly (3.415, not 3.42, so that an owner finds it in the table), or,
// for a column constant but for rounding, about its mean.
func constantWords(c ConstantColumn) string {
	if c.Near {
		return "constant but for rounding, at about " + strconv.FormatFloat(c.Value, 'g', 6, 64)
	}
	if a := math.Abs(c.Value); c.Value == 0 || a >= 1e-4 && a < 1e15 {
		return "constant at " + strconv.FormatFloat(c.Value, 'f', -1, 64)
	}
	return "constant at " + strconv.FormatFloat(c.Value, 'g', -1, 64)
}

func pct(rate float64) string {
	p := 100 * rate
	if math.Abs(p) >= 1 {
		return fmt.Sprintf("%.0f%%", p)
	}
	return fmt.Sprintf("%.1f%%", p)
}
