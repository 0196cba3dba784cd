package sqlite_test

import (
	"context"
	"crypto/sha256"
	"database/sql"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"plumb/connectors"
	"plumb/connectors/internal/demand"
)

// A --query that would create a file (ATTACH, VACUUM INTO) or write is
// refused before it runs, and no file appears; the source keeps working.
func TestQueryCannotCreateFiles(t *testing.T) {
	path, rows, _ := newDB(t, 40)
	dir := t.TempDir()
	src := open(t, path, connectors.Options{})
	ctx := context.Background()
	for i, q := range []string{
		"attach database '%s' as x",
		"ATTACH '%s' AS x",
		"/* a comment */ attach database '%s' as x",
		"vacuum into '%s'",
		"VACUUM main INTO '%s'",
		"-- line\nvacuum into '%s';",
		"select 1 from district_daily; attach database '%s' as x",
		"pragma query_only = 0 -- %s",
		"with a as (select 1) insert into district_daily (day) select '%s' from a",
		"reindex -- %s",
		"create temp table t (a) -- %s",
	} {
		target := filepath.Join(dir, "made"+string(rune('a'+i))+".db")
		q := strings.Replace(q, "%s", target, 1)
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
			if _, serr := os.Stat(target); serr == nil {
				t.Errorf("%s %q created %s", op, q, target)
			}
		}
	}
	// Reads still work on the same pool: the check leaves no policy behind.
	whole, err := src.Scan(ctx, connectors.Request{Table: "district_daily", Columns: []string{"temperature", "rainfall"}})
	if err != nil {
		t.Fatal(err)
	}
	want := whole.Groups[0].Moments.N()
	if want < int64(len(rows))/2 {
		t.Fatalf("table scan: %d of %d rows", want, len(rows))
	}
	for _, q := range []string{
		"SELECT temperature, rainfall FROM district_daily",
		"/* lead */ WITH d AS (SELECT temperature, rainfall FROM district_daily) SELECT * FROM d",
		"select temperature, rainfall, (select count(*) from pragma_table_info('district_daily')) AS k from district_daily",
	} {
		res, err := src.Scan(ctx, connectors.Request{Query: q, Columns: []string{"temperature", "rainfall"}})
		if err != nil {
			t.Fatalf("%q: %v", q, err)
		}
		if n := res.Groups[0].Moments.N(); n != want {
			t.Errorf("%q: %v rows, want %d", q, n, want)
		}
	}
}

// FuzzQuery: whatever --query text comes, describing and scanning it
// leaves the database's folder as it was: no file made, none changed.
// Seeds live in testdata/fuzz/FuzzQuery; "DIR" in a seed stands for that
// folder.
func FuzzQuery(f *testing.F) {
	f.Add("SELECT temperature, rainfall FROM district_daily")
	dir := f.TempDir()
	path := filepath.Join(dir, "demand.db")
	w, err := sql.Open("sqlite", path)
	if err != nil {
		f.Fatal(err)
	}
	if err := demand.CreateSQLite(w, "district_daily", demand.Generate(30, 7)); err != nil {
		f.Fatal(err)
	}
	w.Close()
	src, err := connectors.Open(context.Background(), "sqlite:"+path, connectors.Options{})
	if err != nil {
		f.Fatal(err)
	}
	defer src.Close()
	before := folderState(f, dir)
	f.Fuzz(func(t *testing.T, q string) {
		q = strings.ReplaceAll(q, "DIR", dir)
		ctx := context.Background()
		src.Describe(ctx, connectors.Request{Query: q})
		src.Scan(ctx, connectors.Request{Query: q})
		if after := folderState(t, dir); after != before {
			t.Fatalf("%q changed the folder:\n%s\n→\n%s", q, before, after)
		}
	})
}

// folderState lists a folder's files with a hash of each.
func folderState(t testing.TB, dir string) string {
	t.Helper()
	es, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	var b strings.Builder
	for _, e := range es {
		data, err := os.ReadFile(filepath.Join(dir, e.Name()))
		if err != nil {
			t.Fatal(err)
		}
		fmt.Fprintf(&b, "%s %x\n", e.Name(), sha256.Sum256(data))
	}
	return b.String()
}
