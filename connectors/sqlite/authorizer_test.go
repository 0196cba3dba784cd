package sqlite

import (
	"context"
	"database/sql"
	"errors"
	"os"
	"path/filepath"
	"testing"

	"plumb/connectors"
)

// The statement check on its own, behind the keyword gate of CleanQuery:
// SQLite compiles the statement under the authorizer and nothing runs.
func TestCheckReadOnly(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "d.db")
	w, err := sql.Open("sqlite", path)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := w.Exec("CREATE TABLE t (a REAL, b REAL)"); err != nil {
		t.Fatal(err)
	}
	w.Close()
	src, err := Open(context.Background(), "sqlite:"+path, connectors.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer src.Close()
	s := src.(*Source)
	ctx := context.Background()
	other := filepath.Join(dir, "other.db")
	for _, q := range []string{
		"attach database '" + other + "' as x",
		"detach main",
		"pragma query_only = 0",
		"pragma user_version",
		"insert into t values (1, 2)",
		"with a as (select 1, 2) insert into t select * from a",
		"update t set a = 0",
		"delete from t",
		"create temp table z (a)",
		"drop table t",
		"begin",
		"savepoint s",
		"analyze",
		"select load_extension('x')",
	} {
		if err := s.checkReadOnly(ctx, q); !errors.Is(err, connectors.ErrFragment) {
			t.Errorf("%q passed the check", q)
		}
	}
	if _, err := os.Stat(other); err == nil {
		t.Errorf("the check ran the ATTACH")
	}
	for _, q := range []string{
		"select a, b from t",
		"with recursive c(x) as (select 1 union all select x + 1 from c where x < 5) select x from c",
		"select a, abs(b), (select count(*) from pragma_table_info('t')) from t",
		"values (1, 2)",
	} {
		if err := s.checkReadOnly(ctx, q); err != nil {
			t.Errorf("%q: %v", q, err)
		}
	}
}
