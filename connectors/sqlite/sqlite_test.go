package sqlite_test

import (
	"context"
	"database/sql"
	"errors"
	"math"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"plumb/connectors"
	"plumb/connectors/internal/demand"
	_ "plumb/connectors/sqlite"
	"plumb/stream"
)

// newDB writes a database file with the scenario table and returns its
// path, the rows and a writable handle for the test's own changes.
func newDB(t *testing.T, n int) (string, []demand.Row, *sql.DB) {
	t.Helper()
	path := filepath.Join(t.TempDir(), "demand.db")
	w, err := sql.Open("sqlite", path)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { w.Close() })
	rows := demand.Generate(n, 7)
	if err := demand.CreateSQLite(w, "district_daily", rows); err != nil {
		t.Fatal(err)
	}
	return path, rows, w
}

func open(t *testing.T, path string, opts connectors.Options) connectors.Source {
	t.Helper()
	src, err := connectors.Open(context.Background(), "sqlite:"+path, opts)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { src.Close() })
	return src
}

func TestScanMatchesMemory(t *testing.T) {
	path, rows, _ := newDB(t, 3001)
	src := open(t, path, connectors.Options{})
	ctx := context.Background()
	cases := []struct {
		name    string
		req     connectors.Request
		bucket  string
		segment bool
	}{
		{"whole table", connectors.Request{Table: "district_daily"}, "", false},
		{"monthly", connectors.Request{Table: "district_daily", TimeColumn: "day", Bucket: "month"}, "month", false},
		{"weekly by district", connectors.Request{Table: "district_daily", TimeColumn: "day", Bucket: "week", Segment: "district"}, "week", true},
		{"by district with QR", connectors.Request{Table: "district_daily", Segment: "district", QR: true}, "", true},
		{"query", connectors.Request{Query: "SELECT * FROM district_daily;"}, "", false},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			got, err := src.Scan(ctx, c.req)
			if err != nil {
				t.Fatal(err)
			}
			want := demand.InMemory(rows, nil, c.bucket, c.segment, c.req.QR)
			// Same rows in the same order through the same blocks: the
			// results agree to the last bit (tolerance 0).
			demand.SameResult(t, c.name, want, got, 0)
			if c.req.QR {
				for i := range want.Groups {
					if got.Groups[i].QR == nil || got.Groups[i].QR.N() != want.Groups[i].QR.N() {
						t.Fatalf("group %d: QR missing or wrong count", i)
					}
				}
			}
			wantSkipped := 2
			if c.req.TimeColumn != "" {
				wantSkipped--
			}
			if c.segment {
				wantSkipped--
			}
			if len(got.Skipped) != wantSkipped {
				t.Errorf("skipped %v, want those of day and district not used as time or segment", got.Skipped)
			}
		})
	}
}

