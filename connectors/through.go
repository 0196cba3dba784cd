package connectors

import "time"

// DataThrough says which data a window holds, from its end (a Point's At,
// an alert's AsOf, a run's AsOf; the end is exclusive), in the one way
// every surface writes it: a window that ends at midnight UTC holds data
// through the day before ("2026-09-28" for an end of 2026-09-29 00:00);
// any other end is written as the instant, to the minute
// ("2026-09-28 14:00 UTC"). The demo's day numbers count the same last
// day.
func DataThrough(end time.Time) string {
	if end.IsZero() {
		return "—"
	}
	end = end.UTC()
	if end.Equal(end.Truncate(24 * time.Hour)) {
		return end.AddDate(0, 0, -1).Format(time.DateOnly)
	}
	return end.Format("2006-01-02 15:04 UTC")
}
