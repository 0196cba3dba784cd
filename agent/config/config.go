// Package config reads plumb's YAML configuration: the state store, the
// named sources and notifiers, and the watches the agent runs.
//
// A file looks like this (every key but the ones marked required has the
// default shown):
//
//	store: sqlite:plumb-state.db        # or postgres://user@host/db
//	public_url: https://plumb.example.org # optional: notifications link to the watch pages
//	sources:                            # NAME: URL (required by watches)
//	  districts: sqlite:/data/districts.db
//	  warehouse: postgres://reader@db.internal/features
//	notifiers:
//	  oncall:
//	    webhook: https://hooks.example.org/plumb
//	    secret_env: PLUMB_WEBHOOK_SECRET # or secret_file: /run/secrets/plumb
//	    previous_secret_env: PLUMB_WEBHOOK_SECRET_OLD # during a key rotation (or previous_secret_file)
//	    timeout: 10s                     # per attempt
//	    max_age: 24h                     # retries stop after this age
//	  audit:
//	    log: true                        # one JSON object per line per event, on stderr
//	  owners:
//	    smtp:
//	      addr: mail.example.org:587
//	      from: plumb@example.org
//	      to: [network-analytics@example.org]
//	      username: plumb
//	      password_env: PLUMB_SMTP_PASSWORD
//	watches:
//	  - name: district_daily              # required, letters, digits, . _ -
//	    source: districts                 # required, a key of sources
//	    table: district_daily             # or query: SELECT …
//	    columns: [temperature_c, …]       # default: every numeric column
//	    target: demand_m3                 # optional response column
//	    groups: {connections: [residential_connections, commercial_connections]}
//	    where: ""                         # optional SQL filter
//	    time_column: day                  # optional; buckets need it
//	    bucket: day                       # hour, day, week, month (day when time_column is set)
//	    window: 30 buckets                # e.g. 28d, 12w, 720h
//	    rescan: 2 buckets                 # late data: the newest buckets read again each run
//	    time_zone: UTC                    # bucket boundaries and schedule
//	    segment_by: district              # optional: diagnostics per value too
//	    max_segments: 1000
//	    schedule: "0 * * * *"             # 5-field cron, or @hourly, @daily …
//	    precision: auto                   # auto, fast, exact or precise (double-double QR)
//	    limits:
//	      vif: {warn: 5, critical: 10}
//	      condition: {warn: 15, critical: 30}
//	      condition_basis: centered       # or intercept: which condition number the levels judge
//	      horizon: 14d                    # trend warnings this far ahead
//	      clear_after: 3                  # runs under the warn level before a level alert resolves
//	      blind_after: 3                  # consecutive failed runs before a blind alert
//	      jump: 3.5                       # robust z-score (MAD) that counts as a jump
//	      trend_points: 14                # recent points the trend is fitted on
//	    notify: [oncall, audit]
//	    expected_dependencies:            # exact dependencies by design: shown, not alerted
//	      - [total_connections, residential_connections, commercial_connections]
//
// Unknown keys and values of the wrong type are rejected with their line.
// Secrets (webhook signing keys, SMTP passwords) come only from the
// environment or from files and are never printed.
package config

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"os"
	"regexp"
	"strings"
	"time"

	"go.yaml.in/yaml/v3"
)

// DefaultStore is the state store used when the file names none.
const DefaultStore = "sqlite:plumb-state.db"

// Defaults of a watch, documented in the package comment.
const (
	DefaultSchedule    = "0 * * * *"
	DefaultWindow      = 30 // buckets
	DefaultRescan      = 2  // buckets
	DefaultMaxSegments = 1000
	// DefaultMaxLevels bounds a categorical column's distinct values.
	DefaultMaxLevels  = 50
	DefaultVIFWarn    = 5.0  // common practice: worth a look
	DefaultVIFCrit    = 10.0 // common practice: serious
	DefaultCondWarn   = 15.0 // Belsley-Kuh-Welsch: moderate
	DefaultCondCrit   = 30.0 // Belsley-Kuh-Welsch: strong
	DefaultHorizon    = 14 * 24 * time.Hour
	DefaultClearAfter = 3
	DefaultBlindAfter = 3
	// DefaultJump is the modified z-score above which a value counts as
	// an outlier (Iglewicz & Hoaglin 1993 recommend 3.5).
	DefaultJump        = 3.5
	DefaultTrendPoints = 14
	// DefaultConditionBasis: levels judge the centered, scaled design.
	DefaultConditionBasis = ConditionCentered
)

