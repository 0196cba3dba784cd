package agent

import (
	"fmt"
	"net/url"
	"strconv"
	"strings"
	"time"

	"plumb/connectors"
	"plumb/diagnostics"
)

// Cautions every notification carries. The diagnostics describe the data;
// what to do about a model is its owners' call.
const (
	// CautionGovernance is in every notification.
	CautionGovernance = "plumb's diagnostics describe the data, not causes. Where the model's results affect people, " +
		"defer to the model's governance before changing its inputs."
	// CautionOmitted accompanies every remedy that suggests dropping a column.
	CautionOmitted = "dropping a relevant column trades variance for omitted-variable bias"
)

// Notification is the content every channel delivers: the webhook's JSON
// body, the log notifier's line, the email's text. Times named as_of,
// onset and resolved_as_of are data times (the windows' ends); the only
// wall-clock time is recorded_at.
type Notification struct {
	ID      string `json:"id"` // the event's id: receivers deduplicate on it
	Event   string `json:"event"`
	AlertID string `json:"alert_id"`
	// Summary says what happened in words (an email's subject).
	Summary string `json:"summary"`
	Watch   string `json:"watch"`
	Source  string `json:"source"`
	Table   string `json:"table,omitempty"`
	// Segment is the series key ("" is the whole table), shown decoded:
	// "whole_table": true, or "segment" with the value or null for NULL
	// (segmentjson.go).
	Segment string `json:"-"`
	// Segments, on the opening of an exact dependency that appeared in
	// several segments in the same run, lists them all (keys; JSON shows
	// the values, null for NULL): one notification for one equation (the
	// alerts stay one per segment).
	Segments []string `json:"-"`
	Rule     Rule     `json:"rule"`
	Subject  string   `json:"subject,omitempty"`
	Severity Severity `json:"severity"`

	Onset        *time.Time   `json:"onset"`          // from when the cause holds; null when not known
	AsOf         time.Time    `json:"as_of"`          // the window end that opened the alert
	ResolvedAsOf *time.Time   `json:"resolved_as_of"` // the window end that resolved it; null while open
	Window       *AlertWindow `json:"window"`         // the window last judged: start, end, rows used
	RecordedAt   time.Time    `json:"recorded_at"`    // wall clock: when plumb recorded the event

	Message  string               `json:"message"`
	Values   map[string]float64   `json:"values,omitempty"`
	Columns  []string             `json:"columns"`
	Equation string               `json:"equation,omitempty"`
	Drivers  []diagnostics.Driver `json:"drivers,omitempty"`
	Forecast *Forecast            `json:"forecast,omitempty"`
	Remedy   string               `json:"remedy,omitempty"`
	// Acknowledged is the owner's acknowledgement, when there is one.
	Acknowledged *Ack `json:"acknowledged,omitempty"`
	// URL is the watch page under the configured public_url.
	URL     string `json:"url,omitempty"`
	Caution string `json:"caution"`
}

func (e *evaluation) notification(a *Alert, event string, now time.Time) Notification {
	n := Notification{Event: event, AlertID: a.ID, Summary: Headline(a, event), Watch: a.Watch, Source: e.w.Source,
		Table: e.w.Table, Segment: a.Segment, Rule: a.Rule, Subject: a.Subject, Severity: a.Severity,
		Onset: timeOrNil(a.Onset), AsOf: a.AsOf.UTC(), ResolvedAsOf: timeOrNil(a.ResolvedAsOf), RecordedAt: now.UTC(),
		Message: a.Message, Values: a.Detail.Values, Columns: alertColumns(a), Equation: a.Detail.Equation,
		Drivers: a.Drivers, Forecast: a.Detail.Forecast, Remedy: remedyWithCaution(a.Detail.Remedy),
		Acknowledged: a.Ack, Caution: CautionGovernance}
	if a.Window != nil {
		w := *a.Window
		w.Start, w.End = w.Start.UTC(), w.End.UTC()
		n.Window = &w
	}
	if e.r.Config != nil {
		n.URL = WatchLink(e.r.Config.PublicURL, a.Watch, a.Segment)
	}
	return n
}

func timeOrNil(t time.Time) *time.Time {
	if t.IsZero() {
		return nil
	}
	u := t.UTC()
	return &u
}

// alertColumns are the columns an alert involves, never nil.
func alertColumns(a *Alert) []string {
	switch {
	case len(a.Columns) > 0:
		return a.Columns
	case len(a.Detail.Columns) > 0:
		return a.Detail.Columns
	}
	return []string{}
}

// remedyWithCaution adds the omitted-variable caution to a remedy that
// suggests dropping a column and does not carry it yet.
func remedyWithCaution(r string) string {
	if r == "" || !strings.Contains(strings.ToLower(r), "drop") || strings.Contains(r, "omitted-variable") {
		return r
	}
	return strings.TrimRight(r, ". ") + "; " + CautionOmitted
}

// WatchLink is the watch page (of a segment, when not "") under the
// dashboard's public address; "" when there is none.
func WatchLink(publicURL, watch, segment string) string {
	if publicURL == "" {
		return ""
	}
	u := strings.TrimRight(publicURL, "/") + "/watches/" + url.PathEscape(watch)
	if segment != connectors.WholeTable {
		u += "?segment=" + url.QueryEscape(connectors.SegmentLabel(segment))
	}
	return u
}

