package connectors

import (
	"fmt"
	"time"
)

// Calendar is the one place that knows how time divides into buckets and
// windows: flooring an instant to its bucket, stepping by buckets, where a
// window starts, whether it is full, which buckets a run rescans. The
// connectors bucket rows with its Bucketer; the agent places windows,
// rescans and onsets with the same arithmetic.
//
// A window is either a count of buckets or a duration; it ends at the end
// of its last bucket (exclusive) and is named by that end.
type Calendar struct {
	Unit string         // hour, day, week (starting Monday) or month
	Loc  *time.Location // nil means UTC
}

// Span is a length on a calendar: a count of buckets, or a duration when
// Buckets is zero.
type Span struct {
	Buckets  int
	Duration time.Duration
}

func (c Calendar) loc() *time.Location {
	if c.Loc == nil {
		return time.UTC
	}
	return c.Loc
}

// Floor returns the start of the bucket holding t, in UTC.
func (c Calendar) Floor(t time.Time) time.Time {
	b := NewBucketer(c.Unit, c.loc())
	return time.UnixMicro(b.Start(t.UnixMicro())).UTC()
}

// Add moves t by n buckets (calendar arithmetic for days, weeks and
// months in the calendar's zone), in UTC.
func (c Calendar) Add(t time.Time, n int) time.Time {
	t = t.In(c.loc())
	switch c.Unit {
	case "hour":
		t = t.Add(time.Duration(n) * time.Hour)
	case "day":
		t = t.AddDate(0, 0, n)
	case "week":
		t = t.AddDate(0, 0, 7*n)
	case "month":
		t = t.AddDate(0, n, 0)
	default:
		panic(fmt.Sprintf("connectors: Calendar.Add: unknown bucket %q", c.Unit))
	}
	return t.UTC()
}

// End returns the end of the bucket starting at start.
func (c Calendar) End(start time.Time) time.Time { return c.Add(start, 1) }

// WindowStart returns the earliest bucket start inside the window ending
// at end.
func (c Calendar) WindowStart(end time.Time, w Span) time.Time {
	if w.Buckets > 0 {
		return c.Add(end, -w.Buckets)
	}
	return end.Add(-w.Duration).UTC()
}

// Full reports whether the window ending at end lies wholly within the
// data, whose first bucket starts at first: a window that is still
// filling holds fewer buckets than it will.
func (c Calendar) Full(end time.Time, w Span, first time.Time) bool {
	return !c.WindowStart(end, w).Before(first)
}

// LastBucket returns the start of the last bucket of the window ending at
// end: the data day (hour, week, month) the window ends on.
func (c Calendar) LastBucket(end time.Time) time.Time { return c.Add(end, -1) }

// RescanFrom returns the first bucket a run rescans for late data, given
// the newest stored bucket and how far back to reread.
func (c Calendar) RescanFrom(last time.Time, back Span) time.Time {
	if back.Buckets > 0 {
		return c.Add(last, -(back.Buckets - 1))
	}
	return c.Floor(c.End(last).Add(-back.Duration))
}
