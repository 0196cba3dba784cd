package migrations

import (
	"context"
	"database/sql"
	"errors"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	_ "modernc.org/sqlite"
)

func openSQLite(t *testing.T) *sql.DB {
	t.Helper()
	path := filepath.Join(t.TempDir(), "state.db")
	db, err := sql.Open("sqlite", "file:"+path+"?_pragma=busy_timeout(5000)&_pragma=foreign_keys(1)")
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { db.Close() })
	return db
}

func TestVariantsHaveTheSameVersions(t *testing.T) {
	names := func(d Dialect) []string {
		vs, err := filesOf(d)
		if err != nil {
			t.Fatal(err)
		}
		return vs
	}
	s, p := names(SQLite), names(Postgres)
	if !slices.Equal(s, p) || len(s) == 0 {
		t.Fatalf("sqlite migrations %v, postgres %v: want the same files", s, p)
	}
	if Latest(SQLite) != Latest(Postgres) || Latest(SQLite) < 1 {
		t.Fatalf("latest: sqlite %d, postgres %d", Latest(SQLite), Latest(Postgres))
	}
}

func TestUpSQLite(t *testing.T) {
	ctx := context.Background()
	db := openSQLite(t)
	testUp(t, ctx, SQLite, db)
}

// testUp migrates an empty store, checks the tables, migrates again (a
// no-op), then makes the store look newer than the binary and checks that
// it is refused.
func testUp(t *testing.T, ctx context.Context, d Dialect, db *sql.DB) {
	t.Helper()
	if err := Check(ctx, d, db); err == nil || !strings.Contains(err.Error(), "plumb migrate") {
		t.Fatalf("Check on an empty store: %v; want a hint to run plumb migrate", err)
	}
	applied, err := Up(ctx, d, db, nil)
	if err != nil {
		t.Fatal(err)
	}
	files, err := filesOf(d)
	if err != nil {
		t.Fatal(err)
	}
	if len(applied) != len(files) || applied[len(applied)-1] != Latest(d) {
		t.Fatalf("applied %v, want %d versions up to %d", applied, len(files), Latest(d))
	}
	for _, table := range []string{"plumb_runs", "plumb_points", "plumb_point_columns", "plumb_buckets",
		"plumb_alerts", "plumb_outbox", "plumb_watch_state", "plumb_lock"} {
		var n int
		if err := db.QueryRowContext(ctx, "SELECT count(*) FROM "+table).Scan(&n); err != nil {
			t.Errorf("table %s: %v", table, err)
		}
	}
	if err := Check(ctx, d, db); err != nil {
		t.Fatalf("Check after Up: %v", err)
	}
	again, err := Up(ctx, d, db, nil)
	if err != nil || len(again) != 0 {
		t.Fatalf("second Up applied %v, %v; want nothing", again, err)
	}
	// A newer plumb migrated this store.
	newer := Latest(d) + 1
	q := "INSERT INTO " + VersionTable + " (version_id, is_applied) VALUES (?, ?)"
	if d == Postgres {
		q = "INSERT INTO " + VersionTable + " (version_id, is_applied) VALUES ($1, $2)"
	}
	if _, err := db.ExecContext(ctx, q, newer, true); err != nil {
		t.Fatal(err)
	}
	_, err = Up(ctx, d, db, nil)
	var tooNew *ErrStoreNewer
	if !errors.As(err, &tooNew) || tooNew.Store != newer || tooNew.Binary != Latest(d) {
		t.Fatalf("Up on a newer store: %v; want ErrStoreNewer", err)
	}
	if !strings.Contains(err.Error(), "newer plumb") {
		t.Errorf("message %q does not say what happened", err)
	}
	if err := Check(ctx, d, db); !errors.As(err, &tooNew) {
		t.Fatalf("Check on a newer store: %v", err)
	}
}