func TestDescribe(t *testing.T) {
	path, _, w := newDB(t, 10)
	mustExec(t, w, `CREATE TABLE kinds (a INTEGER, b REAL, c NUMERIC, d BOOLEAN, e TEXT, f BLOB, g DATETIME, h VARCHAR(10), i, j DECIMAL(10,2), k JSON)`)
	mustExec(t, w, `INSERT INTO kinds VALUES (1, 2.5, 3, 1, 'x', x'00', '2024-01-01', 'y', 4, 1.25, '{}')`)
	src := open(t, path, connectors.Options{})
	cols, err := src.Describe(context.Background(), connectors.Request{Table: "kinds"})
	if err != nil {
		t.Fatal(err)
	}
	want := map[string]connectors.Kind{
		"a": connectors.KindNumeric, "b": connectors.KindNumeric, "c": connectors.KindNumeric,
		"d": connectors.KindBool, "e": connectors.KindText, "f": connectors.KindOther,
		"g": connectors.KindTime, "h": connectors.KindText, "i": connectors.KindNumeric,
		// JSON has numeric affinity by SQLite's rules, but holds text.
		"j": connectors.KindNumeric, "k": connectors.KindText,
	}
	if len(cols) != len(want) {
		t.Fatalf("%d columns, want %d", len(cols), len(want))
	}
	for _, c := range cols {
		if c.Kind != want[c.Name] {
			t.Errorf("column %s (%s): kind %v, want %v", c.Name, c.Type, c.Kind, want[c.Name])
		}
	}
	res, err := src.Scan(context.Background(), connectors.Request{Table: "kinds"})
	if err != nil {
		t.Fatal(err)
	}
	// The boolean is a factor; its one level seen is true.
	if got := strings.Join(res.Columns, ","); got != "a,b,c,d[true],i,j" {
		t.Errorf("discovered %s, want a,b,c,d[true],i,j", got)
	}
	// The text columns left out are listed with their levels counted.
	for _, c := range res.Skipped {
		if c.Kind == connectors.KindText && (c.Levels != 1 || c.LevelsMore) {
			t.Errorf("skipped %s: %d levels (more %v), want 1", c.Name, c.Levels, c.LevelsMore)
		}
	}
	qcols, err := src.Describe(context.Background(), connectors.Request{Query: "SELECT a + b AS s, e || 'z' AS t FROM kinds"})
	if err != nil {
		t.Fatal(err)
	}
	if qcols[0].Kind != connectors.KindNumeric || qcols[1].Kind != connectors.KindText {
		t.Errorf("query columns %+v: want s numeric and t text", qcols)
	}
}

func mustExec(t *testing.T, db *sql.DB, q string, args ...any) {
	t.Helper()
	if _, err := db.Exec(q, args...); err != nil {
		t.Fatalf("%s: %v", q, err)
	}
}

