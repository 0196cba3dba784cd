package postgres

import (
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"slices"
	"strings"
	"testing"

	"github.com/jackc/pgx/v5"

	"plumb/connectors"
	"plumb/connectors/internal/demand"
	"plumb/connectors/postgres/pgtest"
)

// dummySQL selects district as hand-built 0/1 columns named as the
// factor's indicators, between temperature and rainfall.
func dummySQL(table, extra string) string {
	var b strings.Builder
	b.WriteString("SELECT " + extra + "temperature")
	for _, d := range demand.Districts {
		fmt.Fprintf(&b, `, (district = '%s')::int::float8 AS "district[%s]"`, d, d)
	}
	b.WriteString(", rainfall FROM " + table)
	return b.String()
}

// TestFactorEqualsDummies: a text column named in Columns equals a scan of
// hand-built 0/1 columns (to 1e-12: the levels' arrival and the
// partitions move block boundaries), in both wire formats, per month and
// district, and in partitioned scans whose ranges see different levels
// (the table is clustered by district, so each TID range holds one or two).
func TestFactorEqualsDummies(t *testing.T) {
	u := loadDemand(t, demand.Generate(4001, 3))
	pgtest.Exec(t, u, `CREATE TABLE clustered AS SELECT * FROM district_daily ORDER BY district, day`, `ANALYZE clustered`)
	wantCols := []string{"temperature", "district[harbour]", "district[hillside]", "district[north]", "district[riverside]", "rainfall"}
	modes := []struct {
		name string
		opts connectors.Options
		set  func(*Source)
	}{
		{"copy", connectors.Options{}, func(s *Source) { s.mode = readCopy }},
		{"rows", connectors.Options{}, func(s *Source) { s.mode = readRows }},
		{"parallel 3", connectors.Options{Parallel: 3}, func(*Source) {}},
	}
	ctx := context.Background()
	plain := openPG(t, u, connectors.Options{})
	for _, m := range modes {
		src := openPG(t, u, m.opts)
		m.set(src)
		for _, keyed := range []bool{false, true} {
			req := connectors.Request{Table: "clustered", Columns: []string{"temperature", "district", "rainfall"}}
			dreq := connectors.Request{Query: dummySQL("clustered", ""), Columns: wantCols}
			if keyed {
				req.TimeColumn, req.Bucket, req.Segment = "day", "month", "district"
				dreq = connectors.Request{Query: dummySQL("clustered", "day, district, "), Columns: wantCols,
					TimeColumn: "day", Bucket: "month", Segment: "district"}
			}
			what := fmt.Sprintf("%s keyed %v", m.name, keyed)
			got, err := src.Scan(ctx, req)
			if err != nil {
				t.Fatal(err)
			}
			want, err := plain.Scan(ctx, dreq)
			if err != nil {
				t.Fatal(err)
			}
			if !slices.Equal(got.Columns, wantCols) || len(got.Factors) != 1 || !slices.Equal(got.Factors[0].Levels, demand.Districts) {
				t.Fatalf("%s: columns %v factors %+v", what, got.Columns, got.Factors)
			}
			if m.opts.Parallel > 1 && got.Partitions != 3 {
				t.Errorf("%s: %d partitions", what, got.Partitions)
			}
			for _, g := range got.Groups {
				if !slices.Equal(g.Moments.Names(), wantCols) {
					t.Fatalf("%s: group %v over %v", what, g.Key, g.Moments.Names())
				}
			}
			demand.SameResult(t, what, want, got, 1e-12)
		}
	}
}

