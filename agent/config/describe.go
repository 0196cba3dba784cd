package config

import (
	"fmt"
	"io"
	"strings"
	"time"

	"plumb/connectors"
)

// Describe writes what the configuration would run, for `plumb config
// check`: the store, the sources and notifiers (passwords redacted, secrets
// named by where they come from) and each watch with its settings and next
// scheduled runs after now. env tells whether secret variables are set.
func (c *Config) Describe(w io.Writer, now time.Time, env Env) {
	p := func(format string, args ...any) { fmt.Fprintf(w, format, args...) }
	p("store: %s\n", connectors.Redact(c.Store))
	p("sources:\n")
	for _, name := range sortedKeys(c.Sources) {
		p("  %s: %s\n", name, connectors.Redact(c.Sources[name]))
	}
	if len(c.Notifiers) > 0 {
		p("notifiers:\n")
	}
	for _, name := range sortedKeys(c.Notifiers) {
		n := c.Notifiers[name]
		switch n.Kind() {
		case "webhook":
			signed := secretSource(n.SecretEnv, n.SecretFile, env)
			if n.PreviousSecretEnv != "" || n.PreviousSecretFile != "" {
				signed += " and, during the rotation, " + secretSource(n.PreviousSecretEnv, n.PreviousSecretFile, env)
			}
			p("  %s: webhook POST %s, signed with %s, timeout %s, retried for %s\n",
				name, connectors.Redact(n.Webhook), signed, n.Timeout, n.MaxAge)
		case "log":
			p("  %s: log (JSON lines on stderr)\n", name)
		case "smtp":
			s := n.SMTP
			auth := "no login"
			if s.Username != "" {
				auth = fmt.Sprintf("login %s with password %s", s.Username, secretSource(s.PasswordEnv, s.PasswordFile, env))
			}
			tls := "STARTTLS"
			if s.StartTLS != nil && !*s.StartTLS {
				tls = "no TLS"
			}
			p("  %s: email from %s to %s via %s (%s, %s)\n", name, s.From, strings.Join(s.To, ", "), s.Addr, tls, auth)
		}
	}
	p("watches:\n")
	for _, wa := range c.Watches {
		p("  %s:\n", wa.Name)
		what := "table " + wa.Table
		if wa.Query != "" {
			what = "query " + oneLine(wa.Query, 60)
		}
		p("    reads       %s from source %s\n", what, wa.Source)
		if wa.Where != "" {
			p("    where       %s\n", wa.Where)
		}
		if len(wa.Columns) > 0 {
			p("    columns     %s\n", strings.Join(wa.Columns, ", "))
		} else {
			p("    columns     every numeric column\n")
		}
		if wa.Target != "" {
			p("    target      %s\n", wa.Target)
		}
		for _, g := range sortedKeys(wa.Groups) {
			p("    group       %s = %s\n", g, strings.Join(wa.Groups[g], ", "))
		}
		p("    categorical text, enum and boolean columns among them as treatment dummies, at most %d levels each", wa.MaxLevels)
		if len(wa.BaseLevels) > 0 {
			var bs []string
			for _, c := range sortedKeys(wa.BaseLevels) {
				bs = append(bs, c+" = "+wa.BaseLevels[c])
			}
			p("; base %s", strings.Join(bs, ", "))
		} else {
			p("; base: the most frequent level")
		}
		p("\n")
		if wa.Bucket != "" {
			p("    buckets     %s by column %s (%s); window %s; rescan %s for late data\n",
				bucketAdverb[wa.Bucket], wa.TimeColumn, wa.TimeZone, wa.Window, wa.Rescan)
		} else {
			p("    buckets     none: every run reads the whole table\n")
		}
		if wa.Pushdown {
			p("    pushdown    the database computes the sums (one aggregate per partition); plumb merges them\n")
		}
		if wa.SegmentBy != "" {
			p("    segments    per value of %s (at most %d)\n", wa.SegmentBy, wa.MaxSegments)
		}
		l := wa.Limits
		p("    limits      VIF warn %g critical %g; condition number warn %g critical %g\n",
			l.VIF.Warn, l.VIF.Critical, l.Condition.Warn, l.Condition.Critical)
		p("    rules       trend over %d points, horizon %s; jump at robust z %g; clear after %d runs; blind after %d failures\n",
			l.TrendPoints, l.Horizon, l.Jump, l.ClearAfter, l.BlindAfter)
		if len(wa.Notify) > 0 {
			p("    notify      %s\n", strings.Join(wa.Notify, ", "))
		} else {
			p("    notify      nobody (alerts are recorded only)\n")
		}
		sched, err := ParseSchedule(wa.Schedule, wa.Location)
		if err != nil {
			p("    schedule    %s: %v\n", wa.Schedule, err)
			continue
		}
		var next []string
		t := now.In(wa.Location)
		for range 3 {
			t = sched.Next(t)
			if t.IsZero() {
				break
			}
			next = append(next, t.Format("2006-01-02 15:04 MST"))
		}
		p("    schedule    %s; next %s\n", wa.Schedule, strings.Join(next, ", "))
	}
}

// bucketAdverb says how often a bucket starts.
var bucketAdverb = map[string]string{"hour": "hourly", "day": "daily", "week": "weekly", "month": "monthly"}

func secretSource(envName, file string, env Env) string {
	switch {
	case envName != "":
		state := "set"
		if env != nil {
			if v, ok := env(envName); !ok || v == "" {
				state = "NOT SET"
			}
		}
		return fmt.Sprintf("$%s (%s)", envName, state)
	case file != "":
		return "the file " + file
	}
	return "nothing"
}

func oneLine(s string, n int) string {
	s = strings.Join(strings.Fields(s), " ")
	if len(s) > n {
		return s[:n] + "…"
	}
	return s
}