func TestBadInputs(t *testing.T) {
	path, _, w := newDB(t, 50)
	mustExec(t, w, `CREATE TABLE gauges (reading REAL, note TEXT, station INTEGER, raw BLOB)`)
	mustExec(t, w, `INSERT INTO gauges VALUES (1.5, 'ok', 1, x'01'), (2.5, 'ok', 2, x'02'), ('n/a', 'broken', 3, x'03'), (3.5, 'ok', 4, x'04')`)
	mustExec(t, w, `CREATE TABLE empty (a REAL, b REAL)`)
	mustExec(t, w, `CREATE TABLE blank (a REAL, b REAL)`)
	mustExec(t, w, `INSERT INTO blank VALUES (1, NULL), (2, NULL), (3, NULL)`)
	mustExec(t, w, `CREATE TABLE few (a REAL, b REAL, c REAL)`)
	mustExec(t, w, `INSERT INTO few VALUES (1, 2, 3), (2, 3, 5), (4, 1, 0)`)
	mustExec(t, w, `CREATE TABLE "odd ""name""; DROP TABLE gauges; --" ("x; DROP TABLE gauges" REAL, "y""" REAL)`)
	mustExec(t, w, `INSERT INTO "odd ""name""; DROP TABLE gauges; --" VALUES (1, 2), (2, 1), (3, 3), (5, 4)`)
	src := open(t, path, connectors.Options{})
	ctx := context.Background()

	cases := []struct {
		name  string
		req   connectors.Request
		is    error    // errors.Is target
		words []string // the message must say these
		check bool     // the error comes from connectors.Check on the result
	}{
		{"missing table", connectors.Request{Table: "district_dialy"}, connectors.ErrNotFound,
			[]string{`"district_dialy"`, "district_daily", "gauges"}, false},
		{"missing schema", connectors.Request{Table: "aux.district_daily"}, connectors.ErrNotFound, []string{`"aux"`, "main"}, false},
		{"missing column", connectors.Request{Table: "district_daily", Columns: []string{"temperature", "humidity"}},
			connectors.ErrNotFound, []string{`"humidity"`, "rainfall", "billed_volume"}, false},
		{"blob column", connectors.Request{Table: "gauges", Columns: []string{"reading", "raw"}},
			connectors.ErrColumnType, []string{`"raw"`, "BLOB"}, false},
		{"too many levels", connectors.Request{Table: "district_daily", Columns: []string{"temperature", "district"}, MaxLevels: 3},
			connectors.ErrTooManyLevels, []string{`"district"`, "more than 3", "4 levels had been seen", "district_daily"}, false},
		{"time column as value", connectors.Request{Table: "district_daily", Columns: []string{"day"}},
			connectors.ErrColumnType, []string{`"day"`, "DATE", "--time-column"}, false},
		{"text in a numeric column", connectors.Request{Table: "gauges", Columns: []string{"reading", "station"}},
			connectors.ErrBadValue, []string{`"reading"`, "rowid 3", `"n/a"`, "REAL"}, false},
		{"quotes and semicolons in a missing name", connectors.Request{Table: `"x""; DROP TABLE gauges; --"`},
			connectors.ErrNotFound, []string{`DROP TABLE gauges`}, false},
		{"unquoted semicolon", connectors.Request{Table: `gauges; DROP TABLE gauges`}, connectors.ErrIdentifier, []string{`';'`}, false},
		{"where with a semicolon", connectors.Request{Table: "gauges", Where: "1=1; DROP TABLE gauges"}, connectors.ErrFragment, []string{"semicolon"}, false},
		{"where closing the parenthesis", connectors.Request{Table: "gauges", Where: "1=1) OR (1=1"}, connectors.ErrFragment, []string{"unmatched"}, false},
		{"too many segments", connectors.Request{Table: "district_daily", Segment: "day", MaxSegments: 5}, connectors.ErrTooManySegments, []string{"5"}, false},
		{"zero rows", connectors.Request{Table: "empty"}, connectors.ErrInsufficient, []string{"no rows"}, true},
		{"all-NULL column", connectors.Request{Table: "blank"}, connectors.ErrInsufficient, []string{`"b"`, "every row"}, true},
		{"fewer rows than columns + 1", connectors.Request{Table: "few"}, connectors.ErrInsufficient, []string{"3 complete rows", "3 columns", "at least 4"}, true},
		{"sample of a query", connectors.Request{Query: "SELECT reading FROM gauges", SamplePct: 10}, connectors.ErrUnsupported, []string{"rowid"}, false},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			res, err := src.Scan(ctx, c.req)
			if c.check {
				if err != nil {
					t.Fatalf("scan: %v", err)
				}
				err = connectors.Check("table "+c.req.Table, res)
			}
			if err == nil {
				t.Fatalf("no error")
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

	// The oddly named table is read through quoting, and nothing was dropped.
	res, err := src.Scan(ctx, connectors.Request{Table: `"odd ""name""; DROP TABLE gauges; --"`})
	if err != nil {
		t.Fatal(err)
	}
	if m := res.Merged().Moments; m.N() != 4 || m.Names()[0] != "x; DROP TABLE gauges" {
		t.Errorf("odd table: n=%d columns %v", m.N(), m.Names())
	}
	var n int
	if err := w.QueryRow(`SELECT count(*) FROM gauges`).Scan(&n); err != nil || n != 4 {
		t.Fatalf("gauges after the bad inputs: %d rows, %v", n, err)
	}
}

func TestWritingQueryRefused(t *testing.T) {
	path, rows, w := newDB(t, 40)
	src := open(t, path, connectors.Options{})
	for _, q := range []string{
		"DELETE FROM district_daily",
		"DELETE FROM district_daily RETURNING temperature",
		"UPDATE district_daily SET temperature = 0 RETURNING temperature",
		"DROP TABLE district_daily",
		"INSERT INTO district_daily (day, district) VALUES ('2030-01-01', 'x') RETURNING 1",
	} {
		_, err := src.Scan(context.Background(), connectors.Request{Query: q})
		if err == nil {
			t.Fatalf("%s: no error", q)
		}
		// plumb's refusal before running it, or SQLite's own: "attempt to
		// write a readonly database".
		if !errors.Is(err, connectors.ErrFragment) && !strings.Contains(err.Error(), "readonly database") {
			t.Errorf("%s: error %q is not a read-only refusal", q, err)
		}
	}
	var n int
	var sum float64
	if err := w.QueryRow(`SELECT count(*), sum(temperature) FROM district_daily`).Scan(&n, &sum); err != nil {
		t.Fatal(err)
	}
	want := 0.0
	for _, r := range rows {
		want += r.Values[0]
	}
	if n != len(rows) || math.Abs(sum-want) > 1e-9*math.Abs(want) {
		t.Errorf("after the writing queries: %d rows, sum %g; want %d, %g", n, sum, len(rows), want)
	}
}

func TestLockedByWriter(t *testing.T) {
	path, _, w := newDB(t, 20)
	// A writer in rollback-journal mode holding an exclusive lock.
	conn, err := w.Conn(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	if _, err := conn.ExecContext(context.Background(), "BEGIN EXCLUSIVE"); err != nil {
		t.Fatal(err)
	}
	src, err := connectors.Open(context.Background(), "sqlite:"+path, connectors.Options{StatementTimeout: 300 * time.Millisecond})
	if err == nil {
		defer src.Close()
		_, err = src.Scan(context.Background(), connectors.Request{Table: "district_daily"})
	}
	if err == nil || !strings.Contains(err.Error(), "locked by a writer") {
		t.Fatalf("error %v, want a locked-by-a-writer error", err)
	}
	if _, err := conn.ExecContext(context.Background(), "ROLLBACK"); err != nil {
		t.Fatal(err)
	}
}

func TestSample(t *testing.T) {
	path, rows, _ := newDB(t, 4000)
	src := open(t, path, connectors.Options{})
	ctx := context.Background()
	req := connectors.Request{Table: "district_daily", SamplePct: 25, Seed: 11}
	a, err := src.Scan(ctx, req)
	if err != nil {
		t.Fatal(err)
	}
	b, err := src.Scan(ctx, req)
	if err != nil {
		t.Fatal(err)
	}
	if !a.Sampled {
		t.Error("result not marked as sampled")
	}
	demand.SameResult(t, "same seed", a, b, 0)
	// About a quarter of the rows; 4000·0.25 ± 4σ with σ = √(4000·0.25·0.75) ≈ 27.
	if a.Read < 890 || a.Read > 1110 {
		t.Errorf("sample read %d of %d rows, want about 1000", a.Read, len(rows))
	}
	req.Seed = 12
	c, err := src.Scan(ctx, req)
	if err != nil {
		t.Fatal(err)
	}
	if c.Read == a.Read && c.Merged().Moments.Mean(0) == a.Merged().Moments.Mean(0) {
		t.Error("a different seed picked the same rows")
	}
}

func TestTimeValues(t *testing.T) {
	path, _, w := newDB(t, 1)
	mustExec(t, w, `CREATE TABLE readings (at TEXT, at_unix INTEGER, v REAL, u REAL)`)
	ins := func(at string, unix int64, v float64) {
		mustExec(t, w, `INSERT INTO readings VALUES (?, ?, ?, ?)`, at, unix, v, v*v)
	}
	// 2024-03-31 is the day Europe/Amsterdam moves to summer time.
	ins("2024-03-30 23:30:00", time.Date(2024, 3, 30, 23, 30, 0, 0, time.UTC).Unix(), 1)
	ins("2024-03-31T00:10:00Z", time.Date(2024, 3, 31, 0, 10, 0, 0, time.UTC).Unix(), 2)
	ins("2024-03-31", time.Date(2024, 3, 31, 0, 0, 0, 0, time.UTC).Unix(), 3)
	ins("2024-04-01 06:00+02:00", time.Date(2024, 4, 1, 4, 0, 0, 0, time.UTC).Unix(), 4)
	mustExec(t, w, `INSERT INTO readings VALUES (NULL, NULL, 5, 25)`)
	src := open(t, path, connectors.Options{})
	ams, err := time.LoadLocation("Europe/Amsterdam")
	if err != nil {
		t.Skip("no time zone data:", err)
	}
	for _, col := range []string{"at", "at_unix"} {
		for _, loc := range []*time.Location{time.UTC, ams} {
			res, err := src.Scan(context.Background(), connectors.Request{Table: "readings", Columns: []string{"v", "u"},
				TimeColumn: col, Bucket: "day", Location: loc})
			if err != nil {
				t.Fatal(err)
			}
			if res.NoTime != 1 {
				t.Errorf("%s %s: %d rows without time, want 1", col, loc, res.NoTime)
			}
			var got []string
			for _, g := range res.Groups {
				got = append(got, g.Key.Bucket.Format("2006-01-02T15:04Z07:00")+"="+itoa(g.Moments.N()))
			}
			// Worked by hand from the rows above. Naive text is wall-clock
			// time in the zone; Unix seconds are instants.
			want := map[string]string{
				"at UTC":                   "2024-03-30T00:00Z=1 2024-03-31T00:00Z=2 2024-04-01T00:00Z=1",
				"at Europe/Amsterdam":      "2024-03-30T00:00+01:00=1 2024-03-31T00:00+01:00=2 2024-04-01T00:00+02:00=1",
				"at_unix UTC":              "2024-03-30T00:00Z=1 2024-03-31T00:00Z=2 2024-04-01T00:00Z=1",
				"at_unix Europe/Amsterdam": "2024-03-31T00:00+01:00=3 2024-04-01T00:00+02:00=1",
			}[col+" "+loc.String()]
			if strings.Join(got, " ") != want {
				t.Errorf("%s in %s: buckets %s, want %s", col, loc, strings.Join(got, " "), want)
			}
		}
	}
}

func itoa(n int64) string { return strconv.FormatInt(n, 10) }

func TestLongley(t *testing.T) {
	data, err := demand.ReadLongley("../../testdata/nist/Longley.dat")
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "longley.db")
	w, err := sql.Open("sqlite", path)
	if err != nil {
		t.Fatal(err)
	}
	defer w.Close()
	mustExec(t, w, `CREATE TABLE longley (x1 REAL, x2 REAL, x3 REAL, x4 REAL, x5 REAL, x6 REAL, y REAL)`)
	for _, r := range data {
		args := make([]any, len(r))
		for i, v := range r {
			args[i] = v
		}
		mustExec(t, w, `INSERT INTO longley VALUES (?, ?, ?, ?, ?, ?, ?)`, args...)
	}
	src := open(t, path, connectors.Options{})
	res, err := src.Scan(context.Background(), connectors.Request{Table: "longley", Columns: demand.LongleyColumns, QR: true})
	if err != nil {
		t.Fatal(err)
	}
	g := res.Merged()
	// The numeric core fed directly with the same rows.
	m, q := stream.NewMoments(demand.LongleyColumns), stream.NewQR(demand.LongleyColumns)
	b := stream.NewBlock(7, 16, false)
	for _, r := range data {
		v, _ := b.AppendRow()
		copy(v, r)
	}
	m.Add(b)
	q.Add(b)
	demand.SameMoments(t, "longley", m, g.Moments, 0)
	got := demand.Coefficients(g.QR)
	// certified, NIST StRD Longley; the QR path keeps about 12 digits here.
	for i, want := range demand.LongleyCertified {
		if d := (got[i] - want) / want; d > 1e-9 || d < -1e-9 {
			t.Errorf("B%d = %.15g, certified %.15g (rel %.1e)", i, got[i], want, d)
		}
	}
}