// TestFactorTypes: enum (levels in byte order, not the enum's order),
// varchar, char(n), boolean and a --query's text columns, with NULLs
// counted per factor; the indicator means are the levels' shares of the
// rows used, counted by PostgreSQL itself.
func TestFactorTypes(t *testing.T) {
	u := pgtestStart(t)
	pgtest.Exec(t, u,
		`CREATE TYPE supply_source AS ENUM ('river', 'borehole', 'reservoir')`,
		`CREATE TABLE intake (flow float8, source supply_source, band varchar(20), day_type char(8), pump_on boolean)`,
		`INSERT INTO intake SELECT 100 + (i * 37 % 101), CASE WHEN i % 23 = 5 THEN NULL
				ELSE (ARRAY['river', 'borehole', 'reservoir'])[1 + (i * 7 / 5) % 3]::supply_source END,
			(ARRAY['standard', 'off_peak', 'business'])[1 + i % 3],
			CASE WHEN i % 7 < 5 THEN 'weekday' ELSE 'weekend' END,
			CASE WHEN i % 31 = 2 THEN NULL ELSE i % 4 = 0 END
		FROM generate_series(1, 700) AS i`,
	)
	ctx := context.Background()
	var used, srcNull, pumpNull int64
	var want []float64
	conn := pgConn(t, u)
	err := conn.QueryRow(ctx, `SELECT count(*) FILTER (WHERE source IS NOT NULL AND pump_on IS NOT NULL),
			count(*) FILTER (WHERE source IS NULL), count(*) FILTER (WHERE source IS NOT NULL AND pump_on IS NULL)
		FROM intake`).Scan(&used, &srcNull, &pumpNull)
	if err != nil {
		t.Fatal(err)
	}
	if err := conn.QueryRow(ctx, `SELECT ARRAY[avg((source = 'borehole')::int), avg((source = 'reservoir')::int), avg((source = 'river')::int),
			avg((band = 'business')::int), avg((band = 'off_peak')::int), avg((band = 'standard')::int),
			avg((day_type = 'weekday')::int), avg((day_type = 'weekend')::int),
			avg((NOT pump_on)::int), avg(pump_on::int)]::float8[]
		FROM intake WHERE source IS NOT NULL AND pump_on IS NOT NULL`).Scan(&want); err != nil {
		t.Fatal(err)
	}
	cols := []string{"flow", "source", "band", "day_type", "pump_on"}
	wantCols := []string{"flow", "source[borehole]", "source[reservoir]", "source[river]",
		"band[business]", "band[off_peak]", "band[standard]", "day_type[weekday]", "day_type[weekend]", "pump_on[false]", "pump_on[true]"}
	for _, req := range []connectors.Request{
		{Table: "intake", Columns: cols},
		{Query: "SELECT flow, source, band, day_type, pump_on FROM intake", Columns: cols},
	} {
		for _, opts := range []connectors.Options{{}, {Parallel: 2}} {
			if req.Query != "" && opts.Parallel > 1 {
				continue
			}
			res, err := openPG(t, u, opts).Scan(ctx, req)
			if err != nil {
				t.Fatal(err)
			}
			what := fmt.Sprintf("query %v parallel %d", req.Query != "", opts.Parallel)
			if !slices.Equal(res.Columns, wantCols) {
				t.Fatalf("%s: columns %v, want %v", what, res.Columns, wantCols)
			}
			if res.Factors[0].Null != srcNull || res.Factors[3].Null != pumpNull || res.Factors[1].Null != 0 {
				t.Errorf("%s: factors %+v, want NULL counts %d and %d", what, res.Factors, srcNull, pumpNull)
			}
			m := res.Merged().Moments
			if m.N() != used || m.Counts().Dropped != srcNull+pumpNull {
				t.Errorf("%s: used %d dropped %d, want %d %d", what, m.N(), m.Counts().Dropped, used, srcNull+pumpNull)
			}
			for j := 1; j < len(wantCols); j++ {
				// avg of 0/1 in numeric, rounded to float8: the same
				// share to rounding.
				if math.Abs(m.Mean(j)-want[j-1]) > 1e-15 {
					t.Errorf("%s: mean of %s = %v, want %v", what, wantCols[j], m.Mean(j), want[j-1])
				}
			}
		}
	}
	// The enum cannot be the target; the limit on levels names the column.
	src := openPG(t, u, connectors.Options{})
	desc, err := src.Describe(ctx, connectors.Request{Table: "intake"})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := connectors.Choose("table intake", desc, connectors.Request{Table: "intake"}, "source"); !errors.Is(err, connectors.ErrColumnType) ||
		!strings.Contains(err.Error(), "must be numeric") {
		t.Errorf("enum target: %v", err)
	}
	if _, err := src.Scan(ctx, connectors.Request{Table: "intake", Columns: []string{"flow", "band"}, MaxLevels: 2}); !errors.Is(err, connectors.ErrTooManyLevels) ||
		!strings.Contains(err.Error(), `"band"`) || !strings.Contains(err.Error(), "3 levels had been seen") {
		t.Errorf("limit: %v", err)
	}
}

