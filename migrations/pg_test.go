package migrations

import (
	"context"
	"database/sql"
	"os"
	"testing"

	_ "github.com/jackc/pgx/v5/stdlib"

	"plumb/connectors/postgres/pgtest"
)

func TestMain(m *testing.M) { os.Exit(pgtest.Main(m)) }

func TestUpPostgres(t *testing.T) {
	url := pgtest.Start(t)
	db, err := sql.Open("pgx", url)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	testUp(t, context.Background(), Postgres, db)
}

func TestAcknowledgementsPostgres(t *testing.T) {
	url := pgtest.Start(t)
	db, err := sql.Open("pgx", url)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	testAcknowledgements(t, context.Background(), Postgres, db)
}

func TestSegmentKeysPostgres(t *testing.T) {
	url := pgtest.Start(t)
	db, err := sql.Open("pgx", url)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	testSegmentKeys(t, context.Background(), Postgres, db)
}
