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
	"plumb/diagnostics"
)

// The alert rules. They are a deterministic function of the sequence of
// observations of one watch and segment (and of the run failures for the
// blind rule): the state they carry between points is RuleState, stored
// with the watch, so a backfill that replays the same points opens and
// resolves the same alerts, with the same ids, at the same data times.
//
//   - level: condition number or max VIF at or above its warn level
//     (warning) or critical level (critical).
//   - exact: an exact linear dependency (rank drop): critical at once.
//   - constant: a column that does not vary: critical at once.
//   - trend: the Theil–Sen line of the log of the condition number (or max
//     VIF) over the last trend_points points rises significantly
//     (Mann–Kendall z ≥ 1.645) and reaches the critical level within the
//     horizon: warning, saying when.
//   - jump: the latest change of the log value is far outside the recent
//     changes (robust z ≥ jump) and at least 25 %, in the band where it is
//     news: the value before or after it at least half the warn level, the
//     value after it under the warn level: warning.
//   - blind: blind_after consecutive failed runs: warning, resolved by the
//     next run that succeeds.
//
// Hysteresis: an alert other than blind resolves only after its condition
// has been absent for clear_after consecutive points.

// Metric names.
const (
	MetricCondition = "condition_number"
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
}

// RecentPoint is a point remembered for trends and jumps.
type RecentPoint struct {
	At   time.Time `json:"at"`
	Cond jfloat    `json:"cond"`
	VIF  jfloat    `json:"vif"`
}

// singular reports a rank-deficient design: its condition number only
// says "singular" (about 1/eps), so trends and jumps leave it out — the
// exact and constant rules speak for it.
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
}

// Change is what a step did to an alert.
type Change struct {
	Alert Alert  // the alert after the step
	Event string // EventOpened, EventEscalated, EventResolved, or "" for an update
}

// AlertKey identifies an alert's condition within a watch and segment.
func AlertKey(rule Rule, subject string) string { return string(rule) + "/" + subject }

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
}

func sevRank(s Severity) int {
	if s == Critical {
		return 2
	}
	return 1
}

// Step evaluates one observation: open maps AlertKey to the open alerts of
// this watch and segment and is updated in place; now is the wall clock.
func (r *Rules) Step(st *RuleState, open map[string]*Alert, o Observation, now time.Time) []Change {
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
			}
			a.Message, a.Detail = f.message, f.detail
			a.UpdatedAsOf, a.UpdatedAt = o.At, now
			changes = append(changes, Change{Alert: *a, Event: event})
		case found:
			delete(st.Clear, k)
			a = &Alert{
				ID: AlertID(r.Watch, r.Segment, f.rule, f.subject, o.At), Watch: r.Watch, Segment: r.Segment,
				Rule: f.rule, Subject: f.subject, Severity: f.severity,
				AsOf: o.At, OpenedAt: now, UpdatedAsOf: o.At, UpdatedAt: now,
				Message: f.message, Detail: f.detail, NotifyState: NotifyPending,
			}
			open[k] = a
			changes = append(changes, Change{Alert: *a, Event: EventOpened})
		default:
			st.Clear[k]++
			if st.Clear[k] >= r.Limits.ClearAfter {
				delete(st.Clear, k)
				delete(open, k)
				a.ResolvedAsOf, a.ResolvedAt = o.At, now
				a.UpdatedAsOf, a.UpdatedAt = o.At, now
				changes = append(changes, Change{Alert: *a, Event: EventResolved})
			}
		}
	}
	// Counters of conditions that are neither open nor found are stale.
	for k := range st.Clear {
		if _, ok := open[k]; !ok {
			delete(st.Clear, k)
		}
	}
	rp := RecentPoint{At: o.At, Cond: jfloat(o.ConditionNumber), VIF: jfloat(o.MaxVIF)}
	if o.singular() {
		rp.Cond = jfloat(math.NaN())
	}
	st.Recent = append(st.Recent, rp)
	if n := r.Limits.TrendPoints; len(st.Recent) > n {
		st.Recent = slices.Delete(st.Recent, 0, len(st.Recent)-n)
	}
	return changes
}

