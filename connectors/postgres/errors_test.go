package postgres

import (
	"context"
	"errors"
	"fmt"
	"net/url"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"plumb/connectors"
	"plumb/connectors/internal/demand"
	"plumb/connectors/postgres/pgtest"
)

func TestBadInputs(t *testing.T) {
	u := loadDemand(t, demand.Generate(200, 5))
	pgtest.Exec(t, u,
		`CREATE TABLE empty (a float8, b float8)`,
		`CREATE TABLE blank (a float8, b float8)`,
		`INSERT INTO blank VALUES (1, NULL), (2, NULL), (3, NULL)`,
		`CREATE TABLE few (a float8, b float8, c float8)`,
		`INSERT INTO few VALUES (1, 2, 3), (2, 3, 5), (4, 1, 0)`,
		`CREATE TABLE "odd ""name""; DROP TABLE few; --" ("x; DROP TABLE few" float8, "y""" float8)`,
		`INSERT INTO "odd ""name""; DROP TABLE few; --" VALUES (1, 2), (2, 1), (3, 3), (5, 4)`,
		`CREATE SCHEMA ops`,
		`CREATE TABLE ops.pumps (flow numeric(30,20), head float4, running boolean, label text)`,
		`INSERT INTO ops.pumps VALUES (1.25, 3, true, 'a'), (2.123456789012345678, 4, false, 'b'), (3, 5, true, 'c')`,
		`ANALYZE ops.pumps`,
		`CREATE TABLE blobs (a float8, raw bytea)`,
	)
	for _, pd := range []bool{false, true} {
		src := openPG(t, u, connectors.Options{Pushdown: pd})
		cases := []struct {
			name  string
			req   connectors.Request
			is    error
			words []string
			check bool
		}{
			{"missing table", connectors.Request{Table: "district_dialy"}, connectors.ErrNotFound,
				[]string{`"district_dialy"`, "district_daily", "few"}, false},
			{"missing schema-qualified table", connectors.Request{Table: "ops.pump"}, connectors.ErrNotFound, []string{`"ops"."pump"`, "pumps"}, false},
			{"missing column", connectors.Request{Table: "district_daily", Columns: []string{"temperature", "humidity"}},
				connectors.ErrNotFound, []string{`"humidity"`, "rainfall", "billed_volume"}, false},
			{"bytea column", connectors.Request{Table: "blobs", Columns: []string{"a", "raw"}},
				connectors.ErrColumnType, []string{`"raw"`, "bytea"}, false},
			{"too many levels", connectors.Request{Table: "district_daily", Columns: []string{"temperature", "district"}, MaxLevels: 2},
				connectors.ErrTooManyLevels, []string{`"district"`, "more than 2", "3 levels had been seen", "district_daily"}, false},
			{"date column as a value", connectors.Request{Table: "district_daily", Columns: []string{"day"}},
				connectors.ErrColumnType, []string{`"day"`, "date", "--time-column"}, false},
			{"quotes and semicolons in a missing name", connectors.Request{Table: `"x""; DROP TABLE few; --"`},
				connectors.ErrNotFound, []string{`DROP TABLE few`}, false},
			{"unquoted semicolon", connectors.Request{Table: `few; DROP TABLE few`}, connectors.ErrIdentifier, []string{`';'`}, false},
			{"where with a semicolon", connectors.Request{Table: "few", Where: "true; DROP TABLE few"}, connectors.ErrFragment, []string{"semicolon"}, false},
			{"where closing the parenthesis", connectors.Request{Table: "few", Where: "true) OR (true"}, connectors.ErrFragment, []string{"unmatched"}, false},
			{"too many segments", connectors.Request{Table: "district_daily", Segment: "day", MaxSegments: 5}, connectors.ErrTooManySegments, []string{"5"}, false},
			{"zero rows", connectors.Request{Table: "empty"}, connectors.ErrInsufficient, []string{"no rows"}, true},
			{"all-NULL column", connectors.Request{Table: "blank"}, connectors.ErrInsufficient, []string{`"b"`, "every row"}, true},
			{"fewer rows than columns + 1", connectors.Request{Table: "few"}, connectors.ErrInsufficient, []string{"3 complete rows", "at least 4"}, true},
			{"sample of a query", connectors.Request{Query: "SELECT a FROM few", SamplePct: 10}, connectors.ErrUnsupported, []string{"TABLESAMPLE"}, false},
		}
		for _, c := range cases {
			t.Run(fmt.Sprintf("pushdown=%v/%s", pd, c.name), func(t *testing.T) {
				res, err := src.Scan(context.Background(), c.req)
				if c.check {
					if err != nil {
						t.Fatalf("scan: %v", err)
					}
					err = connectors.Check("table "+c.req.Table, res)
				}
				if err == nil {
					t.Fatal("no error")
				}
				if !errors.Is(err, c.is) {
					t.Errorf("error %q does not wrap %v", err, c.is)
				}
				for _, w := range c.words {
					if !strings.Contains(err.Error(), w) {
						t.Errorf("error %q does not say %q", err, w)
					}
				}
			})
		}
		res, err := src.Scan(context.Background(), connectors.Request{Table: `"odd ""name""; DROP TABLE few; --"`})
		if err != nil {
			t.Fatal(err)
		}
		if m := res.Merged().Moments; m.N() != 4 || m.Names()[0] != "x; DROP TABLE few" {
			t.Errorf("odd table: n=%d columns %v", m.N(), m.Names())
		}
		// numeric, float4 and boolean columns; the numeric with 19
		// significant digits is counted as inexact; text is skipped, with
		// its levels counted from the statistics; the boolean is a
		// factor, pushed down as a grouping key.
		res, err = src.Scan(context.Background(), connectors.Request{Table: "ops.pumps"})
		if err != nil {
			t.Fatal(err)
		}
		m := res.Merged().Moments
		if strings.Join(res.Columns, ",") != "flow,head,running[false],running[true]" || len(res.Skipped) != 1 || res.Skipped[0].Name != "label" {
			t.Errorf("pumps: columns %v skipped %v", res.Columns, res.Skipped)
		}
		if res.Skipped[0].Levels != 3 || res.Skipped[0].LevelsMore {
			t.Errorf("pumps: label has %d levels (more %v), want 3", res.Skipped[0].Levels, res.Skipped[0].LevelsMore)
		}
		if len(res.Factors) != 1 || res.Factors[0].Name != "running" || strings.Join(res.Factors[0].Levels, ",") != "false,true" {
			t.Errorf("pumps: factors %+v", res.Factors)
		}
		if len(res.Inexact) != 4 || res.Inexact[0] != 1 || res.Inexact[1] != 0 {
			t.Errorf("pumps: inexact %v, want [1 0 0 0]", res.Inexact)
		}
		// Worked by hand: running is true, false, true → the true
		// indicator's mean is 2/3; head 3, 4, 5 → mean 4.
		if math := m.Mean(3); math < 0.6666666666666665 || math > 0.6666666666666668 || m.Mean(1) != 4 {
			t.Errorf("pumps: means %v %v", m.Mean(1), m.Mean(3))
		}
	}
	ctx := context.Background()
	conn, err := pgx.Connect(ctx, u)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	var n int
	if err := conn.QueryRow(ctx, `SELECT count(*) FROM few`).Scan(&n); err != nil || n != 3 {
		t.Fatalf("few after the bad inputs: %d rows, %v", n, err)
	}
}

