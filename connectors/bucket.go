package connectors

import (
	"fmt"
	"time"
)

// Bucketer maps instants to the start of their bucket (hour, day, week
// starting Monday, month) in a time zone. It remembers the last bucket, so
// time-ordered rows cost a comparison each.
type Bucketer struct {
	unit   string
	loc    *time.Location
	lo, hi int64 // the last bucket, [lo, hi) in Unix microseconds
}

// NewBucketer returns a Bucketer; nil loc means UTC. It panics on a unit
// that is not one of Buckets (Resolve validates requests first).
func NewBucketer(unit string, loc *time.Location) *Bucketer {
	if !validBucket(unit) {
		panic(fmt.Sprintf("connectors: NewBucketer: unknown bucket %q", unit))
	}
	if loc == nil {
		loc = time.UTC
	}
	return &Bucketer{unit: unit, loc: loc}
}

// Location returns the bucketer's time zone.
func (b *Bucketer) Location() *time.Location { return b.loc }

// Start returns the start of the bucket holding the instant us (Unix
// microseconds), in Unix microseconds.
func (b *Bucketer) Start(us int64) int64 {
	if us >= b.lo && us < b.hi {
		return b.lo
	}
	t := time.UnixMicro(us).In(b.loc)
	y, m, d := t.Date()
	var s, e time.Time
	switch b.unit {
	case "hour":
		s = t.Add(-time.Duration(t.Minute())*time.Minute - time.Duration(t.Second())*time.Second - time.Duration(t.Nanosecond()))
		e = s.Add(time.Hour)
	case "day":
		s = time.Date(y, m, d, 0, 0, 0, 0, b.loc)
		e = time.Date(y, m, d+1, 0, 0, 0, 0, b.loc)
	case "week":
		back := (int(t.Weekday()) + 6) % 7 // days since Monday
		s = time.Date(y, m, d-back, 0, 0, 0, 0, b.loc)
		e = time.Date(y, m, d-back+7, 0, 0, 0, 0, b.loc)
	case "month":
		s = time.Date(y, m, 1, 0, 0, 0, 0, b.loc)
		e = time.Date(y, m+1, 1, 0, 0, 0, 0, b.loc)
	}
	lo, hi := s.UnixMicro(), e.UnixMicro()
	if us >= lo && us < hi {
		b.lo, b.hi = lo, hi
	} else {
		// A zone transition left the instant outside the computed range;
		// answer without caching.
		b.lo, b.hi = 0, 0
	}
	return lo
}

// Time returns a bucket start as a time in the bucketer's zone.
func (b *Bucketer) Time(us int64) time.Time { return time.UnixMicro(us).In(b.loc) }
