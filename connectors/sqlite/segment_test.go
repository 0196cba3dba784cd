package sqlite_test

import (
	"context"
	"database/sql"
	"path/filepath"
	"testing"

	"plumb/connectors"
)

// segmentRows are the rows per segment value of the collision test: the
// empty string, NULL, the text old stores used for NULL, and values that
// look like keys are each a segment of their own.
var segmentRows = []struct {
	value any // nil for NULL
	key   string
	n     int
}{
	{"hillside", connectors.SegmentKey("hillside"), 7},
	{"", connectors.SegmentKey(""), 5},
	{nil, connectors.NullSegment, 6},
	{"(null)", connectors.SegmentKey("(null)"), 4},
	{"NULL", connectors.SegmentKey("NULL"), 3},
	{"~null", connectors.SegmentKey("~null"), 8},
	{"=", connectors.SegmentKey("="), 9},
}

func TestSegmentsDistinct(t *testing.T) {
	path := filepath.Join(t.TempDir(), "zones.db")
	w, err := sql.Open("sqlite", path)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := w.Exec(`CREATE TABLE pressure_log (zone TEXT, pressure_bar REAL, pipe_age_years REAL)`); err != nil {
		t.Fatal(err)
	}
	for i, s := range segmentRows {
		for k := range s.n {
			if _, err := w.Exec(`INSERT INTO pressure_log VALUES (?, ?, ?)`, s.value, float64(i*10+k), float64(k*k%5)); err != nil {
				t.Fatal(err)
			}
		}
	}
	w.Close()
	src := open(t, path, connectors.Options{})
	res, err := src.Scan(context.Background(), connectors.Request{Table: "pressure_log", Segment: "zone"})
	if err != nil {
		t.Fatal(err)
	}
	got := map[string]int64{}
	for _, g := range res.Groups {
		got[g.Key.Segment] = g.Moments.N()
	}
	if len(got) != len(segmentRows) {
		t.Errorf("%d segments, want %d: %v", len(got), len(segmentRows), got)
	}
	for _, s := range segmentRows {
		if got[s.key] != int64(s.n) {
			t.Errorf("segment %q (%v): %d rows, want %d", s.key, s.value, got[s.key], s.n)
		}
	}
	if _, ok := got[connectors.WholeTable]; ok {
		t.Errorf("a segment has the whole table's key")
	}
}
