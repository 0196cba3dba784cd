package config

import (
	"fmt"
	"maps"
	"math"
	"net/mail"
	"net/url"
	"regexp"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/robfig/cron/v3"
	"go.yaml.in/yaml/v3"

	"plumb/connectors"
)

// validator checks a decoded configuration, fills its defaults and
// collects every problem with the line it is on.
type validator struct {
	root     *yaml.Node
	problems []string
}

func (v *validator) err() error {
	if len(v.problems) == 0 {
		return nil
	}
	// In the order of the file; problems without a line last.
	slices.SortStableFunc(v.problems, func(a, b string) int { return problemLine(a) - problemLine(b) })
	return &Error{Problems: v.problems}
}

var reProblemLine = regexp.MustCompile(`^line (\d+): `)

func problemLine(p string) int {
	if m := reProblemLine.FindStringSubmatch(p); m != nil {
		if n, err := strconv.Atoi(m[1]); err == nil {
			return n
		}
	}
	return math.MaxInt32
}

// addf records a problem at the node reached by path (string keys and int
// indexes), or at its deepest existing ancestor.
func (v *validator) addf(path []any, format string, args ...any) {
	msg := fmt.Sprintf(format, args...)
	if line := v.line(path...); line > 0 {
		msg = fmt.Sprintf("line %d: %s", line, msg)
	}
	v.problems = append(v.problems, msg)
}

func (v *validator) line(path ...any) int {
	n := v.root
	if n == nil {
		return 0
	}
	line := n.Line
	for _, p := range path {
		var next *yaml.Node
		switch p := p.(type) {
		case string:
			if n.Kind == yaml.MappingNode {
				for i := 0; i+1 < len(n.Content); i += 2 {
					if n.Content[i].Value == p {
						next = n.Content[i+1]
						break
					}
				}
			}
		case int:
			if n.Kind == yaml.SequenceNode && p < len(n.Content) {
				next = n.Content[p]
			}
		}
		if next == nil {
			return line
		}
		n = next
		line = n.Line
	}
	return line
}

var reName = regexp.MustCompile(`^[A-Za-z0-9][A-Za-z0-9_.-]{0,127}$`)

func (v *validator) config(c *Config) {
	if c.Store == "" {
		c.Store = DefaultStore
	} else if !strings.HasPrefix(c.Store, "sqlite:") && !isPostgres(c.Store) {
		v.addf([]any{"store"}, "store %q: want sqlite:PATH or postgres://user@host/db", connectors.Redact(c.Store))
	}
	if c.PublicURL != "" {
		u, err := url.Parse(c.PublicURL)
		switch {
		case err != nil || (u.Scheme != "http" && u.Scheme != "https") || u.Host == "":
			v.addf([]any{"public_url"}, "public_url %q: want an absolute http:// or https:// URL, e.g. https://plumb.example.org", connectors.Redact(c.PublicURL))
		case u.User != nil:
			v.addf([]any{"public_url"}, "public_url carries credentials; it is shown in every notification, so give it without them")
		case u.RawQuery != "" || u.Fragment != "":
			v.addf([]any{"public_url"}, "public_url %q: give it without ? or #; watch pages are linked under it", c.PublicURL)
		}
	}
	for _, name := range sortedKeys(c.Sources) {
		u := c.Sources[name]
		p := []any{"sources", name}
		if !reName.MatchString(name) {
			v.addf(p, "source name %q: use letters, digits, '.', '_' and '-'", name)
		}
		if !strings.HasPrefix(u, "sqlite:") && !isPostgres(u) {
			v.addf(p, "source %q: URL %q: want sqlite:PATH or postgres://user@host/db", name, connectors.Redact(u))
		}
	}
	for _, name := range sortedKeys(c.Notifiers) {
		v.notifier(name, c.Notifiers[name])
	}
	if len(c.Watches) == 0 {
		v.addf([]any{"watches"}, "no watches: add at least one under watches:")
	}
	seen := map[string]int{}
	for i, w := range c.Watches {
		if w == nil {
			v.addf([]any{"watches", i}, "watch %d is empty", i+1)
			continue
		}
		if j, dup := seen[w.Name]; dup && w.Name != "" {
			v.addf([]any{"watches", i, "name"}, "watch name %q is used twice (also watch %d)", w.Name, j+1)
		}
		seen[w.Name] = i
		v.watch(c, i, w)
	}
}