// Headline says in a line what an alert's event is about, for an email's
// subject or a list: "district_daily: total_connections became the exact
// sum of two columns since 2026-08-10".
func Headline(a *Alert, event string) string {
	where := a.Watch
	if a.Segment != connectors.WholeTable {
		where += " (" + connectors.SegmentLabel(a.Segment) + ")"
	}
	since := a.Onset
	if since.IsZero() {
		since = a.AsOf
	}
	s := where + ": " + cause(a, since, event == EventResolved)
	switch event {
	case EventEscalated:
		s += "; now " + string(a.Severity)
	case EventResolved:
		if !a.ResolvedAsOf.IsZero() {
			s += "; resolved as of " + dataTime(a.ResolvedAsOf)
		} else {
			s += "; resolved"
		}
	case EventSnoozeEnded:
		s += "; still open after the snooze"
	}
	return s
}

// cause is the alert's cause in words, dated from since. For a
// resolution it leaves out the figures of the latest point (the level
// and forecast then describe the point that cleared it).
func cause(a *Alert, since time.Time, resolved bool) string {
	d := a.Detail
	from := " since " + dataTime(since)
	switch a.Rule {
	case RuleExact:
		if dep, what, ok := describeEquation(d.Equation); ok {
			return dep + " became " + what + from
		}
		return "an exact linear dependency among " + columnList(alertColumns(a)) + from
	case RuleConstant:
		return columnList(alertColumns(a)) + " stopped varying" + from
	case RuleLevel:
		what := metricPhrase(d.Metric)
		if d.Metric == MetricMaxVIF && len(alertColumns(a)) > 0 {
			what += " (" + alertColumns(a)[0] + ")"
		}
		if d.Limit > 0 && !resolved {
			// Dated from when this severity began; the onset dates the
			// rise as a whole.
			at := from
			if !d.Since.IsZero() {
				at = " since " + dataTime(d.Since)
			}
			return fmt.Sprintf("%s at or above the %s level %s%s", what, a.Severity, num(d.Limit), at)
		}
		return what + " at " + string(a.Severity) + " level" + from
	case RuleTrend:
		if f := d.Forecast; f != nil && !resolved {
			return fmt.Sprintf("%s rising ~%s/day, forecast to reach %s around %s", metricPhrase(d.Metric), pct(f.RatePerDay),
				num(f.Limit), f.Crossing.UTC().Format("2006-01-02"))
		}
		return metricPhrase(d.Metric) + " rising" + from
	case RuleJump:
		return metricPhrase(d.Metric) + " changed abruptly on " + dataTime(a.AsOf)
	case RuleBlind:
		return "the watch cannot read its data since " + a.AsOf.UTC().Format("2006-01-02 15:04 UTC")
	case Rule("broken"):
		return "an expected dependency among " + columnList(alertColumns(a)) + " stopped holding" + from
	}
	return a.Message
}

// describeEquation reads an equation as diagnostics writes it ("dep =
// 1·a + 1·b + 0") and names its shape: "the exact sum of two columns",
// "an exact copy of a", "an exact multiple of a", "an exact linear
// function of a", or "an exact linear combination of three columns".
func describeEquation(eq string) (dep, what string, ok bool) {
	dep, rhs, ok := strings.Cut(eq, " = ")
	if !ok || dep == "" {
		return "", "", false
	}
	// Split into signed parts: the terms c·t and the constant last.
	rhs = strings.ReplaceAll(rhs, " - ", " + -")
	parts := strings.Split(rhs, " + ")
	if len(parts) < 2 {
		return "", "", false
	}
	c0, err := strconv.ParseFloat(parts[len(parts)-1], 64)
	if err != nil {
		return "", "", false
	}
	var terms []string
	sum := true
	coef1 := 0.0
	for _, p := range parts[:len(parts)-1] {
		cs, t, ok := strings.Cut(p, "·")
		if !ok {
			return "", "", false
		}
		c, err := strconv.ParseFloat(cs, 64)
		if err != nil {
			return "", "", false
		}
		if c != 1 {
			sum = false
		}
		coef1 = c
		terms = append(terms, t)
	}
	switch {
	case len(terms) == 1 && coef1 == 1 && c0 == 0:
		return dep, "an exact copy of " + terms[0], true
	case len(terms) == 1 && c0 == 0:
		return dep, "an exact multiple of " + terms[0], true
	case len(terms) == 1:
		return dep, "an exact linear function of " + terms[0], true
	case sum && c0 == 0:
		return dep, "the exact sum of " + countWord(len(terms)) + " columns", true
	}
	return dep, "an exact linear combination of " + countWord(len(terms)) + " columns", true
}

func countWord(n int) string {
	words := []string{"no", "one", "two", "three", "four", "five", "six", "seven", "eight", "nine", "ten"}
	if n >= 0 && n < len(words) {
		return words[n]
	}
	return strconv.Itoa(n)
}

func columnList(cols []string) string {
	switch len(cols) {
	case 0:
		return "columns"
	case 1:
		return cols[0]
	}
	return strings.Join(cols[:len(cols)-1], ", ") + " and " + cols[len(cols)-1]
}

// dataTime writes a data time: the day when it is midnight UTC (daily
// and coarser buckets), else day and time.
func dataTime(t time.Time) string {
	t = t.UTC()
	if t.Hour() == 0 && t.Minute() == 0 && t.Second() == 0 && t.Nanosecond() == 0 {
		return t.Format("2006-01-02")
	}
	return t.Format("2006-01-02 15:04 UTC")
}

// metricPhrase names a metric as the rules' messages do.
func metricPhrase(m string) string { return (&Rules{}).metricLabel(m, m) }