// Condition bases: which condition number the condition levels judge.
const (
	ConditionCentered  = "centered"
	ConditionIntercept = "intercept"
)

// Config is a parsed and validated configuration file.
type Config struct {
	Store string `yaml:"store"`
	// PublicURL is where the dashboard is reached from outside (an
	// absolute http or https URL); notifications link to watch pages
	// under it. Empty: no links.
	PublicURL string               `yaml:"public_url"`
	Sources   map[string]string    `yaml:"sources"`
	Notifiers map[string]*Notifier `yaml:"notifiers"`
	Watches   []*Watch             `yaml:"watches"`

	// Path is the file the configuration was read from ("" for Parse).
	Path string `yaml:"-"`

	resolved      map[string]Secret // source URLs with ${VAR} expanded
	resolvedStore Secret
}

// Notifier is one delivery channel; exactly one of Webhook, Log and SMTP is
// set.
type Notifier struct {
	Webhook    string `yaml:"webhook"`
	SecretEnv  string `yaml:"secret_env"`
	SecretFile string `yaml:"secret_file"`
	// The previous signing key, during a key rotation: requests then
	// carry a signature under each key.
	PreviousSecretEnv  string   `yaml:"previous_secret_env"`
	PreviousSecretFile string   `yaml:"previous_secret_file"`
	Timeout            Duration `yaml:"timeout"`
	MaxAge             Duration `yaml:"max_age"`

	Log bool `yaml:"log"`

	SMTP *SMTP `yaml:"smtp"`

	// Secret is the webhook signing key and PreviousSecret the one it
	// replaces (empty outside a rotation), filled by Resolve.
	Secret, PreviousSecret Secret `yaml:"-"`
}

// Secrets returns the webhook's signing secrets, the current one first.
func (n *Notifier) Secrets() []string {
	out := []string{n.Secret.Reveal()}
	if n.PreviousSecret != "" {
		out = append(out, n.PreviousSecret.Reveal())
	}
	return out
}

// Kind names the notifier's channel: "webhook", "log" or "smtp".
func (n *Notifier) Kind() string {
	switch {
	case n.Webhook != "":
		return "webhook"
	case n.SMTP != nil:
		return "smtp"
	case n.Log:
		return "log"
	}
	return ""
}

// Notifier defaults.
const (
	DefaultNotifyTimeout = 10 * time.Second
	DefaultNotifyMaxAge  = 24 * time.Hour
)

// SMTP configures email delivery (plain text).
type SMTP struct {
	Addr         string   `yaml:"addr"` // host:port
	From         string   `yaml:"from"`
	To           []string `yaml:"to"`
	Username     string   `yaml:"username"`
	PasswordEnv  string   `yaml:"password_env"`
	PasswordFile string   `yaml:"password_file"`
	// StartTLS is required unless set to false (then only for a server on
	// the loopback interface).
	StartTLS *bool `yaml:"starttls"`

	Password Secret `yaml:"-"`
}

