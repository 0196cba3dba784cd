// Package demand generates the project's scenario data for connector tests
// and benchmarks: a water utility's daily feature table per supply
// district, with an exact total, near-copies, a stuck sensor, a column with
// mean 1e9 and spread 1, and scattered NULLs. The same rows are loaded into
// SQLite and PostgreSQL and accumulated in memory, so that every path can
// be compared with every other.
package demand

import (
	"database/sql"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"time"

	"plumb/connectors"
)

// Columns are the numeric feature columns, in table order.
var Columns = []string{
	"temperature", "rainfall", "population_served", "residential_connections",
	"commercial_connections", "total_connections", "pipe_age", "pressure",
	"metered_volume", "billed_volume", "meter_reading",
}

// Integer reports whether column j holds whole numbers (stored as integers).
func Integer(j int) bool { return j >= 2 && j <= 5 }

// Row is one district-day. Null[j] marks a NULL in column j.
type Row struct {
	Day      time.Time // midnight UTC
	District string
	Values   []float64
	Null     []bool
}

// Districts are the supply districts.
var Districts = []string{"harbour", "hillside", "north", "riverside"}

// Generate returns n rows from a fixed seed: the districts take turns, one
// day after another from 2023-01-01.
func Generate(n int, seed uint64) []Row {
	r := rand.New(rand.NewPCG(seed, 0x77617465)) // "wate"
	start := time.Date(2023, 1, 1, 0, 0, 0, 0, time.UTC)
	rows := make([]Row, n)
	p := len(Columns)
	for i := range rows {
		d := i % len(Districts)
		day := start.AddDate(0, 0, i/len(Districts))
		doy := float64(day.YearDay())
		v := make([]float64, p)
		temp := 14 + 9*math.Sin(2*math.Pi*(doy-110)/365) + 2.5*r.NormFloat64()
		rain := math.Max(0, 6*r.ExpFloat64()-3)
		pop := math.Round(40000 + 9000*float64(d) + 5*float64(i/len(Districts)) + 300*r.NormFloat64())
		res := math.Round(pop/2.6 + 40*r.NormFloat64())
		com := math.Round(800 + 150*float64(d) + 30*r.NormFloat64())
		v[0] = math.Round(temp*10) / 10
		v[1] = math.Round(rain*10) / 10
		v[2] = pop
		v[3] = res
		v[4] = com
		v[5] = res + com // the exact total
		v[6] = 20 + 7*float64(d) + float64(i/len(Districts))/365 + 0.5*r.NormFloat64()
		if d == 2 {
			v[7] = 4.2 // the stuck pressure sensor
		} else {
			v[7] = 4 + 0.3*r.NormFloat64()
		}
		v[8] = 0.15*pop + 120*temp - 40*rain + 200*r.NormFloat64()
		v[9] = 0.97*v[8] + 15*r.NormFloat64() // billed tracks metered
		v[10] = 1e9 + r.NormFloat64()         // mean 1e9, spread 1
		null := make([]bool, p)
		if i%37 == 5 {
			null[1] = true // rain gauge gaps
		}
		if i%101 == 17 {
			null[7] = true
		}
		rows[i] = Row{Day: day, District: Districts[d], Values: v, Null: null}
	}
	return rows
}

// CreateSQLite creates the table district_daily in db (opened for writing)
// and inserts rows. day is stored as ISO text.
func CreateSQLite(db *sql.DB, table string, rows []Row) error {
	var cols []string
	for j, c := range Columns {
		t := "REAL"
		if Integer(j) {
			t = "INTEGER"
		}
		cols = append(cols, connectors.QuoteIdent(c)+" "+t)
	}
	q := connectors.QuoteIdent(table)
	if _, err := db.Exec("CREATE TABLE " + q + " (day DATE NOT NULL, district TEXT NOT NULL, " + strings.Join(cols, ", ") + ")"); err != nil {
		return err
	}
	tx, err := db.Begin()
	if err != nil {
		return err
	}
	defer tx.Rollback()
	ph := strings.Repeat(", ?", len(Columns))
	st, err := tx.Prepare("INSERT INTO " + q + " VALUES (?, ?" + ph + ")")
	if err != nil {
		return err
	}
	args := make([]any, 2+len(Columns))
	for _, r := range rows {
		args[0] = r.Day.Format("2006-01-02")
		args[1] = r.District
		for j, v := range r.Values {
			switch {
			case r.Null[j]:
				args[2+j] = nil
			case Integer(j):
				args[2+j] = int64(v)
			default:
				args[2+j] = v
			}
		}
		if _, err := st.Exec(args...); err != nil {
			return err
		}
	}
	return tx.Commit()
}

// PostgresDDL is the CREATE TABLE statement for PostgreSQL.
func PostgresDDL(table string) string {
	var cols []string
	for j, c := range Columns {
		t := "double precision"
		if Integer(j) {
			t = "bigint"
		}
		cols = append(cols, connectors.QuoteIdent(c)+" "+t)
	}
	return "CREATE TABLE " + table + " (day date NOT NULL, district text NOT NULL, " + strings.Join(cols, ", ") + ")"
}

// CopyRows returns the rows as [][]any for pgx CopyFrom (day, district,
// values…).
func CopyRows(rows []Row) [][]any {
	out := make([][]any, len(rows))
	for i, r := range rows {
		a := make([]any, 2+len(Columns))
		a[0] = r.Day
		a[1] = r.District
		for j, v := range r.Values {
			switch {
			case r.Null[j]:
				a[2+j] = nil
			case Integer(j):
				a[2+j] = int64(v)
			default:
				a[2+j] = v
			}
		}
		out[i] = a
	}
	return out
}

// CopyColumns names the columns of CopyRows.
func CopyColumns() []string { return append([]string{"day", "district"}, Columns...) }

// InMemory accumulates rows as a scan with the given columns (all when
// nil), bucket ("" for none, or a size over day) and segmenting by district
// would: the reference every connector is compared with.
func InMemory(rows []Row, cols []string, bucket string, segment, qr bool) *connectors.Result {
	if cols == nil {
		cols = Columns
	}
	idx := make([]int, len(cols))
	for a, c := range cols {
		idx[a] = -1
		for j, x := range Columns {
			if x == c {
				idx[a] = j
			}
		}
		if idx[a] < 0 {
			panic(fmt.Sprintf("demand: no column %q", c))
		}
	}
	g := connectors.NewGrouper(connectors.GroupOptions{Columns: cols, QR: qr, Bucketed: bucket != "", Segmented: segment})
	var b *connectors.Bucketer
	if bucket != "" {
		b = connectors.NewBucketer(bucket, time.UTC)
	}
	for _, r := range rows {
		var key int64
		if b != nil {
			key = b.Start(r.Day.UnixMicro())
		}
		vals, nulls, err := g.Row(key, []byte(connectors.SegmentKey(r.District)))
		if err != nil {
			panic(err)
		}
		for a, j := range idx {
			vals[a] = r.Values[j]
			nulls[a] = r.Null[j]
		}
	}
	return &connectors.Result{Columns: cols, Groups: g.Groups(), Read: int64(len(rows)), Inexact: make([]int64, len(cols)), Partitions: 1}
}
