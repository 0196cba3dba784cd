package main

import (
	"context"
	"testing"

	"github.com/jackc/pgx/v5"

	"plumb/connectors/postgres/pgtest"
)

// The same rows in PostgreSQL (supply_source an enum type, district_code
// varchar) and in SQLite (TEXT) give the same factor entries and VIFs
// (identity: one design read from two databases).
func TestScanFactorPostgres(t *testing.T) {
	srv := pgtest.NewServer(t)
	u := srv.NewDatabase(t)
	ctx := context.Background()
	conn, err := pgx.Connect(ctx, u)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	if _, err := conn.Exec(ctx, `CREATE TYPE water_source AS ENUM ('river', 'reservoir', 'groundwater');
		CREATE TABLE district_daily (temperature_c float8, population_served bigint,
			supply_source water_source, src_groundwater int, src_reservoir int, src_river int,
			district_code varchar(8), district text, note text, demand_m3 float8)`); err != nil {
		t.Fatal(err)
	}
	rows, _ := factorRows(300)
	if _, err := conn.CopyFrom(ctx, pgx.Identifier{"district_daily"},
		[]string{"temperature_c", "population_served", "supply_source", "src_groundwater", "src_reservoir", "src_river", "district_code", "district", "note", "demand_m3"},
		pgx.CopyFromRows(rows)); err != nil {
		t.Fatal(err)
	}
	path, _ := factorTable(t, 300)
	args := []string{"--table", "district_daily", "--columns", "temperature_c,supply_source,population_served,district_code", "--target", "demand_m3"}
	pg := scanAs[factorScanJSON](t, append([]string{"--db", u}, args...)...)
	lite := scanAs[factorScanJSON](t, append([]string{"--db", "sqlite:" + path}, args...)...)
	if len(pg.Groups) != 2 || len(lite.Groups) != 2 || pg.RowsUsed != lite.RowsUsed || pg.RowsDropped != lite.RowsDropped {
		t.Fatalf("PostgreSQL %+v rows %d/%d, SQLite %+v rows %d/%d", pg.Groups, pg.RowsUsed, pg.RowsDropped, lite.Groups, lite.RowsUsed, lite.RowsDropped)
	}
	for i, g := range pg.Groups {
		h := lite.Groups[i]
		if g.Name != h.Name || g.Base != h.Base || g.DF != h.DF || len(g.Levels) != len(h.Levels) ||
			relDiff(*g.GVIF, *h.GVIF) > 1e-12 || relDiff(*g.GVIFAdjusted, *h.GVIFAdjusted) > 1e-12 {
			t.Errorf("PostgreSQL %+v (GVIF %.15g), SQLite %+v (GVIF %.15g)", g, *g.GVIF, h, *h.GVIF)
		}
	}
	for i, c := range pg.Columns {
		if c.Name != lite.Columns[i].Name || relDiff(*c.VIF, *lite.Columns[i].VIF) > 1e-12 {
			t.Errorf("PostgreSQL VIF(%s) %.15g, SQLite VIF(%s) %.15g", c.Name, *c.VIF, lite.Columns[i].Name, *lite.Columns[i].VIF)
		}
	}
	if pg.DroppedBy["supply_source"] == 0 || pg.DroppedBy["supply_source"] != lite.DroppedBy["supply_source"] {
		t.Errorf("NULL supply_source rows: PostgreSQL %d, SQLite %d", pg.DroppedBy["supply_source"], lite.DroppedBy["supply_source"])
	}
}
