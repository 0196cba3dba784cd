package migrations

import (
	"context"
	"database/sql"
	"slices"
	"strings"
	"testing"
)

// TestSegmentKeysSQLite: a store written with the old segment keys (the
// empty text for the whole table and for the empty string, "(null)" for
// NULL, values as they are) is rewritten to the new keys by migration
// 00004.
func TestSegmentKeysSQLite(t *testing.T) {
	testSegmentKeys(t, context.Background(), SQLite, openSQLite(t))
}

func testSegmentKeys(t *testing.T, ctx context.Context, d Dialect, db *sql.DB) {
	t.Helper()
	p, err := NewProvider(d, db, nil)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := p.UpTo(ctx, 1); err != nil {
		t.Fatal(err)
	}
	ph := func(q string) string {
		if d != Postgres {
			return q
		}
		for i := 1; strings.Contains(q, "?"); i++ {
			q = strings.Replace(q, "?", "$"+string(rune('0'+i)), 1)
		}
		return q
	}
	exec := func(q string, args ...any) {
		t.Helper()
		if _, err := db.ExecContext(ctx, ph(q), args...); err != nil {
			t.Fatalf("%s: %v", q, err)
		}
	}
	exec(`INSERT INTO plumb_runs (watch, kind, status, started_at, finished_at, duration_ms) VALUES ('x', 'live', 'ok', 0, 0, 0)`)
	var run int64
	if err := db.QueryRowContext(ctx, `SELECT max(id) FROM plumb_runs`).Scan(&run); err != nil {
		t.Fatal(err)
	}
	// zones is segmented (its '' bucket held the empty string's rows);
	// plain is not (its '' buckets are the whole table). "=x" and "~null"
	// are real values that must not meet the new keys of "x" and NULL.
	for _, b := range []struct{ watch, seg string }{
		{"zones", ""}, {"zones", "hillside"}, {"zones", "(null)"}, {"zones", "x"}, {"zones", "=x"}, {"zones", "~null"},
		{"plain", ""},
	} {
		exec(`INSERT INTO plumb_buckets (watch, segment, bucket_start, columns, rows, moments, run_id) VALUES (?, ?, 0, 'a,b', 1, ?, ?)`,
			b.watch, b.seg, []byte("m:"+b.seg), run)
	}
	for _, seg := range []string{"", "hillside", "(null)", "x", "=x"} {
		exec(`INSERT INTO plumb_points (watch, segment, at, run_id, rows_used, rows_dropped, rank, columns) VALUES ('zones', ?, 0, ?, 1, 0, 3, 2)`, seg, run)
		exec(`INSERT INTO plumb_point_columns (watch, segment, at, name) VALUES ('zones', ?, 0, 'a')`, seg)
		exec(`INSERT INTO plumb_watch_state (watch, segment, state) VALUES ('zones', ?, 'ok')`, seg)
		exec(`INSERT INTO plumb_alerts (id, watch, segment, rule, subject, severity, as_of, opened_at, updated_as_of, updated_at, message, detail, notify_state)
			VALUES (?, 'zones', ?, 'level', 'condition', 'warning', 0, 0, 0, 0, 'm', '{}', 'sent')`, "id-"+seg, seg)
	}
	if _, err := p.Up(ctx); err != nil {
		t.Fatal(err)
	}
	keys := func(q string) []string {
		t.Helper()
		rows, err := db.QueryContext(ctx, q)
		if err != nil {
			t.Fatal(err)
		}
		defer rows.Close()
		var out []string
		for rows.Next() {
			var a, b string
			if err := rows.Scan(&a, &b); err != nil {
				t.Fatal(err)
			}
			out = append(out, a+"|"+b)
		}
		if err := rows.Err(); err != nil {
			t.Fatal(err)
		}
		slices.Sort(out)
		return out
	}
	wantBuckets := []string{"plain|", "zones|=", "zones|==x", "zones|=hillside", "zones|=x", "zones|=~null", "zones|~null"}
	if got := keys(`SELECT watch, segment FROM plumb_buckets`); !slices.Equal(got, wantBuckets) {
		t.Errorf("buckets %q, want %q", got, wantBuckets)
	}
	// The moments travelled with their keys.
	var m []byte
	if err := db.QueryRowContext(ctx, ph(`SELECT moments FROM plumb_buckets WHERE watch = 'zones' AND segment = ?`), "~null").Scan(&m); err != nil || string(m) != "m:(null)" {
		t.Errorf("NULL bucket moments %q, %v", m, err)
	}
	want := []string{"zones|", "zones|==x", "zones|=hillside", "zones|=x", "zones|~null"}
	for _, table := range []string{"plumb_points", "plumb_point_columns", "plumb_watch_state", "plumb_alerts"} {
		if got := keys(`SELECT watch, segment FROM ` + table); !slices.Equal(got, want) {
			t.Errorf("%s: %q, want %q", table, got, want)
		}
	}
	if got := keys(`SELECT id, segment FROM plumb_alerts WHERE id = 'id-(null)'`); !slices.Equal(got, []string{"id-(null)|~null"}) {
		t.Errorf("alert of NULL: %q", got)
	}
}
