package sqlite_test

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"

	"plumb/connectors"
	"plumb/connectors/internal/demand"
)

// dummyQuery selects the district as hand-built 0/1 columns, one per
// district, named as the factor's indicators, between temperature and
// rainfall.
func dummyQuery(extra string) string {
	var b strings.Builder
	b.WriteString("SELECT " + extra + "temperature")
	for _, d := range demand.Districts {
		fmt.Fprintf(&b, ", CAST(district = '%s' AS REAL) AS \"district[%s]\"", d, d)
	}
	b.WriteString(", rainfall FROM district_daily")
	return b.String()
}

// TestFactorEqualsDummies: a TEXT column named in Columns is accumulated as
// its indicator columns, and equals a scan of the same indicators built by
// hand in SQL (to 1e-12: the levels' arrival moves block boundaries), for
// the whole table and per month.
func TestFactorEqualsDummies(t *testing.T) {
	path, _, _ := newDB(t, 3001)
	src := open(t, path, connectors.Options{})
	ctx := context.Background()
	wantCols := []string{"temperature", "district[harbour]", "district[hillside]", "district[north]", "district[riverside]", "rainfall"}
	for _, month := range []bool{false, true} {
		req := connectors.Request{Table: "district_daily", Columns: []string{"temperature", "district", "rainfall"}}
		dreq := connectors.Request{Query: dummyQuery("")}
		if month {
			req.TimeColumn, req.Bucket = "day", "month"
			dreq = connectors.Request{Query: dummyQuery("day, "), TimeColumn: "day", Bucket: "month",
				Columns: wantCols}
		}
		got, err := src.Scan(ctx, req)
		if err != nil {
			t.Fatal(err)
		}
		want, err := src.Scan(ctx, dreq)
		if err != nil {
			t.Fatal(err)
		}
		if !slices.Equal(got.Columns, wantCols) || !slices.Equal(want.Columns, wantCols) {
			t.Fatalf("columns %v (dummies %v), want %v", got.Columns, want.Columns, wantCols)
		}
		if len(got.Factors) != 1 || got.Factors[0].Name != "district" || !slices.Equal(got.Factors[0].Levels, demand.Districts) {
			t.Fatalf("factors %+v", got.Factors)
		}
		if len(got.Inexact) != len(wantCols) {
			t.Errorf("inexact counts %v for %d columns", got.Inexact, len(wantCols))
		}
		demand.SameResult(t, fmt.Sprintf("month %v", month), want, got, 1e-12)
	}
}

// supplyDB writes a table whose supply source arrives in the order river,
// borehole, reservoir (not byte order), with NULLs, and a boolean.
func supplyDB(t *testing.T) (path string, n int, counts map[string]int, nulls, leakNulls int) {
	path, _, w := newDB(t, 4)
	mustExec(t, w, `CREATE TABLE supply (temperature REAL, supply_source TEXT, leak BOOLEAN)`)
	r := rand.New(rand.NewPCG(9, 9))
	counts = map[string]int{}
	n = 600
	for i := range n {
		src := []string{"river"}
		if i >= 100 {
			src = append(src, "borehole")
		}
		if i >= 400 {
			src = append(src, "reservoir")
		}
		var s, leak any = src[r.IntN(len(src))], int64(r.IntN(2))
		if i%29 == 7 {
			s = nil
			nulls++
		}
		if i%31 == 11 {
			leak = nil
			if s != nil {
				leakNulls++
			}
		}
		if s != nil && leak != nil {
			counts[s.(string)]++
			counts[fmt.Sprint("leak", leak)]++
		}
		mustExec(t, w, `INSERT INTO supply VALUES (?, ?, ?)`, 12+r.NormFloat64(), s, leak)
	}
	return path, n, counts, nulls, leakNulls
}

// TestFactorLevelsAndNulls: levels are listed in byte order whatever the
// order they came in; a NULL level drops the row and is counted per
// factor; the indicator means are the levels' shares of the rows used
// (exact counts, to rounding).
func TestFactorLevelsAndNulls(t *testing.T) {
	path, n, counts, nulls, leakNulls := supplyDB(t)
	src := open(t, path, connectors.Options{})
	res, err := src.Scan(context.Background(), connectors.Request{Table: "supply", Columns: []string{"supply_source", "temperature", "leak"}})
	if err != nil {
		t.Fatal(err)
	}
	want := []string{"supply_source[borehole]", "supply_source[reservoir]", "supply_source[river]", "temperature", "leak[false]", "leak[true]"}
	if !slices.Equal(res.Columns, want) {
		t.Fatalf("columns %v, want %v", res.Columns, want)
	}
	if len(res.Factors) != 2 || res.Factors[0].Null != int64(nulls) || res.Factors[1].Null != int64(leakNulls) ||
		!slices.Equal(res.Factors[1].Levels, []string{"false", "true"}) {
		t.Fatalf("factors %+v, want NULL counts %d and %d", res.Factors, nulls, leakNulls)
	}
	m := res.Merged().Moments
	used := n - nulls - leakNulls
	if m.N() != int64(used) || m.Counts().Dropped != int64(nulls+leakNulls) {
		t.Fatalf("used %d dropped %d, want %d %d", m.N(), m.Counts().Dropped, used, nulls+leakNulls)
	}
	if err := connectors.Check("table supply", res); err != nil {
		t.Fatal(err)
	}
	for j, key := range []string{"borehole", "reservoir", "river", "", "leak0", "leak1"} {
		if key == "" {
			continue
		}
		if got, w := m.Mean(j), float64(counts[key])/float64(used); math.Abs(got-w) > 1e-15 {
			t.Errorf("%s: mean %v, want %d/%d", want[j], got, counts[key], used)
		}
	}
	// The level limit stops a scan at the level that passes it.
	_, err = src.Scan(context.Background(), connectors.Request{Table: "supply", Columns: []string{"supply_source", "temperature"}, MaxLevels: 2})
	if !errors.Is(err, connectors.ErrTooManyLevels) || !strings.Contains(err.Error(), "3 levels had been seen") {
		t.Errorf("limit of 2 levels: %v", err)
	}
	// Left out, the text column is listed with its levels counted, the
	// count stopping one past the limit.
	for _, c := range []struct {
		max, levels int
		more        bool
	}{{0, 3, false}, {2, 3, true}} {
		res, err := src.Scan(context.Background(), connectors.Request{Table: "supply", MaxLevels: c.max})
		if err != nil {
			t.Fatal(err)
		}
		if len(res.Skipped) != 1 || res.Skipped[0].Name != "supply_source" || res.Skipped[0].Levels != c.levels || res.Skipped[0].LevelsMore != c.more {
			t.Errorf("max levels %d: skipped %+v, want supply_source with %d levels (more %v)", c.max, res.Skipped, c.levels, c.more)
		}
	}
	// A factor cannot be the target.
	cols, err := src.Describe(context.Background(), connectors.Request{Table: "supply"})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := connectors.Choose("table supply", cols, connectors.Request{Table: "supply"}, "supply_source"); !errors.Is(err, connectors.ErrColumnType) {
		t.Errorf("factor target: %v", err)
	}
}