func isPostgres(u string) bool {
	return strings.HasPrefix(u, "postgres://") || strings.HasPrefix(u, "postgresql://")
}

func (v *validator) notifier(name string, n *Notifier) {
	p := []any{"notifiers", name}
	if !reName.MatchString(name) {
		v.addf(p, "notifier name %q: use letters, digits, '.', '_' and '-'", name)
	}
	if n == nil {
		v.addf(p, "notifier %q is empty: give webhook, log or smtp", name)
		return
	}
	kinds := 0
	if n.Webhook != "" {
		kinds++
	}
	if n.Log {
		kinds++
	}
	if n.SMTP != nil {
		kinds++
	}
	if kinds != 1 {
		v.addf(p, "notifier %q: give exactly one of webhook, log and smtp", name)
		return
	}
	if n.Webhook == "" && (n.SecretEnv != "" || n.SecretFile != "" || n.PreviousSecretEnv != "" || n.PreviousSecretFile != "") {
		v.addf(p, "notifier %q: secret_env, secret_file and their previous_ forms belong to a webhook", name)
	}
	if n.Timeout == 0 {
		n.Timeout = Duration(DefaultNotifyTimeout)
	}
	if n.MaxAge == 0 {
		n.MaxAge = Duration(DefaultNotifyMaxAge)
	}
	switch n.Kind() {
	case "webhook":
		u, err := url.Parse(n.Webhook)
		if err != nil || (u.Scheme != "http" && u.Scheme != "https") || u.Host == "" {
			v.addf(append(p, "webhook"), "notifier %q: webhook %q: want an http:// or https:// URL", name, connectors.Redact(n.Webhook))
		} else if u.User != nil {
			v.addf(append(p, "webhook"), "notifier %q: webhook URL carries credentials; use secret_env or secret_file for the signing key", name)
		}
		switch {
		case n.SecretEnv == "" && n.SecretFile == "":
			v.addf(p, "notifier %q: a webhook needs a signing key: secret_env: VAR or secret_file: PATH", name)
		case n.SecretEnv != "" && n.SecretFile != "":
			v.addf(p, "notifier %q: give one of secret_env and secret_file", name)
		}
		if n.PreviousSecretEnv != "" && n.PreviousSecretFile != "" {
			v.addf(p, "notifier %q: give one of previous_secret_env and previous_secret_file", name)
		}
	case "smtp":
		s := n.SMTP
		sp := append(p, "smtp")
		if s.Addr == "" || !strings.Contains(s.Addr, ":") {
			v.addf(sp, "notifier %q: smtp addr %q: want host:port", name, s.Addr)
		}
		if _, err := mail.ParseAddress(s.From); err != nil {
			v.addf(append(sp, "from"), "notifier %q: smtp from %q: %v", name, s.From, err)
		}
		if len(s.To) == 0 {
			v.addf(sp, "notifier %q: smtp needs at least one address in to", name)
		}
		for i, to := range s.To {
			if _, err := mail.ParseAddress(to); err != nil {
				v.addf(append(sp, "to", i), "notifier %q: smtp to %q: %v", name, to, err)
			}
		}
		if s.PasswordEnv != "" && s.PasswordFile != "" {
			v.addf(sp, "notifier %q: give one of password_env and password_file", name)
		}
		if (s.PasswordEnv != "" || s.PasswordFile != "") && s.Username == "" {
			v.addf(sp, "notifier %q: a password needs a username", name)
		}
		if s.StartTLS == nil {
			t := true
			s.StartTLS = &t
		}
	}
}

// cronParser reads 5-field specs and descriptors such as @daily.
var cronParser = cron.NewParser(cron.Minute | cron.Hour | cron.Dom | cron.Month | cron.Dow | cron.Descriptor)

