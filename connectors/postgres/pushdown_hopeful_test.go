package postgres

import (
	"context"
	"fmt"
	"strings"
	"testing"

	"github.com/jackc/pgx/v5"

	"plumb/connectors"
	"plumb/connectors/internal/demand"
	"plumb/connectors/postgres/pgtest"
)

// TestPushdownHopeful: a leaf whose statistics show no NULLs is first
// aggregated without the completeness test. On a complete table that one
// statement gives the result; NaN and infinities the statistics cannot
// show, and NULLs written after the last ANALYZE, make the leaf be
// aggregated again with the test. Either way the rows, missing counts and
// accumulators are those of streaming (two computations agree: 1e-12, as
// the other pushdown tests; 1e-9 for shifted sums in groups).
func TestPushdownHopeful(t *testing.T) {
	u := pgtestStart(t)
	const gen = `SELECT 'district ' || (i % 3) AS district, i,
			1e9 + sin(i * 0.37) AS metered_volume,
			15 + 8 * cos(i * 0.11) AS temperature,
			3.2 + (i % 17) * 0.05 + sin(i) * 0.01 AS pressure
		FROM generate_series(1, 6000) AS i`
	pgtest.Exec(t, u, "CREATE TABLE demand_clean AS "+gen, "ANALYZE demand_clean",
		"CREATE TABLE demand_stale AS "+gen, "ANALYZE demand_stale",
		// Written after ANALYZE: the statistics still show no NULLs.
		`UPDATE demand_stale SET temperature = CASE WHEN i % 3 = 0 THEN NULL WHEN i % 3 = 1 THEN 'NaN'::float8 ELSE 'Infinity'::float8 END
			WHERE i % 499 = 0`,
		"CREATE TABLE demand_nulls AS "+gen, "ANALYZE demand_nulls",
		"UPDATE demand_nulls SET pressure = NULL WHERE i % 211 = 0",
		"CREATE TABLE demand_nonfinite AS "+gen,
		`UPDATE demand_nonfinite SET pressure = CASE WHEN i % 2 = 0 THEN 'NaN'::float8 ELSE '-Infinity'::float8 END WHERE i % 257 = 0`,
		"ANALYZE demand_nonfinite")
	stream := openPG(t, u, connectors.Options{})
	cols := []string{"metered_volume", "temperature", "pressure"}
	for _, strategy := range []pushStrategy{pushShifted, pushPaired} {
		for _, tc := range []struct {
			table    string
			complete bool // every row complete: the first statement stands
		}{{"demand_clean", true}, {"demand_stale", false}, {"demand_nulls", false}, {"demand_nonfinite", false}} {
			for _, r := range []struct {
				name string
				req  connectors.Request
				tol  float64
			}{
				{"whole table", connectors.Request{Table: tc.table, Columns: cols}, 1e-12},
				{"by district", connectors.Request{Table: tc.table, Columns: cols, Segment: "district"}, 1e-9},
			} {
				t.Run(fmt.Sprint(strategy)+"/"+tc.table+"/"+r.name, func(t *testing.T) {
					push := openPG(t, u, connectors.Options{Pushdown: true})
					push.push = strategy
					hopeful, after := hopefulRun(t, push, r.req)
					if !hopeful {
						t.Fatal("statistics without NULLs: the first statement should leave out the completeness test")
					}
					if after != tc.complete {
						t.Errorf("after the run hopeful = %v, want %v (aggregated again only for incomplete rows)", after, tc.complete)
					}
					want, got := scanBoth(t, stream, push, r.req)
					demand.SameResult(t, r.name, want, got, r.tol)
					if dropped := want.Merged().Moments.Counts().Dropped; (dropped == 0) != tc.complete {
						t.Errorf("streaming dropped %d rows: the table is not as built", dropped)
					}
				})
			}
		}

	}

	// Statistics that show NULLs: the completeness test from the start.
	pgtest.Exec(t, u, "UPDATE demand_clean SET pressure = NULL WHERE i % 7 = 0", "ANALYZE demand_clean")
	push := openPG(t, u, connectors.Options{Pushdown: true})
	push.push = pushShifted
	if hopeful, _ := hopefulRun(t, push, connectors.Request{Table: "demand_clean", Columns: cols}); hopeful {
		t.Error("statistics with NULLs: the statement should test completeness from the start")
	}
}

