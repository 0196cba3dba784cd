package connectors

import (
	"fmt"
	"math"
	"time"
)

// TimeParser reads time values stored as ISO 8601 text (a date, or a date
// and time with an optional zone offset) or as Unix seconds. Text without an
// offset is wall-clock time in the parser's zone. It remembers the layout
// that matched last, so a column in one format costs one parse a row.
type TimeParser struct {
	Location *time.Location // nil means UTC
	last     int
}

var timeLayouts = []string{
	"2006-01-02 15:04:05Z07:00",
	"2006-01-02T15:04:05Z07:00",
	"2006-01-02 15:04:05",
	"2006-01-02T15:04:05",
	"2006-01-02 15:04Z07:00",
	"2006-01-02T15:04Z07:00",
	"2006-01-02 15:04",
	"2006-01-02T15:04",
	"2006-01-02",
}

// Text parses s and returns Unix microseconds.
func (p *TimeParser) Text(s string) (int64, error) {
	loc := p.Location
	if loc == nil {
		loc = time.UTC
	}
	for k := range timeLayouts {
		i := (p.last + k) % len(timeLayouts)
		if t, err := time.ParseInLocation(timeLayouts[i], s, loc); err == nil {
			p.last = i
			return t.UnixMicro(), nil
		}
	}
	if len(s) > 40 {
		s = s[:40] + "…"
	}
	return 0, fmt.Errorf("%q is not an ISO 8601 date or date-time (want e.g. 2024-05-01 or 2024-05-01 06:00:00): %w", s, ErrBadValue)
}

// UnixSeconds converts Unix seconds, possibly fractional, to microseconds.
// ok is false for NaN, ±Inf and values beyond year ±290000.
func UnixSeconds(sec float64) (us int64, ok bool) {
	if math.IsNaN(sec) || math.Abs(sec) > 9e12 {
		return 0, false
	}
	return int64(math.Round(sec * 1e6)), true
}
