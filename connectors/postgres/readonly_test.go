package postgres

import (
	"context"
	"errors"
	"os"
	"path/filepath"
	"testing"

	"plumb/connectors"
	"plumb/connectors/internal/demand"
)

// A --query is one SELECT (or WITH, VALUES): a second statement or a
// statement that reads nothing into plumb is refused before it is sent.
// COPY … TO a file passes a READ ONLY transaction, so the old way of
// running result-less statements "to let the database refuse them" wrote
// a file on the server.
func TestQueryOnlySelects(t *testing.T) {
	u := loadDemand(t, demand.Generate(40, 5))
	// A folder the server (running as postgres) can write to.
	dir, err := os.MkdirTemp("", "plumb-copy-")
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { os.RemoveAll(dir) })
	if err := os.Chmod(dir, 0o777); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(dir, "copied.csv")
	ctx := context.Background()
	src := openPG(t, u, connectors.Options{})
	for _, q := range []string{
		"COPY (SELECT temperature FROM district_daily) TO '" + out + "'",
		"/* c */ copy district_daily to '" + out + "'",
		"SELECT temperature FROM district_daily; COPY district_daily TO '" + out + "'",
		"SELECT 1; SELECT 2",
		"DO $$ BEGIN PERFORM 1; END $$",
		"SET statement_timeout = 0",
		"EXPLAIN ANALYZE SELECT 1",
		"NOTIFY plumb",
	} {
		for _, op := range []string{"describe", "scan"} {
			var err error
			if op == "describe" {
				_, err = src.Describe(ctx, connectors.Request{Query: q})
			} else {
				_, err = src.Scan(ctx, connectors.Request{Query: q})
			}
			if !errors.Is(err, connectors.ErrFragment) {
				t.Errorf("%s %q: err = %v, want a refusal (ErrFragment)", op, q, err)
			}
		}
		if _, err := os.Stat(out); err == nil {
			t.Fatalf("%q wrote %s", q, out)
		}
	}
	for _, q := range []string{
		"SELECT temperature, rainfall FROM district_daily",
		"(SELECT temperature, rainfall FROM district_daily)",
		"WITH d AS (SELECT temperature, rainfall FROM district_daily) SELECT * FROM d;",
	} {
		if _, err := src.Scan(ctx, connectors.Request{Query: q}); err != nil {
			t.Errorf("%q: %v", q, err)
		}
	}
}