// Watch is one table or query the agent keeps an eye on.
type Watch struct {
	Name        string              `yaml:"name"`
	Source      string              `yaml:"source"`
	Table       string              `yaml:"table"`
	Query       string              `yaml:"query"`
	Where       string              `yaml:"where"`
	Columns     []string            `yaml:"columns"`
	Target      string              `yaml:"target"`
	Groups      map[string][]string `yaml:"groups"`
	TimeColumn  string              `yaml:"time_column"`
	Bucket      string              `yaml:"bucket"`
	Window      Span                `yaml:"window"`
	Rescan      Span                `yaml:"rescan"`
	TimeZone    string              `yaml:"time_zone"`
	SegmentBy   string              `yaml:"segment_by"`
	MaxSegments int                 `yaml:"max_segments"`
	// MaxLevels bounds the distinct values of each categorical column
	// (0 = DefaultMaxLevels); BaseLevels names a factor's base level
	// (column → level) where the most frequent one should not be.
	MaxLevels  int               `yaml:"max_levels"`
	BaseLevels map[string]string `yaml:"base_levels"`
	Schedule   string            `yaml:"schedule"`
	Precision  string            `yaml:"precision"`
	// Pushdown computes the watch's per-bucket and per-segment
	// accumulators inside PostgreSQL (one aggregate per leaf partition)
	// instead of streaming the rows.
	Pushdown bool     `yaml:"pushdown"`
	Limits   Limits   `yaml:"limits"`
	Notify   []string `yaml:"notify"`

	// ExpectedDependencies are sets of columns among which an exact
	// dependency is by design (a total and its parts): one whose columns
	// all lie in one set is shown as expected, not alerted, and alerts
	// (rule broken) when it stops holding.
	ExpectedDependencies [][]string `yaml:"expected_dependencies"`

	// Location is TimeZone loaded, filled by validation.
	Location *time.Location `yaml:"-"`
}

// Limits are a watch's alert levels and rule settings.
type Limits struct {
	VIF       Level `yaml:"vif"`
	Condition Level `yaml:"condition"`
	// ConditionBasis says which condition number the condition levels,
	// trends and jumps judge: "centered" (default), the centered,
	// column-scaled design — collinearity among the columns themselves,
	// which is what inflates the slopes' variances — or "intercept", the
	// column-scaled design with the intercept column, which also grows
	// when a column's spread is small beside its mean.
	ConditionBasis string   `yaml:"condition_basis"`
	Horizon        Duration `yaml:"horizon"`
	ClearAfter     int      `yaml:"clear_after"`
	BlindAfter     int      `yaml:"blind_after"`
	Jump           float64  `yaml:"jump"`
	TrendPoints    int      `yaml:"trend_points"`
}

// Level is a pair of warn and critical thresholds.
type Level struct {
	Warn     float64 `yaml:"warn"`
	Critical float64 `yaml:"critical"`
}

// Load reads and validates the configuration file at path. Secrets are
// not resolved: call Resolve before using the notifiers.
func Load(path string) (*Config, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("config: %w", err)
	}
	c, err := Parse(data)
	if err != nil {
		return nil, fmt.Errorf("config %s: %w", path, err)
	}
	c.Path = path
	return c, nil
}

// maxConfigSize bounds the input of Parse.
const maxConfigSize = 4 << 20

// Parse decodes and validates a configuration. Unknown keys, values of the
// wrong type and invalid settings are errors that give their line.
func Parse(data []byte) (*Config, error) {
	if len(data) > maxConfigSize {
		return nil, fmt.Errorf("file is %d bytes; a configuration is at most %d", len(data), maxConfigSize)
	}
	var root yaml.Node
	if err := yaml.Unmarshal(data, &root); err != nil {
		return nil, friendly(err)
	}
	c := &Config{}
	dec := yaml.NewDecoder(bytes.NewReader(data))
	dec.KnownFields(true)
	// Unknown keys and values of the wrong type do not stop the decoder:
	// they are reported together with what validation finds.
	var problems []string
	if err := dec.Decode(c); err != nil {
		var te *yaml.TypeError
		switch {
		case errors.Is(err, io.EOF):
			return nil, errors.New("the file is empty; it needs at least sources and watches")
		case !errors.As(err, &te):
			return nil, friendly(err)
		}
		problems = friendly(err).(*Error).Problems
	}
	var extra yaml.Node
	if err := dec.Decode(&extra); err == nil {
		return nil, fmt.Errorf("line %d: a second YAML document; put everything in one", extra.Line)
	}
	v := validator{root: docRoot(&root), problems: problems}
	v.config(c)
	if err := v.err(); err != nil {
		return nil, err
	}
	return c, nil
}

