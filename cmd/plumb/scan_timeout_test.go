package main

import (
	"strings"
	"testing"

	"plumb/connectors/postgres/pgtest"
)

// TestScanStatementTimeout: --statement-timeout reaches PostgreSQL's
// statement_timeout; a query slower than it fails with one line naming the
// timeout, and the same query within it succeeds.
func TestScanStatementTimeout(t *testing.T) {
	srv := pgtest.NewServer(t)
	u := srv.NewDatabase(t)
	pgtest.Exec(t, u, `CREATE TABLE district_daily AS
		SELECT 12 + sin(i) * 6 AS temperature_c, (i % 7) * 0.8 AS rainfall_mm, 3.2 + cos(i * 0.3) * 0.2 AS pressure_bar
		FROM generate_series(1, 50) AS i`)
	// pg_sleep(0.5) once per scan: the streaming statement takes at least
	// half a second.
	slow := "SELECT temperature_c, rainfall_mm, pressure_bar FROM district_daily, (SELECT pg_sleep(0.5)) AS pause"
	code, out, errs := runCLI(t, "scan", "--quiet", "--db", u, "--query", slow, "--statement-timeout", "100ms")
	if code != exitError || out != "" {
		t.Fatalf("exit %d with stdout %q, want %d and none; stderr: %s", code, out, exitError, errs)
	}
	first, _, _ := strings.Cut(strings.TrimSpace(errs), "\n")
	for _, w := range []string{"statement_timeout is 100ms", "cancel"} {
		if !strings.Contains(first, w) {
			t.Errorf("error %q lacks %q", first, w)
		}
	}
	if strings.Contains(errs, srv.Password) {
		t.Error("the password is in the error")
	}
	code, out, errs = runCLI(t, "scan", "--quiet", "--db", u, "--query", slow, "--statement-timeout", "30s")
	if code != 0 || !strings.Contains(out, "temperature_c") {
		t.Fatalf("within the timeout: exit %d, stderr: %s", code, errs)
	}
	code, _, errs = runCLI(t, "scan", "--db", u, "--table", "district_daily", "--statement-timeout", "-1s")
	if code != exitUsage || !strings.Contains(errs, "--statement-timeout") {
		t.Errorf("negative timeout: exit %d, stderr %q; want a usage error", code, errs)
	}
}