func (r *Rules) findings(st *RuleState, open map[string]*Alert, o Observation) map[string]finding {
	fs := map[string]finding{}
	add := func(f finding) { fs[AlertKey(f.rule, f.subject)] = f }
	l := r.Limits
	values := map[string]float64{}
	if isFinite(o.ConditionNumber) {
		values[MetricCondition] = o.ConditionNumber
	}
	if isFinite(o.MaxVIF) {
		values[MetricMaxVIF] = o.MaxVIF
	}
	remedy := r.remedy(o)

	// Levels.
	for _, m := range []struct {
		metric string
		v      float64
		lv     config.Level
	}{{MetricCondition, o.ConditionNumber, l.Condition}, {MetricMaxVIF, o.MaxVIF, l.VIF}} {
		if !(m.v >= m.lv.Warn) {
			continue
		}
		sev, limit, word := Warning, m.lv.Warn, "warning"
		if m.v >= m.lv.Critical {
			sev, limit, word = Critical, m.lv.Critical, "critical"
		}
		what := metricName(m.metric)
		if m.metric == MetricMaxVIF && o.MaxVIFColumn != "" {
			what += " (" + o.MaxVIFColumn + ")"
		}
		msg := fmt.Sprintf("%s %s is at or above the %s level %s", what, num(m.v), word, num(limit))
		if m.metric == MetricCondition && o.singular() {
			msg = fmt.Sprintf("the design is singular (rank %d of %d): the condition number is effectively infinite, above the %s level %s",
				o.Rank, o.Columns+1, word, num(limit))
		}
		add(finding{rule: RuleLevel, subject: m.metric, severity: sev,
			message: r.prefix() + msg,
			detail: AlertDetail{Metric: m.metric, Value: finiteOr0(m.v), Limit: limit, Values: values,
				Columns: r.involved(o, m.metric), Remedy: remedy}})
	}

	// Exact dependencies and constant columns.
	for _, d := range o.Exact {
		eq := d.Equation
		if eq == "" {
			eq = strings.Join(d.Columns, ", ") + " are linearly dependent"
		}
		add(finding{rule: RuleExact, subject: d.subjectKey(), severity: Critical,
			message: r.prefix() + "exact linear dependency: " + eq,
			detail: AlertDetail{Values: values, Columns: d.Columns, Equation: d.Equation,
				Remedy: "one column is an exact combination of the others, so OLS cannot estimate their coefficients: " +
					"drop one of " + strings.Join(d.Columns, ", ") + " or restore the upstream definition that made it so"}})
	}
	for _, c := range o.Constant {
		add(finding{rule: RuleConstant, subject: c.Name, severity: Critical,
			message: r.prefix() + fmt.Sprintf("column %s is constant (%s) in the window: its coefficient cannot be estimated", c.Name, num(c.Value)),
			detail: AlertDetail{Values: values, Columns: []string{c.Name},
				Remedy: "check what feeds " + c.Name + " (a stuck sensor, a default value?); widen the window so that it varies, or leave it out of the model until it does"}})
	}

	// Trends and jumps over the recent points and this one.
	for _, m := range []struct {
		metric     string
		v          float64
		warn, crit float64
		get        func(RecentPoint) float64
	}{
		{MetricCondition, o.ConditionNumber, l.Condition.Warn, l.Condition.Critical, func(p RecentPoint) float64 { return float64(p.Cond) }},
		{MetricMaxVIF, o.MaxVIF, l.VIF.Warn, l.VIF.Critical, func(p RecentPoint) float64 { return float64(p.VIF) }},
	} {
		if !isFinite(m.v) || !(m.v > 0) || m.metric == MetricCondition && o.singular() {
			continue
		}
		recent := st.Recent
		if n := l.TrendPoints - 1; len(recent) > n {
			recent = recent[len(recent)-n:]
		}
		// A trend warns ahead of the critical level: it opens only below
		// it, and then stays open while the rise goes on.
		_, trendOpen := open[AlertKey(RuleTrend, m.metric)]
		if f, ok := r.trend(recent, m.get, o.At, m.v, m.metric, m.crit, values, remedy, o); ok && (trendOpen || m.v < m.crit) {
			add(f)
		}
		if f, ok := r.jump(recent, m.get, o.At, m.v, m.metric, m.warn, values, remedy, o); ok {
			add(f)
		}
	}
	return fs
}