// hopefulRun prepares req's pushdown and runs its one leaf, and reports
// whether the statement assumed complete rows before and after the run;
// the SQL must agree (no completeness test when hopeful).
func hopefulRun(t *testing.T, s *Source, req connectors.Request) (before, after bool) {
	t.Helper()
	ctx := context.Background()
	tx, err := s.pool.BeginTx(ctx, pgx.TxOptions{AccessMode: pgx.ReadOnly, IsoLevel: pgx.RepeatableRead})
	if err != nil {
		t.Fatal(err)
	}
	defer tx.Rollback(ctx)
	_, _, pds, err := s.preparePush(ctx, tx, req)
	if err != nil {
		t.Fatal(err)
	}
	if len(pds) != 1 {
		t.Fatalf("%d leaves, want 1", len(pds))
	}
	pd := pds[0]
	before = pd.hopeful
	if tested := strings.Contains(pd.aggSQL(), "* 0::float8 = 0::float8"); tested == before {
		t.Errorf("hopeful = %v, but the statement's completeness test present = %v", before, tested)
	}
	if _, err := pd.run(ctx, tx, s); err != nil {
		t.Fatal(err)
	}
	return before, pd.hopeful
}

// TestPushdownConstantInSegment: a column constant within one segment (a
// stuck pressure sensor in one district; in another a meter stuck at
// 1e9 + 0.1, where the shifted sums' rounding is largest) is reported
// constant through pushdown, exactly: its extremes equal the value, its
// mean is the value and its spread is zero (exact arithmetic), whatever
// the strategy; the other segments agree with streaming.
func TestPushdownConstantInSegment(t *testing.T) {
	u := pgtestStart(t)
	pgtest.Exec(t, u, `CREATE TABLE district_pressure AS
		SELECT 'district ' || (i % 3) AS district, i,
			CASE WHEN i % 3 = 1 THEN 1e9 + 0.1 ELSE 1e9 + sin(i * 0.37) END AS metered_volume,
			15 + 8 * cos(i * 0.11) AS temperature,
			CASE WHEN i % 3 = 0 THEN 3.75 ELSE 3.2 + (i % 17) * 0.05 + sin(i) * 0.01 END AS pressure
		FROM generate_series(1, 6000) AS i`,
		"ANALYZE district_pressure")
	ctx := context.Background()
	cols := []string{"metered_volume", "temperature", "pressure"}
	req := connectors.Request{Table: "district_pressure", Columns: cols, Segment: "district"}
	want, err := openPG(t, u, connectors.Options{}).Scan(ctx, req)
	if err != nil {
		t.Fatal(err)
	}
	stuck := map[string]struct {
		col   int
		value float64
	}{
		connectors.SegmentKey("district 0"): {2, 3.75},
		connectors.SegmentKey("district 1"): {0, 1e9 + 0.1},
	}
	for _, s := range []struct {
		name     string
		strategy pushStrategy
	}{{"auto", pushAuto}, {"regr", pushRegr}, {"shifted", pushShifted}, {"paired", pushPaired}} {
		t.Run(s.name, func(t *testing.T) {
			push := openPG(t, u, connectors.Options{Pushdown: true})
			push.push = s.strategy
			got, err := push.Scan(ctx, req)
			if err != nil {
				t.Fatal(err)
			}
			tol := 1e-12
			if s.strategy == pushShifted || s.strategy == pushPaired {
				tol = 1e-9 // shifted sums in groups, as TestPushdownNonFinite
			}
			demand.SameResult(t, s.name, want, got, tol)
			seen := 0
			for _, g := range got.Groups {
				c, ok := stuck[g.Key.Segment]
				if !ok {
					continue
				}
				seen++
				m := g.Moments
				j := c.col
				if m.Min(j) != c.value || m.Max(j) != c.value || m.Mean(j) != c.value {
					t.Errorf("%s: %s min %v max %v mean %v, want all %v", g.Key.Segment, cols[j], m.Min(j), m.Max(j), m.Mean(j), c.value)
				}
				for k := range cols {
					if v := m.At(j, k); v != 0 {
						t.Errorf("%s: co-moment %s×%s = %v, want exactly 0", g.Key.Segment, cols[j], cols[k], v)
					}
				}
			}
			if seen != len(stuck) {
				t.Errorf("%d of the %d segments with a stuck column found", seen, len(stuck))
			}
		})
	}
}