// TestAlertCausesKeepsOutbox checks that migration 2, which rebuilds the
// SQLite alerts table, keeps the alerts and their outbox entries (the
// rebuild would otherwise cascade the outbox away) and dates old alerts
// at their opening.
func TestAlertCausesKeepsOutbox(t *testing.T) {
	ctx := context.Background()
	db := openSQLite(t)
	p, err := NewProvider(SQLite, db, nil)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := p.UpTo(ctx, 1); err != nil {
		t.Fatal(err)
	}
	for _, q := range []string{
		`INSERT INTO plumb_alerts (id, watch, segment, rule, subject, severity, as_of, opened_at, updated_as_of, updated_at,
			message, detail, notify_state) VALUES ('a1', 'district_daily', '', 'exact', 'x+y', 'critical', 1000, 2000, 1000, 2000, 'm', '{}', 'sent')`,
		`INSERT INTO plumb_outbox (event_id, alert_id, notifier, event, body, created_at, next_attempt_at)
			VALUES ('a1:opened:hook', 'a1', 'hook', 'opened', '{}', 2000, 2000)`,
	} {
		if _, err := db.ExecContext(ctx, q); err != nil {
			t.Fatal(err)
		}
	}
	if _, err := p.UpTo(ctx, 2); err != nil {
		t.Fatal(err)
	}
	var n int
	var onset int64
	var cols string
	if err := db.QueryRowContext(ctx, `SELECT count(*) FROM plumb_outbox WHERE alert_id = 'a1'`).Scan(&n); err != nil || n != 1 {
		t.Fatalf("outbox entries after the migration: %d, %v; want 1", n, err)
	}
	if err := db.QueryRowContext(ctx, `SELECT onset, columns FROM plumb_alerts WHERE id = 'a1'`).Scan(&onset, &cols); err != nil || onset != 1000 || cols != "[]" {
		t.Fatalf("alert after the migration: onset %d columns %q, %v", onset, cols, err)
	}
	if _, err := db.ExecContext(ctx, `INSERT INTO plumb_alerts (id, watch, segment, rule, subject, severity, as_of, opened_at, updated_as_of, updated_at,
			message, detail, notify_state) VALUES ('a2', 'district_daily', '', 'broken', 'x+y', 'warning', 1000, 2000, 1000, 2000, 'm', '{}', 'sent')`); err != nil {
		t.Fatalf("rule broken refused: %v", err)
	}
	// The outbox still cascades from the rebuilt table.
	if _, err := db.ExecContext(ctx, `DELETE FROM plumb_alerts WHERE id = 'a1'`); err != nil {
		t.Fatal(err)
	}
	if err := db.QueryRowContext(ctx, `SELECT count(*) FROM plumb_outbox`).Scan(&n); err != nil || n != 0 {
		t.Fatalf("outbox after deleting its alert: %d, %v", n, err)
	}
}

// testAcknowledgements migrates to version 1, writes an alert and a
// delivery, migrates to 3 (acknowledgement columns, the outbox rebuilt on
// SQLite to learn the snooze_ended event) and back: the delivery survives
// both ways.
func testAcknowledgements(t *testing.T, ctx context.Context, d Dialect, db *sql.DB) {
	t.Helper()
	p, err := NewProvider(d, db, nil)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := p.UpTo(ctx, 1); err != nil {
		t.Fatal(err)
	}
	q := func(s string) string {
		if d != Postgres {
			return s
		}
		for i := 1; strings.Contains(s, "?"); i++ {
			s = strings.Replace(s, "?", "$"+string(rune('0'+i)), 1)
		}
		return s
	}
	exec := func(s string, args ...any) error {
		_, err := db.ExecContext(ctx, q(s), args...)
		return err
	}
	if err := exec(`INSERT INTO plumb_alerts (id, watch, segment, rule, subject, severity, as_of, opened_at, updated_as_of,
		updated_at, message, detail, notify_state) VALUES ('a1', 'district_daily', '', 'exact', 's', 'critical', 1, 2, 1, 2, 'm', '{}', 'sent')`); err != nil {
		t.Fatal(err)
	}
	if err := exec(`INSERT INTO plumb_outbox (event_id, alert_id, notifier, event, body, created_at, next_attempt_at)
		VALUES ('a1:opened:oncall', 'a1', 'oncall', 'opened', '{}', 5, 5)`); err != nil {
		t.Fatal(err)
	}
	if _, err := p.UpTo(ctx, 3); err != nil {
		t.Fatal(err)
	}
	var n int
	if err := db.QueryRowContext(ctx, `SELECT count(*) FROM plumb_outbox WHERE event_id = 'a1:opened:oncall' AND delivered_at IS NULL`).Scan(&n); err != nil || n != 1 {
		t.Fatalf("the delivery did not survive the migration: %d, %v", n, err)
	}
	if err := exec(`UPDATE plumb_alerts SET ack_by = ?, ack_at = ?, ack_severity = 'critical' WHERE id = 'a1'`, "hydro-analyst", 7); err != nil {
		t.Fatal(err)
	}
	if err := exec(`INSERT INTO plumb_outbox (event_id, alert_id, notifier, event, body, created_at, next_attempt_at)
		VALUES ('a1:snooze_ended:9:oncall', 'a1', 'oncall', 'snooze_ended', '{}', 9, 9)`); err != nil {
		t.Fatalf("snooze_ended refused after the migration: %v", err)
	}
	if err := exec(`INSERT INTO plumb_outbox (event_id, alert_id, notifier, event, body, created_at, next_attempt_at)
		VALUES ('a1:ignored:oncall', 'a1', 'oncall', 'ignored', '{}', 9, 9)`); err == nil {
		t.Fatal("an unknown event was accepted")
	}
	if _, err := p.DownTo(ctx, 1); err != nil {
		t.Fatal(err)
	}
	if err := db.QueryRowContext(ctx, `SELECT count(*) FROM plumb_outbox`).Scan(&n); err != nil || n != 1 {
		t.Fatalf("after down: %d deliveries, %v; want the opening only", n, err)
	}
	if err := exec(`UPDATE plumb_alerts SET ack_by = 'x' WHERE id = 'a1'`); err == nil {
		t.Fatal("ack columns still there after down")
	}
}

func TestAcknowledgementsSQLite(t *testing.T) {
	testAcknowledgements(t, context.Background(), SQLite, openSQLite(t))
}
