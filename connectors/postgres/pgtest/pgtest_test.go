package pgtest_test

import (
	"context"
	"os"
	"testing"

	"github.com/jackc/pgx/v5"

	"plumb/connectors/postgres/pgtest"
)

func TestMain(m *testing.M) { os.Exit(pgtest.Main(m)) }

func TestFreshDatabases(t *testing.T) {
	ctx := context.Background()
	a, b := pgtest.Start(t), pgtest.Start(t)
	if a == b {
		t.Fatal("two Start calls gave the same database")
	}
	conn, err := pgx.Connect(ctx, a)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	if _, err := conn.Exec(ctx, "CREATE TABLE district_daily (temperature float8)"); err != nil {
		t.Fatal(err)
	}
	var user string
	if err := conn.QueryRow(ctx, "SELECT current_user").Scan(&user); err != nil || user != "postgres" {
		t.Fatalf("current_user %q, %v", user, err)
	}
	other, err := pgx.Connect(ctx, b)
	if err != nil {
		t.Fatal(err)
	}
	defer other.Close(ctx)
	var n int
	if err := other.QueryRow(ctx, "SELECT count(*) FROM pg_tables WHERE tablename = 'district_daily'").Scan(&n); err != nil || n != 0 {
		t.Fatalf("second database sees %d tables named district_daily, %v", n, err)
	}
}
