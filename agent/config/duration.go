package config

import (
	"fmt"
	"regexp"
	"strconv"
	"strings"
	"time"

	"go.yaml.in/yaml/v3"
)

// Duration is a length of time written as Go writes durations, with days
// and weeks as well: "90s", "10m", "36h", "14d", "2w", "1d12h".
type Duration time.Duration

// D returns d as a time.Duration.
func (d Duration) D() time.Duration { return time.Duration(d) }

func (d Duration) String() string { return FormatDuration(time.Duration(d)) }

// UnmarshalYAML reads a duration scalar.
func (d *Duration) UnmarshalYAML(n *yaml.Node) error {
	if n.Kind != yaml.ScalarNode {
		return valueError(n, "want a duration such as 10m, 36h or 14d")
	}
	v, err := ParseDuration(n.Value)
	if err != nil {
		return valueError(n, err.Error())
	}
	*d = Duration(v)
	return nil
}

var reDurPart = regexp.MustCompile(`^(\d+(?:\.\d*)?|\.\d+)(w|d|h|ms|m|s)`)

// maxDuration bounds durations to about 100 years, far below overflow.
const maxDuration = 100 * 365 * 24 * time.Hour

// ParseDuration parses a duration with the units w, d, h, m, s and ms. A
// day is 24 hours.
func ParseDuration(s string) (time.Duration, error) {
	in := strings.TrimSpace(s)
	if in == "" {
		return 0, fmt.Errorf("empty duration; want e.g. 10m, 36h or 14d")
	}
	if in == "0" {
		return 0, nil
	}
	var total float64
	for rest := in; rest != ""; {
		m := reDurPart.FindStringSubmatch(rest)
		if m == nil {
			return 0, fmt.Errorf("duration %q: want a number and a unit (w, d, h, m, s, ms), e.g. 10m, 36h or 14d", s)
		}
		x, err := strconv.ParseFloat(m[1], 64)
		if err != nil {
			return 0, fmt.Errorf("duration %q: %v", s, err)
		}
		unit := map[string]time.Duration{
			"w": 7 * 24 * time.Hour, "d": 24 * time.Hour, "h": time.Hour,
			"m": time.Minute, "s": time.Second, "ms": time.Millisecond,
		}[m[2]]
		total += x * float64(unit)
		rest = rest[len(m[0]):]
	}
	if total > float64(maxDuration) {
		return 0, fmt.Errorf("duration %q is longer than 100 years", s)
	}
	return time.Duration(total), nil
}

// FormatDuration writes d in the largest units that keep it exact: "14d",
// "36h", "1d12h" is written "36h".
func FormatDuration(d time.Duration) string {
	switch {
	case d == 0:
		return "0"
	case d%(7*24*time.Hour) == 0:
		return fmt.Sprintf("%dw", d/(7*24*time.Hour))
	case d%(24*time.Hour) == 0:
		return fmt.Sprintf("%dd", d/(24*time.Hour))
	}
	return d.String()
}

// Span is a window or rescan length: either a count of buckets ("30
// buckets") or a duration ("28d"). The zero Span means "not set".
type Span struct {
	Buckets  int
	Duration time.Duration
}

// IsZero reports whether the span was not set.
func (s Span) IsZero() bool { return s.Buckets == 0 && s.Duration == 0 }

func (s Span) String() string {
	switch {
	case s.Buckets == 1:
		return "1 bucket"
	case s.Buckets > 0:
		return fmt.Sprintf("%d buckets", s.Buckets)
	}
	return FormatDuration(s.Duration)
}

var reBuckets = regexp.MustCompile(`^(\d+)\s*buckets?$`)

// ParseSpan parses "N buckets" or a duration.
func ParseSpan(v string) (Span, error) {
	v = strings.TrimSpace(v)
	if m := reBuckets.FindStringSubmatch(v); m != nil {
		n, err := strconv.Atoi(m[1])
		if err != nil || n > 1_000_000 {
			return Span{}, fmt.Errorf("%q: too many buckets", v)
		}
		if n == 0 {
			return Span{}, fmt.Errorf("%q: want at least 1 bucket", v)
		}
		return Span{Buckets: n}, nil
	}
	d, err := ParseDuration(v)
	if err != nil {
		return Span{}, fmt.Errorf("%w (or a count such as \"30 buckets\")", err)
	}
	return Span{Duration: d}, nil
}

// UnmarshalYAML reads a span scalar.
func (s *Span) UnmarshalYAML(n *yaml.Node) error {
	if n.Kind != yaml.ScalarNode {
		return valueError(n, `want a length such as 28d or "30 buckets"`)
	}
	v, err := ParseSpan(n.Value)
	if err != nil {
		return valueError(n, err.Error())
	}
	if v.IsZero() {
		return valueError(n, "a length of 0 is not allowed")
	}
	*s = v
	return nil
}

// valueError is a bad value at n. It is a *yaml.TypeError so that the
// decoder records it and goes on, and Parse reports it with every other
// problem of the file.
func valueError(n *yaml.Node, msg string) error {
	return &yaml.TypeError{Errors: []string{fmt.Sprintf("line %d: %s", n.Line, msg)}}
}

// Secret holds a credential. It prints as "xxxxx" in every format, so a
// stray log line or error cannot leak it.
type Secret string

// Reveal returns the secret itself, for the one place that uses it.
func (s Secret) Reveal() string { return string(s) }

func (s Secret) String() string {
	if s == "" {
		return ""
	}
	return "xxxxx"
}

// GoString is used by %#v.
func (s Secret) GoString() string { return `"` + s.String() + `"` }

// MarshalText is used by JSON, YAML and slog.
func (s Secret) MarshalText() ([]byte, error) { return []byte(s.String()), nil }
