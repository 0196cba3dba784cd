package main

import (
	"math"
	"strings"
	"testing"

	"plumb/connectors/postgres/pgtest"
)

// TestScanPushdownPartitioned: the contract `plumb scan --pushdown --table
// PARENT` on a table hash-partitioned into foreign partitions on two
// shards sends each shard one aggregate statement (a cursor over a SELECT
// of sums; no cursor over rows) and reports what streaming reports (to
// 1e-9 relative, the VIFs of two computations of the same moments).
func TestScanPushdownPartitioned(t *testing.T) {
	c := pgtest.NewCluster(t, 2)
	c.ShardTable(t, "district_daily", `id int, temperature_c float8, rainfall_mm float8,
		metered_volume_m3 float8, billed_volume_m3 float8`, "id")
	pgtest.Exec(t, c.URL, `INSERT INTO district_daily SELECT i, 15 + 8 * cos(i * 0.11), abs(sin(i * 0.05)) * 12,
			400 + 50 * sin(i * 0.013) + 3 * cos(i), 400 + 50 * sin(i * 0.013) + 3 * cos(i) + 0.5 * sin(i * 7)
		FROM generate_series(1, 4000) AS i`, "ANALYZE district_daily")
	want := scanAs[scanJSON](t, "--db", c.URL, "--table", "district_daily", "--columns", "temperature_c,rainfall_mm,metered_volume_m3,billed_volume_m3")
	c.ResetStatements(t)
	got := scanAs[scanJSON](t, "--db", c.URL, "--pushdown", "--table", "district_daily", "--columns", "temperature_c,rainfall_mm,metered_volume_m3,billed_volume_m3")
	for i := range c.Shards {
		aggs := int64(0)
		for _, s := range c.Statements(t, i) {
			q := strings.ToUpper(s.Query)
			if strings.HasPrefix(q, "DECLARE") {
				if !strings.Contains(q, "SUM(") {
					t.Errorf("shard %d: a cursor over rows: %.200s", i, s.Query)
					continue
				}
				aggs += s.Calls
			}
		}
		if aggs != 1 {
			t.Errorf("shard %d: %d aggregate statements, want 1", i, aggs)
		}
	}
	if got.RowsUsed != 4000 || got.RowsUsed != want.RowsUsed || len(got.Columns) != len(want.Columns) {
		t.Fatalf("pushdown: %d rows, %d columns; streaming %d rows, %d columns", got.RowsUsed, len(got.Columns), want.RowsUsed, len(want.Columns))
	}
	for j, c := range want.Columns {
		g := got.Columns[j]
		if c.Name != g.Name || c.VIF == nil || g.VIF == nil || math.Abs(*c.VIF-*g.VIF) > 1e-9**c.VIF {
			t.Errorf("column %s: VIF %v pushed down, %v streamed", c.Name, g.VIF, c.VIF)
		}
	}
	if *want.Columns[3].VIF < 10 {
		t.Errorf("billed and metered volume should be near-copies: VIF %v", *want.Columns[3].VIF)
	}
}
