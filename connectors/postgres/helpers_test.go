package postgres

import (
	"context"
	"os"
	"testing"

	"github.com/jackc/pgx/v5"

	"plumb/connectors"
	"plumb/connectors/internal/demand"
	"plumb/connectors/postgres/pgtest"
)

func TestMain(m *testing.M) { os.Exit(pgtest.Main(m)) }

// loadDemand starts a fresh database with the scenario table
// district_daily holding rows, and returns its URL.
func loadDemand(t testing.TB, rows []demand.Row) string {
	t.Helper()
	url := pgtest.Start(t)
	ctx := context.Background()
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	if _, err := conn.Exec(ctx, demand.PostgresDDL("district_daily")); err != nil {
		t.Fatal(err)
	}
	if _, err := conn.CopyFrom(ctx, pgx.Identifier{"district_daily"}, demand.CopyColumns(), pgx.CopyFromRows(demand.CopyRows(rows))); err != nil {
		t.Fatal(err)
	}
	if _, err := conn.Exec(ctx, "ANALYZE district_daily"); err != nil {
		t.Fatal(err)
	}
	return url
}

func pgtestStart(t testing.TB) string { return pgtest.Start(t) }

func openPG(t testing.TB, url string, opts connectors.Options) *Source {
	t.Helper()
	src, err := Open(context.Background(), url, opts)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { src.Close() })
	return src.(*Source)
}

// scanBoth scans req by streaming and by pushdown, failing on either
// error.
func scanBoth(t testing.TB, stream, push *Source, req connectors.Request) (want, got *connectors.Result) {
	t.Helper()
	ctx := context.Background()
	want, err := stream.Scan(ctx, req)
	if err != nil {
		t.Fatal(err)
	}
	if got, err = push.Scan(ctx, req); err != nil {
		t.Fatal(err)
	}
	return want, got
}