func (r *Rules) trend(recent []RecentPoint, get func(RecentPoint) float64, at time.Time, v float64, metric string,
	crit float64, values map[string]float64, remedy string, o Observation) (finding, bool) {
	if len(recent)+1 < minTrendPoints {
		return finding{}, false
	}
	x := make([]float64, 0, len(recent)+1)
	y := make([]float64, 0, len(recent)+1)
	for _, p := range recent {
		x = append(x, days(p.At.Sub(at)))
		y = append(y, get(p))
	}
	x = append(x, 0)
	y = append(y, v)
	tr, ok := diagnostics.LogTrend(x, y)
	if !ok || tr.N < minTrendPoints || tr.Z < trendZ || !(tr.Slope > 0) {
		return finding{}, false
	}
	cx, ok := tr.Crossing(crit)
	horizon := days(r.Limits.Horizon.D())
	if !ok || cx > horizon {
		return finding{}, false
	}
	when := at.Add(time.Duration(cx * float64(24*time.Hour)))
	var msg string
	rate := fmt.Sprintf("rising ~%s/day", pct(tr.Rate))
	switch {
	case v >= crit:
		msg = fmt.Sprintf("%s %s is above %s and still %s", metricName(metric), num(v), num(crit), rate)
	case cx <= 1:
		msg = fmt.Sprintf("%s %s %s: reaches %s within a day", metricName(metric), num(v), rate, num(crit))
	default:
		msg = fmt.Sprintf("%s %s %s: reaches %s in about %d days (around %s)", metricName(metric), num(v), rate, num(crit),
			int(math.Round(cx)), when.UTC().Format("2006-01-02"))
	}
	return finding{rule: RuleTrend, subject: metric, severity: Warning, message: r.prefix() + msg,
		detail: AlertDetail{Metric: metric, Value: v, Limit: crit, Values: values, Columns: r.involved(o, metric), Remedy: remedy,
			Forecast: &Forecast{RatePerDay: tr.Rate, Crossing: when.UTC(), Limit: crit}}}, true
}

func (r *Rules) jump(recent []RecentPoint, get func(RecentPoint) float64, at time.Time, v float64, metric string,
	warn float64, values map[string]float64, remedy string, o Observation) (finding, bool) {
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
	msg := fmt.Sprintf("%s %s from %s to %s (%+.0f%%) since %s, far outside the recent point-to-point changes (robust z %.1f)",
		metricName(metric), dir, num(prev), num(v), 100*math.Expm1(d), recent[len(recent)-1].At.UTC().Format("2006-01-02 15:04"), z)
	return finding{rule: RuleJump, subject: metric, severity: Warning, message: r.prefix() + msg,
		detail: AlertDetail{Metric: metric, Value: v, Values: values, Columns: r.involved(o, metric), Remedy: remedy}}, true
}

// involved names the columns behind a metric: for max VIF those at or
// above the VIF warn level, worst first; for the condition number the
// same (the columns taking part in the near dependencies).
func (r *Rules) involved(o Observation, metric string) []string {
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
	out := make([]string, len(cs))
	for i, c := range cs {
		out[i] = c.name
	}
	return out
}

func (r *Rules) remedy(o Observation) string {
	if len(o.SuggestedDrops) > 0 {
		s := "consider dropping or combining " + strings.Join(o.SuggestedDrops, ", ") + ", which brings every VIF under the limit"
		if o.DropCaution != "" {
			s += "; " + o.DropCaution
		} else {
			s += "; dropping a relevant column trades variance for omitted-variable bias"
		}
		return s
	}
	return "look for columns that measure the same thing: combine them, or replace the correlated block by its principal components"
}

func (r *Rules) prefix() string {
	if r.Segment == "" {
		return ""
	}
	return "segment " + r.Segment + ": "
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

func finiteOr0(v float64) float64 {
	if isFinite(v) {
		return v
	}
	return 0
}

func days(d time.Duration) float64 { return d.Hours() / 24 }

func metricName(m string) string {
	switch m {
	case MetricCondition:
		return "condition number"
	case MetricMaxVIF:
		return "max VIF"
	}
	return m
}

// num formats a value for a message: three significant digits, whole
// numbers from 100 on.
func num(v float64) string {
	switch {
	case math.IsInf(v, 1):
		return "infinite"
	case math.IsNaN(v):
		return "undefined"
	case math.Abs(v) >= 1e6:
		return strconv.FormatFloat(v, 'g', 3, 64)
	case math.Abs(v) >= 100:
		return strconv.FormatFloat(v, 'f', 0, 64)
	}
	return strconv.FormatFloat(v, 'g', 3, 64)
}

func pct(rate float64) string {
	p := 100 * rate
	if math.Abs(p) >= 1 {
		return fmt.Sprintf("%.0f%%", p)
	}
	return fmt.Sprintf("%.1f%%", p)
}
