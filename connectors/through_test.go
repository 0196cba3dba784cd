package connectors

import (
	"testing"
	"time"
)

func TestDataThrough(t *testing.T) {
	for _, c := range []struct {
		end  time.Time
		want string
	}{
		{time.Date(2026, 9, 29, 0, 0, 0, 0, time.UTC), "2026-09-28"},
		{time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC), "2026-02-28"},
		{time.Date(2026, 9, 29, 2, 0, 0, 0, time.FixedZone("CEST", 2*3600)), "2026-09-28"}, // midnight UTC
		{time.Date(2026, 9, 28, 14, 0, 0, 0, time.UTC), "2026-09-28 14:00 UTC"},
		{time.Date(2026, 9, 28, 6, 15, 42, 0, time.UTC), "2026-09-28 06:15 UTC"},
		{time.Time{}, "—"},
	} {
		if got := DataThrough(c.end); got != c.want {
			t.Errorf("DataThrough(%v) = %q, want %q", c.end, got, c.want)
		}
	}
}
