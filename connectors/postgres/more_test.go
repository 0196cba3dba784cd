package postgres

import (
	"context"
	"database/sql"
	"net/url"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"plumb/connectors"
	"plumb/connectors/internal/demand"
	"plumb/connectors/postgres/pgtest"
	_ "plumb/connectors/sqlite"
	"plumb/stream"
)

// TestSameAsSQLite: the same generated rows in PostgreSQL and SQLite give
// the same accumulators through both connectors and every PostgreSQL
// mode, and those of the rows held in memory.
func TestSameAsSQLite(t *testing.T) {
	rows := demand.Generate(4001, 9)
	u := loadDemand(t, rows)
	path := filepath.Join(t.TempDir(), "demand.db")
	w, err := sql.Open("sqlite", path)
	if err != nil {
		t.Fatal(err)
	}
	defer w.Close()
	if err := demand.CreateSQLite(w, "district_daily", rows); err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	req := connectors.Request{Table: "district_daily", TimeColumn: "day", Bucket: "week", Segment: "district"}
	lite, err := connectors.Open(ctx, "sqlite:"+path, connectors.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer lite.Close()
	want := demand.InMemory(rows, nil, "week", true, false)
	fromLite, err := lite.Scan(ctx, req)
	if err != nil {
		t.Fatal(err)
	}
	demand.SameResult(t, "sqlite", want, fromLite, 0)
	for _, c := range []struct {
		name string
		opts connectors.Options
		tol  float64
	}{
		{"stream", connectors.Options{}, 0},
		{"parallel 2", connectors.Options{Parallel: 2}, 1e-12},
		{"pushdown", connectors.Options{Pushdown: true}, 1e-12},
	} {
		src, err := connectors.Open(ctx, u, c.opts)
		if err != nil {
			t.Fatal(err)
		}
		got, err := src.Scan(ctx, req)
		src.Close()
		if err != nil {
			t.Fatal(err)
		}
		demand.SameResult(t, "postgres "+c.name+" vs sqlite", fromLite, got, c.tol)
	}
}

func TestLongley(t *testing.T) {
	data, err := demand.ReadLongley("../../testdata/nist/Longley.dat")
	if err != nil {
		t.Fatal(err)
	}
	u := pgtestStart(t)
	ctx := context.Background()
	conn, err := pgx.Connect(ctx, u)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	if _, err := conn.Exec(ctx, `CREATE TABLE longley (x1 float8, x2 float8, x3 float8, x4 float8, x5 float8, x6 float8, y float8)`); err != nil {
		t.Fatal(err)
	}
	rows := make([][]any, len(data))
	for i, r := range data {
		rows[i] = []any{r[0], r[1], r[2], r[3], r[4], r[5], r[6]}
	}
	if _, err := conn.CopyFrom(ctx, pgx.Identifier{"longley"}, demand.LongleyColumns, pgx.CopyFromRows(rows)); err != nil {
		t.Fatal(err)
	}
	m := stream.NewMoments(demand.LongleyColumns)
	b := stream.NewBlock(7, 16, false)
	for _, r := range data {
		v, _ := b.AppendRow()
		copy(v, r)
	}
	m.Add(b)
	for _, pd := range []bool{false, true} {
		src := openPG(t, u, connectors.Options{Pushdown: pd})
		res, err := src.Scan(ctx, connectors.Request{Table: "longley", Columns: demand.LongleyColumns, QR: !pd})
		if err != nil {
			t.Fatal(err)
		}
		g := res.Merged()
		tol := 0.0 // streaming: the same block as the core's own
		if pd {
			tol = 1e-12
		}
		demand.SameMoments(t, "longley", m, g.Moments, tol)
		if pd {
			continue
		}
		got := demand.Coefficients(g.QR)
		// certified, NIST StRD Longley
		for i, want := range demand.LongleyCertified {
			if d := (got[i] - want) / want; d > 1e-9 || d < -1e-9 {
				t.Errorf("B%d = %.15g, certified %.15g (rel %.1e)", i, got[i], want, d)
			}
		}
	}
}

// TestWeightsAndTimeZones: a weight column and buckets of timestamptz and
// timestamp columns in a named zone agree between streaming and pushdown.
func TestWeightsAndTimeZones(t *testing.T) {
	u := pgtestStart(t)
	pgtest.Exec(t, u, `CREATE TABLE hourly AS
		SELECT ts, ts AT TIME ZONE 'Europe/Amsterdam' AS local_ts,
			(i % 3)::text AS zone_id,
			(i % 7)::float8 / 3 AS w,
			sin(i) * 10 + 15 AS temperature, cos(i * 0.7) * 5 + 1e9 AS meter_reading,
			CASE WHEN i % 11 = 0 THEN NULL ELSE i % 13 END::float8 AS pressure
		FROM generate_series(1, 5000) AS i,
			LATERAL (SELECT timestamptz '2024-03-29 00:00+00' + i * interval '7 minutes' AS ts) AS t`,
		`UPDATE hourly SET w = -1 WHERE zone_id = '1' AND temperature > 24`,
		`UPDATE hourly SET ts = NULL WHERE pressure = 5`)
	ams, err := time.LoadLocation("Europe/Amsterdam")
	if err != nil {
		t.Skip("no time zone data:", err)
	}
	ctx := context.Background()
	stream := openPG(t, u, connectors.Options{})
	push := openPG(t, u, connectors.Options{Pushdown: true})
	cols := []string{"temperature", "meter_reading", "pressure"}
	for _, req := range []connectors.Request{
		{Table: "hourly", Columns: cols, TimeColumn: "ts", Bucket: "day", Location: ams, Segment: "zone_id"},
		{Table: "hourly", Columns: cols, TimeColumn: "local_ts", Bucket: "hour", Location: ams},
		{Table: "hourly", Columns: cols, TimeColumn: "ts", Bucket: "week", Weight: "w"},
		{Table: "hourly", Columns: cols, Weight: "w", Segment: "zone_id"},
	} {
		a, err := stream.Scan(ctx, req)
		if err != nil {
			t.Fatal(err)
		}
		b, err := push.Scan(ctx, req)
		if err != nil {
			t.Fatal(err)
		}
		name := req.TimeColumn + "/" + req.Bucket + "/" + req.Weight + "/" + req.Segment
		if a.NoTime != b.NoTime || (req.TimeColumn == "ts" && a.NoTime == 0) {
			t.Errorf("%s: rows without time %d streaming, %d pushdown", name, a.NoTime, b.NoTime)
		}
		// Weighted pushdown uses shifted sums: within the required 1e-9.
		tol := 1e-12
		if req.Weight != "" {
			tol = 1e-9
		}
		demand.SameResult(t, name, a, b, tol)
		if req.Weight != "" && a.Merged().Moments.Counts().BadWeights == 0 {
			t.Errorf("%s: no row dropped for a negative weight", name)
		}
	}
	// The local wall-clock hour buckets are Amsterdam hours: on
	// 2024-03-31 the clock skips 02:00, so that day has 23 hourly buckets.
	res, err := stream.Scan(ctx, connectors.Request{Table: "hourly", Columns: cols, TimeColumn: "ts", Bucket: "hour", Location: ams})
	if err != nil {
		t.Fatal(err)
	}
	n := 0
	for _, g := range res.Groups {
		if g.Key.Bucket.Format("2006-01-02") == "2024-03-31" {
			n++
			if g.Key.Bucket.Hour() == 2 {
				t.Errorf("a bucket at 02:00 on the day 02:00 does not exist: %v", g.Key.Bucket)
			}
		}
	}
	if n != 23 {
		t.Errorf("%d hourly buckets on 2024-03-31 in Amsterdam, want 23", n)
	}
}

func TestSampleAndPassword(t *testing.T) {
	rows := demand.Generate(8000, 2)
	u := loadDemand(t, rows)
	ctx := context.Background()
	src := openPG(t, u, connectors.Options{})
	req := connectors.Request{Table: "district_daily", SamplePct: 20, Seed: 42}
	a, err := src.Scan(ctx, req)
	if err != nil {
		t.Fatal(err)
	}
	b, err := src.Scan(ctx, req)
	if err != nil {
		t.Fatal(err)
	}
	if !a.Sampled {
		t.Error("not marked as sampled")
	}
	demand.SameResult(t, "same seed", a, b, 0)
	// 8000·0.2 ± 4σ, σ = √(8000·0.2·0.8) ≈ 36.
	if a.Read < 1456 || a.Read > 1744 {
		t.Errorf("sample read %d of %d rows, want about 1600", a.Read, len(rows))
	}
	par := openPG(t, u, connectors.Options{Parallel: 2})
	c, err := par.Scan(ctx, req)
	if err != nil {
		t.Fatal(err)
	}
	demand.SameResult(t, "parallel sample", a, c, 1e-12)

	// The password from PGPASSWORD instead of the URL.
	pu, _ := url.Parse(u)
	pw, _ := pu.User.Password()
	pu.User = url.User("postgres")
	t.Setenv("PGPASSWORD", pw)
	s2, err := Open(ctx, pu.String(), connectors.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer s2.Close()
	cols, err := s2.Describe(ctx, connectors.Request{Table: "district_daily"})
	if err != nil || len(cols) != 2+len(demand.Columns) {
		t.Fatalf("describe with PGPASSWORD: %d columns, %v", len(cols), err)
	}
	// The session is read-only and named.
	var app, ro string
	conn, err := s2.(*Source).pool.Acquire(ctx)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Release()
	if err := conn.QueryRow(ctx, "SELECT current_setting('application_name'), current_setting('default_transaction_read_only')").Scan(&app, &ro); err != nil {
		t.Fatal(err)
	}
	if app != "plumb" || ro != "on" {
		t.Errorf("application_name %q, default_transaction_read_only %q", app, ro)
	}
	if strings.Contains(s2.(*Source).name, pw) {
		t.Error("the source's name holds the password")
	}
}