// ParseSchedule parses a 5-field cron spec (or @hourly, @daily, @every 10m
// …) in loc. The parser is run under recover: robfig/cron v3.0.1 can panic
// on some malformed specs.
func ParseSchedule(spec string, loc *time.Location) (s cron.Schedule, err error) {
	defer func() {
		if r := recover(); r != nil {
			s, err = nil, fmt.Errorf("schedule %q: not a cron spec (%v)", spec, r)
		}
	}()
	if strings.HasPrefix(strings.TrimSpace(spec), "TZ=") || strings.HasPrefix(strings.TrimSpace(spec), "CRON_TZ=") {
		return nil, fmt.Errorf("schedule %q: set the zone with time_zone, not in the spec", spec)
	}
	s, err = cronParser.Parse(spec)
	if err != nil {
		return nil, fmt.Errorf("schedule %q: %v; want 5 fields (minute hour day-of-month month day-of-week) or @hourly, @daily, @every 30m", spec, err)
	}
	if loc != nil {
		if ss, ok := s.(*cron.SpecSchedule); ok {
			ss.Location = loc
		}
	}
	// A spec can name a date that never comes (the 31st of February, the
	// 31st of April): the library then has no next time, and a scheduler
	// that asks it would run at once, again and again. Five years from a
	// fixed day hold every day of the calendar, the 29th of February
	// included, so a spec with no tick in them has none at all.
	if from := time.Date(2001, 1, 1, 0, 0, 0, 0, time.UTC); s.Next(from).IsZero() {
		return nil, fmt.Errorf("schedule %q never fires: no date matches its day of month, month and day of week; pick a day that every such month has", spec)
	}
	return s, nil
}

