package connectors

import (
	"testing"
	"time"
)

func TestCalendar(t *testing.T) {
	day := Calendar{Unit: "day"}
	d := func(s string) time.Time {
		t.Helper()
		v, err := time.Parse(time.DateOnly, s)
		if err != nil {
			t.Fatal(err)
		}
		return v
	}
	if got := day.Floor(d("2026-03-10").Add(13 * time.Hour)); !got.Equal(d("2026-03-10")) {
		t.Errorf("Floor = %v", got)
	}
	end := d("2026-03-10")
	if got := day.WindowStart(end, Span{Buckets: 7}); !got.Equal(d("2026-03-03")) {
		t.Errorf("WindowStart(7 buckets) = %v", got)
	}
	if got := day.WindowStart(end, Span{Duration: 48 * time.Hour}); !got.Equal(d("2026-03-08")) {
		t.Errorf("WindowStart(48h) = %v", got)
	}
	// Data from 2026-03-01: the 7-bucket window ending on the 8th (covering
	// the 1st to the 7th) is the first full one.
	first := d("2026-03-01")
	if day.Full(d("2026-03-07"), Span{Buckets: 7}, first) || !day.Full(d("2026-03-08"), Span{Buckets: 7}, first) {
		t.Error("Full: want the window ending on the 8th to be the first full one")
	}
	if got := day.LastBucket(end); !got.Equal(d("2026-03-09")) {
		t.Errorf("LastBucket = %v", got)
	}
	if got := day.RescanFrom(d("2026-03-09"), Span{Buckets: 2}); !got.Equal(d("2026-03-08")) {
		t.Errorf("RescanFrom(2 buckets) = %v", got)
	}
	if got := day.RescanFrom(d("2026-03-09"), Span{Duration: 72 * time.Hour}); !got.Equal(d("2026-03-07")) {
		t.Errorf("RescanFrom(72h) = %v", got)
	}
	// Months step by the calendar, in the zone.
	berlin, err := time.LoadLocation("Europe/Berlin")
	if err != nil {
		t.Skip("no zone data:", err)
	}
	month := Calendar{Unit: "month", Loc: berlin}
	jan := time.Date(2026, 1, 1, 0, 0, 0, 0, berlin)
	if got := month.Add(jan, 2); !got.Equal(time.Date(2026, 3, 1, 0, 0, 0, 0, berlin)) {
		t.Errorf("month Add = %v", got)
	}
	if got := month.Floor(time.Date(2026, 3, 31, 23, 30, 0, 0, berlin)); !got.Equal(time.Date(2026, 3, 1, 0, 0, 0, 0, berlin)) {
		t.Errorf("month Floor = %v", got)
	}
}
