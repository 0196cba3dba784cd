package postgres

import (
	"context"
	"fmt"
	"strings"
	"testing"

	"plumb/connectors"
	"plumb/connectors/postgres/pgtest"
)

// The empty string, NULL, the text old stores used for NULL and values
// that look like keys are each a segment of their own, on every path.
func TestSegmentsDistinct(t *testing.T) {
	u := pgtestStart(t)
	segs := []struct {
		value string // SQL literal
		key   string
		n     int
	}{
		{"'hillside'", connectors.SegmentKey("hillside"), 7},
		{"''", connectors.SegmentKey(""), 5},
		{"NULL", connectors.NullSegment, 6},
		{"'(null)'", connectors.SegmentKey("(null)"), 4},
		{"'NULL'", connectors.SegmentKey("NULL"), 3},
		{"'~null'", connectors.SegmentKey("~null"), 8},
		{"'='", connectors.SegmentKey("="), 9},
	}
	var vals []string
	for i, s := range segs {
		for k := range s.n {
			vals = append(vals, fmt.Sprintf("(%s, %d, %d)", s.value, i*10+k, k*k%5))
		}
	}
	pgtest.Exec(t, u, `CREATE TABLE pressure_log (zone text, pressure_bar float8, pipe_age_years float8)`,
		`INSERT INTO pressure_log VALUES `+strings.Join(vals, ", "))
	for _, opts := range []connectors.Options{{}, {Parallel: 2}, {Pushdown: true}} {
		src := openPG(t, u, opts)
		res, err := src.Scan(context.Background(), connectors.Request{Table: "pressure_log", Segment: "zone"})
		if err != nil {
			t.Fatal(err)
		}
		got := map[string]int64{}
		for _, g := range res.Groups {
			got[g.Key.Segment] = g.Moments.N()
		}
		if len(got) != len(segs) {
			t.Errorf("%+v: %d segments, want %d: %v", opts, len(got), len(segs), got)
		}
		for _, s := range segs {
			if got[s.key] != int64(s.n) {
				t.Errorf("%+v: segment %s: %d rows, want %d", opts, s.value, got[s.key], s.n)
			}
		}
	}
}