func (v *validator) watch(c *Config, i int, w *Watch) {
	p := func(keys ...any) []any { return append([]any{"watches", i}, keys...) }
	label := fmt.Sprintf("watch %q", w.Name)
	switch {
	case w.Name == "":
		v.addf(p(), "watch %d has no name", i+1)
		label = fmt.Sprintf("watch %d", i+1)
	case !reName.MatchString(w.Name):
		v.addf(p("name"), "watch name %q: use letters, digits, '.', '_' and '-' (at most 128)", w.Name)
	}
	if w.Source == "" {
		v.addf(p(), "%s: no source; name one of the sources", label)
	} else if _, ok := c.Sources[w.Source]; !ok {
		v.addf(p("source"), "%s: unknown source %q (known: %s)", label, w.Source, keys(c.Sources))
	}
	if (w.Table == "") == (w.Query == "") {
		v.addf(p(), "%s: give one of table and query", label)
	}
	if w.Query != "" && w.Where != "" {
		v.addf(p("where"), "%s: where applies to a table; put the filter in the query", label)
	}
	for j, col := range w.Columns {
		if strings.TrimSpace(col) == "" {
			v.addf(p("columns", j), "%s: empty column name", label)
		}
		if slices.Contains(w.Columns[:j], col) {
			v.addf(p("columns", j), "%s: column %q listed twice", label, col)
		}
		if col == w.Target && col != "" {
			v.addf(p("columns", j), "%s: the target %q is also listed as a column", label, col)
		}
		if col == w.TimeColumn && col != "" {
			v.addf(p("columns", j), "%s: the time column %q cannot be a feature", label, col)
		}
	}
	if len(w.Columns) == 1 {
		v.addf(p("columns"), "%s: one column has no multicollinearity; list two or more", label)
	}
	for _, g := range sortedKeys(w.Groups) {
		cols := w.Groups[g]
		if len(cols) == 0 {
			v.addf(p("groups", g), "%s: group %q names no columns", label, g)
		}
		for _, col := range cols {
			if len(w.Columns) > 0 && !slices.Contains(w.Columns, col) {
				v.addf(p("groups", g), "%s: group %q: column %q is not among the watch's columns", label, g, col)
			}
		}
	}

	w.Location = time.UTC
	if w.TimeZone != "" {
		loc, err := time.LoadLocation(w.TimeZone)
		if err != nil {
			v.addf(p("time_zone"), "%s: time_zone %q: not an IANA zone name such as Europe/Berlin", label, w.TimeZone)
		} else {
			w.Location = loc
		}
	} else {
		w.TimeZone = "UTC"
	}

	switch w.Bucket {
	case "":
		if w.TimeColumn != "" {
			w.Bucket = "day"
		}
	case "hour", "day", "week", "month":
		if w.TimeColumn == "" {
			v.addf(p("bucket"), "%s: bucket needs time_column", label)
		}
	default:
		v.addf(p("bucket"), "%s: bucket %q: want hour, day, week or month", label, w.Bucket)
	}
	if w.Bucket == "" {
		if !w.Window.IsZero() {
			v.addf(p("window"), "%s: window needs time_column (and bucket)", label)
		}
		if !w.Rescan.IsZero() {
			v.addf(p("rescan"), "%s: rescan needs time_column (and bucket)", label)
		}
	} else {
		if w.Window.IsZero() {
			w.Window = Span{Buckets: DefaultWindow}
		}
		if w.Rescan.IsZero() {
			w.Rescan = Span{Buckets: DefaultRescan}
		}
		if bd := approxBucket(w.Bucket); bd > 0 {
			if w.Window.Duration > 0 && w.Window.Duration < bd {
				v.addf(p("window"), "%s: window %s is shorter than one %s", label, w.Window, w.Bucket)
			}
			if w.Window.Duration > 0 && w.Rescan.Duration > w.Window.Duration ||
				w.Window.Buckets > 0 && w.Rescan.Buckets > w.Window.Buckets {
				v.addf(p("rescan"), "%s: rescan %s is longer than the window %s", label, w.Rescan, w.Window)
			}
		}
	}
	if w.SegmentBy != "" && (w.SegmentBy == w.Target || slices.Contains(w.Columns, w.SegmentBy)) {
		v.addf(p("segment_by"), "%s: segment_by %q is also a feature or the target", label, w.SegmentBy)
	}
	if w.MaxSegments == 0 {
		w.MaxSegments = DefaultMaxSegments
	} else if w.MaxSegments < 0 || w.SegmentBy == "" {
		v.addf(p("max_segments"), "%s: max_segments wants segment_by and a positive count", label)
	}

	if w.MaxLevels == 0 {
		w.MaxLevels = DefaultMaxLevels
	} else if w.MaxLevels < 2 {
		v.addf(p("max_levels"), "%s: max_levels wants a count of 2 or more (a factor needs two levels to vary)", label)
	}
	for _, col := range slices.Sorted(maps.Keys(w.BaseLevels)) {
		level := w.BaseLevels[col]
		switch {
		case col == w.Target:
			v.addf(p("base_levels"), "%s: base_levels names the target %q; the target is numeric, not a factor", label, col)
		case len(w.Columns) > 0 && !slices.Contains(w.Columns, col):
			v.addf(p("base_levels"), "%s: base_levels names %q, which is not among the watch's columns (%s)", label, col, strings.Join(w.Columns, ", "))
		case level == "":
			v.addf(p("base_levels"), "%s: base_levels: give %q a level", label, col)
		}
	}

	if w.Schedule == "" {
		w.Schedule = DefaultSchedule
	}
	if _, err := ParseSchedule(w.Schedule, w.Location); err != nil {
		v.addf(p("schedule"), "%s: %v", label, err)
	}
	switch w.Precision {
	case "":
		w.Precision = "auto"
	case "auto", "fast", "exact", "precise":
	default:
		v.addf(p("precision"), "%s: precision %q: want auto, fast, exact or precise", label, w.Precision)
	}
	if w.Pushdown {
		if w.Precision == "exact" || w.Precision == "precise" {
			v.addf(p("pushdown"), "%s: pushdown computes the cross-products in the database, and precision %s needs the QR factor of the rows; use precision auto or fast, or drop pushdown", label, w.Precision)
		}
		if u := c.Sources[w.Source]; strings.HasPrefix(u, "sqlite:") {
			v.addf(p("pushdown"), "%s: pushdown computes the sums inside PostgreSQL; source %q is SQLite, which plumb reads directly: drop pushdown", label, w.Source)
		}
	}

	v.limits(p("limits"), label, &w.Limits)

	for j, set := range w.ExpectedDependencies {
		if len(set) < 2 {
			v.addf(p("expected_dependencies", j), "%s: expected_dependencies entry %d: a dependency needs two or more columns", label, j+1)
		}
		for _, col := range set {
			if strings.TrimSpace(col) == "" {
				v.addf(p("expected_dependencies", j), "%s: expected_dependencies entry %d: empty column name", label, j+1)
			} else if len(w.Columns) > 0 && !slices.Contains(w.Columns, col) {
				v.addf(p("expected_dependencies", j), "%s: expected_dependencies entry %d: column %q is not among the watch's columns", label, j+1, col)
			}
		}
	}

	for j, n := range w.Notify {
		if _, ok := c.Notifiers[n]; !ok {
			v.addf(p("notify", j), "%s: unknown notifier %q (known: %s)", label, n, keys(c.Notifiers))
		}
		if slices.Contains(w.Notify[:j], n) {
			v.addf(p("notify", j), "%s: notifier %q listed twice", label, n)
		}
	}
}

