package postgres

import (
	"context"
	"testing"

	"plumb/connectors"
	"plumb/connectors/internal/demand"
)

// TestPushdownNonFinite: NULL, NaN and ±Infinity scattered over a table
// with a column of mean 1e9 and spread 1 give, through every pushdown
// strategy, the rows, missing counts and accumulators of streaming. The
// aggregate first keeps the rows without NULLs and runs again over the
// finite ones when a NaN or an infinity shows; the filter that leaves out
// the non-finite rows checks the first pass alone.
func TestPushdownNonFinite(t *testing.T) {
	u := pgtestStart(t)
	exec(t, u, `CREATE TABLE pressure_log AS
		SELECT date '2024-05-01' + (i % 40) AS day, 'zone ' || (i % 4) AS zone, i,
			CASE WHEN i % 97 = 0 THEN 'NaN'::float8 WHEN i % 89 = 0 THEN NULL
				ELSE 1e9 + sin(i * 0.37) END AS meter_reading,
			CASE WHEN i % 101 = 0 THEN 'Infinity'::float8 ELSE 15 + 8 * cos(i * 0.11) END AS temperature,
			CASE WHEN i % 103 = 0 THEN '-Infinity'::float8 WHEN i % 83 = 0 THEN NULL
				ELSE 3.2 + (i % 17) * 0.05 + sin(i) * 0.01 END AS pressure
		FROM generate_series(1, 6000) AS i`,
		`ANALYZE pressure_log`)
	ctx := context.Background()
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
	}{{"auto", pushAuto}, {"regr", pushRegr}, {"shifted", pushShifted}}
	for _, s := range strategies {
		push := openPG(t, u, connectors.Options{Pushdown: true})
		push.push = s.strategy
		for _, r := range reqs {
			t.Run(s.name+"/"+r.name, func(t *testing.T) {
				want, err := stream.Scan(ctx, r.req)
				if err != nil {
					t.Fatal(err)
				}
				got, err := push.Scan(ctx, r.req)
				if err != nil {
					t.Fatal(err)
				}
				// Updating aggregates per group, or plain shifted sums over
				// the whole table: as close as the streaming merge order
				// allows (the bound the other pushdown tests use). Shifted
				// sums in groups whose means lie far from the table's
				// shift lose a few more digits, within the required 1e-9.
				tol := 1e-12
				if s.strategy == pushShifted && r.grouped {
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
