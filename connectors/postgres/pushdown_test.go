package postgres

import (
	"math"
	"testing"

	"plumb/connectors"
	"plumb/connectors/internal/demand"
	"plumb/connectors/postgres/pgtest"
)

// TestPushdownNonFinite: NULL, NaN and ±Infinity scattered over a table
// with a column of mean 1e9 and spread 1 give, through every pushdown
// strategy, the rows, missing counts and accumulators of streaming. The
// aggregate first keeps the rows without NULLs and runs again over the
// finite ones when a NaN or an infinity shows; the filter that leaves out
// the non-finite rows checks the first pass alone.
func TestPushdownNonFinite(t *testing.T) {
	u := pgtestStart(t)
	pgtest.Exec(t, u, `CREATE TABLE pressure_log AS
		SELECT date '2024-05-01' + (i % 40) AS day, 'zone ' || (i % 4) AS zone, i,
			CASE WHEN i % 97 = 0 THEN 'NaN'::float8 WHEN i % 89 = 0 THEN NULL
				ELSE 1e9 + sin(i * 0.37) END AS meter_reading,
			CASE WHEN i % 101 = 0 THEN 'Infinity'::float8 ELSE 15 + 8 * cos(i * 0.11) END AS temperature,
			CASE WHEN i % 103 = 0 THEN '-Infinity'::float8 WHEN i % 83 = 0 THEN NULL
				ELSE 3.2 + (i % 17) * 0.05 + sin(i) * 0.01 END AS pressure
		FROM generate_series(1, 6000) AS i`,
		`ANALYZE pressure_log`)
	stream := openPG(t, u, connectors.Options{})
	cols := []string{"meter_reading", "temperature", "pressure"}
	reqs := []struct {
		name    string
		req     connectors.Request
		grouped bool
	}{
		{"whole table", connectors.Request{Table: "pressure_log", Columns: cols}, false},
		{"finite rows only", connectors.Request{Table: "pressure_log", Columns: cols,
			Where: "i % 97 <> 0 AND i % 101 <> 0 AND i % 103 <> 0"}, false},
		{"daily by zone", connectors.Request{Table: "pressure_log", Columns: cols, TimeColumn: "day", Bucket: "day", Segment: "zone"}, true},
		{"by zone, finite rows only", connectors.Request{Table: "pressure_log", Columns: cols, Segment: "zone",
			Where: "i % 97 <> 0 AND i % 101 <> 0 AND i % 103 <> 0"}, true},
	}
	strategies := []struct {
		name     string
		strategy pushStrategy
	}{{"auto", pushAuto}, {"regr", pushRegr}, {"shifted", pushShifted}, {"paired", pushPaired}}
	for _, s := range strategies {
		push := openPG(t, u, connectors.Options{Pushdown: true})
		push.push = s.strategy
		for _, r := range reqs {
			t.Run(s.name+"/"+r.name, func(t *testing.T) {
				want, got := scanBoth(t, stream, push, r.req)
				// Updating aggregates per group, or plain shifted sums over
				// the whole table: as close as the streaming merge order
				// allows (the bound the other pushdown tests use). Shifted
				// sums in groups whose means lie far from the table's
				// shift lose a few more digits, within the required 1e-9.
				tol := 1e-12
				if (s.strategy == pushShifted || s.strategy == pushPaired) && r.grouped {
					tol = 1e-9
				}
				demand.SameResult(t, s.name+" "+r.name, want, got, tol)
				if want.Merged().Moments.Counts().Dropped == 0 {
					t.Error("no rows dropped: the table lost its missing values")
				}
			})
		}
	}
}

// TestPushdownMagnitudes: columns near 1e-200 and 1e200, whose products
// underflow or overflow float8 (PostgreSQL reports either as an error), and
// a column that is zero in the first rows and near 1e250 afterwards (the
// provisional scales from the first rows are then too small and the
// aggregate is run again with the whole table's), give through every
// pushdown strategy the rows and accumulators of streaming, in the
// columns' scaled units to 1e-12 (1e-9 for shifted sums in groups, as in
// TestPushdownNonFinite).
func TestPushdownMagnitudes(t *testing.T) {
	u := pgtestStart(t)
	pgtest.Exec(t, u, `CREATE TABLE gauge_log AS
		SELECT date '2024-05-01' + (i % 30) AS day, 'zone ' || (i % 3) AS zone, i,
			(3 + sin(i * 0.37)) * 1e-200::float8 AS flow_tiny,
			(1.5 + 0.5 * sin(i * 0.37) + 0.1 * cos(i * 0.13)) * 1e-200::float8 AS leak_tiny,
			(50 + 8 * cos(i * 0.11)) * 1e200::float8 AS volume_huge,
			CASE WHEN i <= 3000 THEN 0 ELSE (2 + sin(i * 0.7)) * 1e250::float8 END AS late_huge
		FROM generate_series(1, 6000) AS i`,
		`ANALYZE gauge_log`)
	stream := openPG(t, u, connectors.Options{})
	cols := []string{"flow_tiny", "leak_tiny", "volume_huge", "late_huge"}
	reqs := []struct {
		name    string
		req     connectors.Request
		grouped bool
	}{
		{"whole table", connectors.Request{Table: "gauge_log", Columns: cols}, false},
		{"daily by zone", connectors.Request{Table: "gauge_log", Columns: cols, TimeColumn: "day", Bucket: "day", Segment: "zone"}, true},
		{"weighted", connectors.Request{Table: "gauge_log", Columns: cols[:3], Weight: "i"}, false},
	}
	for _, s := range []struct {
		name     string
		strategy pushStrategy
	}{{"auto", pushAuto}, {"regr", pushRegr}, {"shifted", pushShifted}, {"paired", pushPaired}} {
		push := openPG(t, u, connectors.Options{Pushdown: true})
		push.push = s.strategy
		for _, r := range reqs {
			if s.strategy == pushRegr && r.req.Weight != "" {
				continue // the updating aggregates are unweighted
			}
			t.Run(s.name+"/"+r.name, func(t *testing.T) {
				want, got := scanBoth(t, stream, push, r.req)
				tol := 1e-12
				if (s.strategy == pushShifted || s.strategy == pushPaired) && r.grouped {
					tol = 1e-9
				}
				demand.SameResult(t, s.name+" "+r.name, want, got, tol)
				m := got.Merged().Moments
				for j := range r.req.Columns {
					if c := m.ScaledAt(j, j); !(c > 0) || math.IsInf(c, 0) {
						t.Errorf("column %s: scaled co-moment %v: want a positive finite spread", m.Names()[j], c)
					}
				}
			})
		}
	}
}