// BenchmarkDecodeFactors decodes binary rows with two text factors and a
// boolean into the accumulators, against the same rows with their nine
// indicator columns built by hand as float8 (the floor, measured in the
// same run: the factors' cost is the dictionary lookups and the staging
// copy); neither may allocate per row.
func BenchmarkDecodeFactors(b *testing.B) {
	cols := []connectors.Column{{Name: "temperature", Type: "float8", Kind: connectors.KindNumeric},
		{Name: "district", Type: "text", Kind: connectors.KindText}, {Name: "tariff_band", Type: "text", Kind: connectors.KindText},
		{Name: "pump_on", Type: "boolean", Kind: connectors.KindBool}}
	num := []connectors.Column{cols[0]}
	for k := range 9 {
		num = append(num, connectors.Column{Name: fmt.Sprint("indicator_", k), Kind: connectors.KindNumeric})
	}
	f8 := func(v float64) []byte { return binary.BigEndian.AppendUint64(nil, math.Float64bits(v)) }
	const n = 4096
	rows := map[bool][][][]byte{}
	for i := range n {
		rows[true] = append(rows[true], [][]byte{f8(float64(i % 17)), []byte(demand.Districts[i%4]),
			[]byte([]string{"standard", "off_peak", "business"}[i%3]), []byte([]string{"false", "true"}[i%2])})
		r := [][]byte{f8(float64(i % 17))}
		for k := range 9 {
			v := 0.0
			if k == i%4 || k == 4+i%3 || k == 7+i%2 {
				v = 1
			}
			r = append(r, f8(v))
		}
		rows[false] = append(rows[false], r)
	}
	var floor float64
	for _, factors := range []bool{false, true} {
		name := "float8-indicators"
		c := num
		if factors {
			name, c = "factors", cols
		}
		b.Run(name, func(b *testing.B) {
			var names []string
			for _, x := range c {
				names = append(names, x.Name)
			}
			plan, err := connectors.Resolve("bench", c, connectors.Request{Columns: names})
			if err != nil {
				b.Fatal(err)
			}
			t := &target{base: map[string]uint32{}}
			for _, x := range c {
				t.base[x.Name] = oidFloat8
			}
			_, lay, err := streamList(t, plan)
			if err != nil {
				b.Fatal(err)
			}
			d := newDecoder("bench", plan, lay, false)
			for _, r := range rows[factors] { // every level seen
				if err := d.row(r); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportAllocs()
			b.ResetTimer()
			for i := 0; b.Loop(); i++ {
				if err := d.row(rows[factors][i%n]); err != nil {
					b.Fatal(err)
				}
			}
			d.g.Groups()
			ns := float64(b.Elapsed().Nanoseconds()) / float64(b.N)
			if !factors {
				floor = ns
			} else if floor > 0 {
				b.ReportMetric(ns/floor, "x-indicators")
			}
		})
	}
}

func pgConn(t *testing.T, url string) *pgx.Conn {
	t.Helper()
	ctx := context.Background()
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { conn.Close(ctx) })
	return conn
}