func (v *validator) limits(p []any, label string, l *Limits) {
	at := func(keys ...any) []any { return append(append([]any{}, p...), keys...) }
	level := func(key string, lv *Level, warn, crit float64) {
		if lv.Warn == 0 && lv.Critical == 0 {
			lv.Warn, lv.Critical = warn, crit
			return
		}
		if lv.Warn == 0 {
			lv.Warn = min(warn, lv.Critical)
		}
		if lv.Critical == 0 {
			lv.Critical = max(crit, lv.Warn)
		}
		if !(lv.Warn > 1) {
			v.addf(at(key, "warn"), "%s: limits.%s.warn %v: want a number above 1", label, key, lv.Warn)
		}
		if !(lv.Critical >= lv.Warn) {
			v.addf(at(key, "critical"), "%s: limits.%s.critical %v is below warn %v", label, key, lv.Critical, lv.Warn)
		}
	}
	level("vif", &l.VIF, DefaultVIFWarn, DefaultVIFCrit)
	level("condition", &l.Condition, DefaultCondWarn, DefaultCondCrit)
	switch l.ConditionBasis {
	case "":
		l.ConditionBasis = DefaultConditionBasis
	case ConditionCentered, ConditionIntercept:
	default:
		v.addf(at("condition_basis"), "%s: limits.condition_basis %q: want centered (the columns among themselves) or intercept (with the intercept column)", label, l.ConditionBasis)
	}
	if l.Horizon == 0 {
		l.Horizon = Duration(DefaultHorizon)
	}
	if l.ClearAfter == 0 {
		l.ClearAfter = DefaultClearAfter
	} else if l.ClearAfter < 1 || l.ClearAfter > 1000 {
		v.addf(at("clear_after"), "%s: limits.clear_after %d: want 1 to 1000 runs", label, l.ClearAfter)
	}
	if l.BlindAfter == 0 {
		l.BlindAfter = DefaultBlindAfter
	} else if l.BlindAfter < 1 || l.BlindAfter > 1000 {
		v.addf(at("blind_after"), "%s: limits.blind_after %d: want 1 to 1000 failed runs", label, l.BlindAfter)
	}
	if l.Jump == 0 {
		l.Jump = DefaultJump
	} else if !(l.Jump >= 1 && l.Jump <= 100) {
		v.addf(at("jump"), "%s: limits.jump %v: want a robust z-score between 1 and 100", label, l.Jump)
	}
	if l.TrendPoints == 0 {
		l.TrendPoints = DefaultTrendPoints
	} else if l.TrendPoints < 5 || l.TrendPoints > 1000 {
		v.addf(at("trend_points"), "%s: limits.trend_points %d: want 5 to 1000 points", label, l.TrendPoints)
	}
}

// approxBucket is a bucket's nominal length, for sanity checks only.
func approxBucket(b string) time.Duration {
	switch b {
	case "hour":
		return time.Hour
	case "day":
		return 24 * time.Hour
	case "week":
		return 7 * 24 * time.Hour
	case "month":
		return 28 * 24 * time.Hour
	}
	return 0
}

func keys[V any](m map[string]V) string {
	if len(m) == 0 {
		return "none"
	}
	return strings.Join(sortedKeys(m), ", ")
}

func sortedKeys[V any](m map[string]V) []string {
	ks := make([]string, 0, len(m))
	for k := range m {
		ks = append(ks, k)
	}
	slices.Sort(ks)
	return ks
}