func TestWritingQueryRefused(t *testing.T) {
	rows := demand.Generate(60, 5)
	u := loadDemand(t, rows)
	ctx := context.Background()
	for _, pd := range []bool{false, true} {
		src := openPG(t, u, connectors.Options{Pushdown: pd})
		for _, q := range []string{
			"DELETE FROM district_daily",
			"DELETE FROM district_daily RETURNING temperature",
			"UPDATE district_daily SET temperature = 0 RETURNING temperature",
			"INSERT INTO district_daily (day, district) VALUES ('2030-01-01', 'x') RETURNING 1",
			"DROP TABLE district_daily",
			"TRUNCATE district_daily",
			"WITH gone AS (DELETE FROM district_daily RETURNING *) SELECT temperature FROM gone",
			"SELECT temperature FROM district_daily; DELETE FROM district_daily",
		} {
			_, err := src.Scan(ctx, connectors.Request{Query: q})
			if err == nil {
				t.Fatalf("pushdown=%v %s: no error", pd, q)
			}
			// PostgreSQL's own refusal (SQLSTATE 25006), except for two
			// statements in one, which plumb refuses before sending.
			var pe interface{ Error() string }
			pe = err
			if !strings.Contains(pe.Error(), "read-only transaction") && !errors.Is(err, connectors.ErrFragment) {
				t.Errorf("pushdown=%v %s: error %q is not the database's read-only refusal", pd, q, err)
			}
		}
	}
	conn, err := pgx.Connect(ctx, u)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	var n int
	var sum float64
	if err := conn.QueryRow(ctx, `SELECT count(*), sum(temperature) FROM district_daily WHERE day < '2030-01-01'`).Scan(&n, &sum); err != nil {
		t.Fatal(err)
	}
	want := 0.0
	for _, r := range rows {
		want += r.Values[0]
	}
	if n != len(rows) || sum < want-1e-9*want || sum > want+1e-9*want {
		t.Errorf("after the writing queries: %d rows, sum %g; want %d, %g", n, sum, len(rows), want)
	}
}

