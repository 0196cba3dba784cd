package main

import (
	"bytes"
	"strings"
	"testing"
	"time"
)

func TestProgressLine(t *testing.T) {
	for _, c := range []struct {
		read, total int64
		elapsed     time.Duration
		want        string
	}{
		// The issue's own example: 240 of 480 rows in 20 ms would be 12k/s.
		{240, 480, 20 * time.Millisecond, "reading district_daily: 240 of 480 rows"},
		{240, 480, time.Second / 50 * 10, "reading district_daily: 240 of 480 rows · 1.2k rows/s · about 1 s left"},
		{24_000, 60_000, 2 * time.Second, "reading district_daily: 24000 of 60000 rows · 12k rows/s · about 3 s left"},
		{0, 480, 5 * time.Second, "reading district_daily: 0 of 480 rows"}, // no rate from nothing, never 0 rows/s
		{5_000_000, 0, 10 * time.Second, "reading district_daily: 5000000 rows · 500k rows/s"},
		{1_000, 10_000_000, time.Second, "reading district_daily: 1000 of 10000000 rows · 1.0k rows/s · about 3 h left"},
		{480, 480, time.Second, "reading district_daily: 480 of 480 rows · 480 rows/s"},
	} {
		if got := progressLine("reading district_daily", c.read, c.total, c.elapsed); got != c.want {
			t.Errorf("%d/%d after %v:\n got %q\nwant %q", c.read, c.total, c.elapsed, got, c.want)
		}
	}
	for _, v := range []struct {
		v    float64
		want string
	}{{0.4, "0"}, {950, "950"}, {999.6, "1.0k"}, {9_500, "9.5k"}, {12_000, "12k"}, {3_400_000, "3.4M"}, {25e6, "25M"}} {
		if got := countWord(v.v); got != v.want {
			t.Errorf("countWord(%v) = %q, want %q", v.v, got, v.want)
		}
	}
}

// TestProgressDraws drives the line with an injected clock: redraws at
// most every 100 ms, the last one always, and a clear at the end.
func TestProgressDraws(t *testing.T) {
	var buf bytes.Buffer
	now := time.Date(2026, 6, 1, 0, 0, 0, 0, time.UTC)
	p := &progress{w: &buf, label: "reading district_daily", now: func() time.Time { return now }}
	p.update(0, 480)
	now = now.Add(10 * time.Millisecond)
	p.update(10, 480) // too soon: not drawn
	now = now.Add(time.Second)
	p.update(240, 480)
	now = now.Add(time.Millisecond)
	p.update(480, 480) // the end is always drawn
	p.finish()
	got := strings.Split(buf.String(), "\r")
	want := []string{"",
		"reading district_daily: 0 of 480 rows\x1b[K",
		"reading district_daily: 240 of 480 rows · 238 rows/s · about 1 s left\x1b[K",
		"reading district_daily: 480 of 480 rows · 475 rows/s\x1b[K",
		"\x1b[K"}
	if strings.Join(got, "|") != strings.Join(want, "|") {
		t.Fatalf("drawn\n%q\nwant\n%q", got, want)
	}
	for _, bad := range []string{"rows/hr", "%", "|"} {
		if strings.Contains(buf.String(), bad) {
			t.Errorf("progress says %q", bad)
		}
	}
	// Not a terminal: nothing at all.
	var quiet bytes.Buffer
	q := newProgress(&quiet, false, "district_daily", false)
	q.update(1, 2)
	q.finish()
	if quiet.Len() != 0 {
		t.Errorf("drew on a non-terminal: %q", quiet.String())
	}
}