// docRoot returns the top mapping of a parsed document, or nil.
func docRoot(n *yaml.Node) *yaml.Node {
	if n.Kind == yaml.DocumentNode && len(n.Content) > 0 {
		return n.Content[0]
	}
	return nil
}

var (
	reUnknown = regexp.MustCompile(`^line (\d+): field (\S+) not found in type (\S+)$`)
	reType    = regexp.MustCompile("^line (\\d+): cannot unmarshal !!(\\w+) (`.*`|)\\s*into (\\S+)$")
)

// typeNames turns the decoder's Go types into words for the reader.
var typeNames = map[string]string{
	"config.Config":               "the top level (store, public_url, sources, notifiers, watches)",
	"config.Notifier":             "a notifier (webhook, secret_env, secret_file, previous_secret_env, previous_secret_file, timeout, max_age, log, smtp)",
	"config.SMTP":                 "smtp (addr, from, to, username, password_env, password_file, starttls)",
	"config.Watch":                "a watch",
	"config.Limits":               "limits (vif, condition, condition_basis, horizon, clear_after, blind_after, jump, trend_points)",
	"config.Level":                "a level (warn, critical)",
	"string":                      "a string",
	"float64":                     "a number",
	"int":                         "a whole number",
	"bool":                        "true or false",
	"[]string":                    "a list of strings",
	"[][]string":                  "a list of column lists",
	"[]*config.Watch":             "a list of watches",
	"map[string]string":           "a mapping of NAME: URL",
	"map[string][]string":         "a mapping of NAME: [columns]",
	"map[string]*config.Notifier": "a mapping of NAME: notifier",
	"*config.SMTP":                "smtp settings",
	"*bool":                       "true or false",
}

func typeName(t string) string {
	if s, ok := typeNames[t]; ok {
		return s
	}
	return t
}

// friendly rewrites the YAML decoder's messages in the reader's terms.
func friendly(err error) error {
	var te *yaml.TypeError
	if !errors.As(err, &te) {
		msg := strings.TrimPrefix(err.Error(), "yaml: ")
		return errors.New(msg)
	}
	msgs := make([]string, 0, len(te.Errors))
	for _, e := range te.Errors {
		if m := reUnknown.FindStringSubmatch(e); m != nil {
			if m[2] == "lookback" && m[3] == "config.Watch" {
				msgs = append(msgs, fmt.Sprintf("line %s: lookback is now called rescan (the newest buckets each run reads again for late data); write rescan: with the same value", m[1]))
				continue
			}
			msgs = append(msgs, fmt.Sprintf("line %s: unknown key %q in %s", m[1], m[2], typeName(m[3])))
			continue
		}
		if m := reType.FindStringSubmatch(e); m != nil {
			got := m[3]
			if got == "" {
				got = "a " + m[2]
			} else {
				got = strings.Trim(got, "`")
				got = fmt.Sprintf("%q", got)
			}
			msgs = append(msgs, fmt.Sprintf("line %s: want %s, got %s", m[1], typeName(m[4]), got))
			continue
		}
		msgs = append(msgs, e)
	}
	return &Error{Problems: msgs}
}

// Error lists every problem found in a configuration, one per line.
type Error struct {
	Problems []string
}

func (e *Error) Error() string {
	if len(e.Problems) == 1 {
		return e.Problems[0]
	}
	return fmt.Sprintf("%d problems:\n  %s", len(e.Problems), strings.Join(e.Problems, "\n  "))
}

// Watch returns the watch called name, or nil.
func (c *Config) Watch(name string) *Watch {
	for _, w := range c.Watches {
		if w.Name == name {
			return w
		}
	}
	return nil
}