// TestConnectionErrors: each failure is one clear error with no password.
func TestConnectionErrors(t *testing.T) {
	u := loadDemand(t, demand.Generate(40, 5))
	pu, _ := url.Parse(u)
	password, _ := pu.User.Password()
	pgtest.Exec(t, u,
		`DO $$ BEGIN IF NOT EXISTS (SELECT FROM pg_roles WHERE rolname = 'meter_reader') THEN CREATE ROLE meter_reader LOGIN PASSWORD 'reader-pw'; END IF; END $$`,
		`REVOKE ALL ON district_daily FROM PUBLIC`)
	ctx := context.Background()
	wrong := *pu
	wrong.User = url.UserPassword("postgres", "not-"+password)
	reader := *pu
	reader.User = url.UserPassword("meter_reader", "reader-pw")
	cases := []struct {
		name, url string
		req       connectors.Request
		opts      connectors.Options
		words     []string
	}{
		{"wrong password", wrong.String(), connectors.Request{Table: "district_daily"}, connectors.Options{}, []string{"password"}},
		{"unreachable server", "postgres://postgres:" + password + "@127.0.0.1:1/x?sslmode=disable&connect_timeout=5",
			connectors.Request{Table: "district_daily"}, connectors.Options{}, []string{"cannot connect"}},
		{"permission denied", reader.String(), connectors.Request{Table: "district_daily"}, connectors.Options{}, []string{"permission denied", "grant SELECT"}},
		{"statement timeout", u, connectors.Request{Query: "SELECT temperature, pg_sleep(0.05)::text AS s FROM district_daily"},
			connectors.Options{StatementTimeout: 300 * time.Millisecond}, []string{"statement_timeout is 300ms"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			src, err := Open(ctx, c.url, c.opts)
			if err == nil {
				defer src.Close()
				_, err = src.Scan(ctx, c.req)
			}
			if err == nil {
				t.Fatal("no error")
			}
			msg := err.Error()
			t.Log(msg)
			for _, w := range c.words {
				if !strings.Contains(msg, w) {
					t.Errorf("error %q does not say %q", msg, w)
				}
			}
			for _, secret := range []string{password, "not-" + password, "reader-pw"} {
				if strings.Contains(msg, secret) {
					t.Errorf("error %q leaks a password", msg)
				}
			}
			if strings.Count(msg, "\n") > 0 {
				t.Errorf("error %q is more than one line", msg)
			}
		})
	}
}

// TestServerKilledMidScan: a server that dies during a scan gives an error,
// never a partial result, in every mode.
func TestServerKilledMidScan(t *testing.T) {
	for _, mode := range []struct {
		name string
		opts connectors.Options
		set  func(*Source)
	}{
		{"copy", connectors.Options{}, func(s *Source) { s.mode = readCopy }},
		{"rows", connectors.Options{}, func(s *Source) { s.mode = readRows }},
		{"parallel 2", connectors.Options{Parallel: 2}, func(s *Source) {}},
	} {
		t.Run(mode.name, func(t *testing.T) {
			srv := pgtest.NewServer(t)
			u := srv.NewDatabase(t)
			// Enough rows that the scan is still running when the server dies.
			pgtest.Exec(t, u, `CREATE TABLE readings AS SELECT random() AS a, random() AS b, random() AS c FROM generate_series(1, 3000000)`)
			src := openPG(t, u, mode.opts)
			mode.set(src)
			killed := make(chan struct{})
			req := connectors.Request{Table: "readings", Progress: func(read, total int64) {
				if read >= 200000 {
					select {
					case <-killed:
					default:
						close(killed)
						srv.Kill()
					}
				}
			}}
			res, err := src.Scan(context.Background(), req)
			if err == nil {
				t.Fatalf("no error; result of %d rows", res.Read)
			}
			if res != nil {
				t.Fatalf("a result came with the error %v", err)
			}
			t.Log(err)
			if !strings.Contains(err.Error(), "no result was kept") {
				t.Errorf("error %q does not say that no result was kept", err)
			}
		})
	}
}
