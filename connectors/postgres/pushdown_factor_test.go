package postgres

import (
	"context"
	"fmt"
	"slices"
	"strings"
	"testing"

	"plumb/connectors"
	"plumb/connectors/internal/demand"
	"plumb/connectors/postgres/pgtest"
)

// supplyDDL and supplyRows: a district meter table with three factors
// (supply_source text with NULLs, tariff_band varchar, a boolean
// weekend flag), a column of mean 1e9 and spread 1, and NULL and NaN
// values.
const supplyDDL = `id int, day date, district text, supply_source text, tariff_band varchar(20), weekend boolean,
	meter_reading float8, temperature float8, billed_volume float8`

const supplyRows = `SELECT i, date '2025-01-01' + (i %% 21), 'district ' || (i %% 3),
		CASE WHEN i %% 53 = 0 THEN NULL ELSE (ARRAY['borehole', 'reservoir', 'river'])[1 + (i * 7) %% 3] END,
		(ARRAY['business', 'off_peak', 'standard', 'social'])[1 + (i / 5) %% 4],
		((i %% 21) + 3) %% 7 >= 5,
		1e9 + sin(i * 0.37) + 0.3 * ((i * 7) %% 3),
		CASE WHEN i %% 61 = 0 THEN NULL ELSE 15 + 8 * cos(i * 0.11) END,
		CASE WHEN i %% 67 = 0 THEN 'NaN'::float8 ELSE 400 + 50 * sin(i * 0.013) + 3 * cos(i) + 20 * ((i / 5) %% 4) END
	FROM generate_series(1, %d) AS i`

func supplyInsert(table string, n int) string {
	return "INSERT INTO " + table + " " + fmt.Sprintf(supplyRows, n)
}

var supplyColumns = []string{"meter_reading", "supply_source", "temperature", "tariff_band", "weekend", "billed_volume"}

// TestPushdownFactors: factor columns pushed down as GROUP BY keys, each
// cell assembled into the dummy-expanded accumulator here, give
// streaming's columns, levels, NULL counts and accumulators (identity of
// two computations, to 1e-9 relative) on a local table and on a table
// sharded over two servers, for the whole table and daily by district;
// through the shards each shard still receives one aggregate statement.
func TestPushdownFactors(t *testing.T) {
	c := pgtest.NewCluster(t, 2)
	c.ShardTable(t, "supply", supplyDDL, "id")
	pgtest.Exec(t, c.URL, supplyInsert("supply", 6000), "CREATE TABLE supply_local AS SELECT * FROM supply", "ANALYZE supply", "ANALYZE supply_local")
	ctx := context.Background()
	stream := openPG(t, c.URL, connectors.Options{})
	push := openPG(t, c.URL, connectors.Options{Pushdown: true})
	for _, table := range []string{"supply_local", "supply"} {
		for _, keyed := range []bool{false, true} {
			req := connectors.Request{Table: table, Columns: supplyColumns}
			cells := int64(3 * 4 * 2 * 2 * 2) // levels (NULL source as one) × completeness
			if keyed {
				req.TimeColumn, req.Bucket, req.Segment = "day", "week", "district"
				cells *= 4 * 3
			}
			what := table + map[bool]string{false: " whole", true: " weekly by district"}[keyed]
			want, err := stream.Scan(ctx, req)
			if err != nil {
				t.Fatal(err)
			}
			got := pushOnShards(t, c, push, req)
			if got.Fallback != "" || !got.Pushdown {
				t.Fatalf("%s: not pushed down: %s", what, got.Fallback)
			}
			if table == "supply" {
				c.CheckOneAggregate(t, 1, cells)
			}
			if !slices.Equal(got.Columns, want.Columns) {
				t.Fatalf("%s: columns %v, want %v", what, got.Columns, want.Columns)
			}
			for i, f := range want.Factors {
				g := got.Factors[i]
				if g.Name != f.Name || !slices.Equal(g.Levels, f.Levels) || g.Null != f.Null {
					t.Errorf("%s: factor %+v, want %+v", what, g, f)
				}
			}
			if want.Factors[0].Null == 0 || want.Merged().Moments.Counts().Dropped <= want.Factors[0].Null {
				t.Errorf("%s: the data lost its NULL factors or missing values", what)
			}
			demand.SameResult(t, what, want, got, 1e-9)
		}
	}
}

// TestPushdownFactorCells: beyond the cell limit a pushdown with factors
// streams the rows instead, says so, and gives streaming's result.
func TestPushdownFactorCells(t *testing.T) {
	u := pgtestStart(t)
	pgtest.Exec(t, u, "CREATE TABLE supply ("+supplyDDL+")", supplyInsert("supply", 3000), "ANALYZE supply")
	ctx := context.Background()
	req := connectors.Request{Table: "supply", Columns: supplyColumns, TimeColumn: "day", Bucket: "day", MaxCells: 50}
	want, err := openPG(t, u, connectors.Options{}).Scan(ctx, req)
	if err != nil {
		t.Fatal(err)
	}
	got, err := openPG(t, u, connectors.Options{Pushdown: true}).Scan(ctx, req)
	if err != nil {
		t.Fatal(err)
	}
	if got.Pushdown || !strings.Contains(got.Fallback, "exceed 50") {
		t.Errorf("pushdown %v, fallback %q: want a streamed scan that says why", got.Pushdown, got.Fallback)
	}
	demand.SameResult(t, "fallback", want, got, 0)
}
