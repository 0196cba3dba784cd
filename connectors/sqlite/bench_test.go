package sqlite_test

import (
	"context"
	"database/sql"
	"database/sql/driver"
	"fmt"
	"io"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"plumb/connectors"
)

// BenchmarkScan measures plumb's SQLite scan of PLUMB_BENCH_SQLITE_ROWS
// rows (default 200 000) × 20 REAL sensor columns against two floors in the
// same run with the same driver: a bare database/sql loop (Next and Scan
// into float64s) and a bare loop on the driver's own rows, and reports the
// rows per second and the ratios (target: plumb ≥ 0.8 of the bare loop).
func BenchmarkScan(b *testing.B) {
	n := 200000
	if s := os.Getenv("PLUMB_BENCH_SQLITE_ROWS"); s != "" {
		n, _ = strconv.Atoi(s)
	}
	path := filepath.Join(b.TempDir(), "sensors.db")
	w, err := sql.Open("sqlite", path)
	if err != nil {
		b.Fatal(err)
	}
	cols := make([]string, 20)
	for i := range cols {
		cols[i] = fmt.Sprintf("sensor_%02d", i+1)
	}
	if _, err := w.Exec("CREATE TABLE district_sensors (" + strings.Join(cols, " REAL, ") + " REAL)"); err != nil {
		b.Fatal(err)
	}
	tx, _ := w.Begin()
	st, err := tx.Prepare("INSERT INTO district_sensors VALUES (?" + strings.Repeat(", ?", 19) + ")")
	if err != nil {
		b.Fatal(err)
	}
	r := rand.New(rand.NewPCG(1, 2))
	args := make([]any, 20)
	for i := 0; i < n; i++ {
		for j := range args {
			args[j] = r.Float64()*float64(j+1) + float64(10*j)
		}
		if _, err := st.Exec(args...); err != nil {
			b.Fatal(err)
		}
	}
	if err := tx.Commit(); err != nil {
		b.Fatal(err)
	}
	w.Close()

	ctx := context.Background()
	src, err := connectors.Open(ctx, "sqlite:"+path, connectors.Options{})
	if err != nil {
		b.Fatal(err)
	}
	defer src.Close()
	db, err := sql.Open("sqlite", "file:"+path+"?mode=ro")
	if err != nil {
		b.Fatal(err)
	}
	defer db.Close()
	q := "SELECT " + strings.Join(cols, ", ") + " FROM district_sensors"
	bare := func() error {
		rows, err := db.QueryContext(ctx, q)
		if err != nil {
			return err
		}
		defer rows.Close()
		v := make([]float64, 20)
		p := make([]any, 20)
		for i := range p {
			p[i] = &v[i]
		}
		for rows.Next() {
			if err := rows.Scan(p...); err != nil {
				return err
			}
		}
		return rows.Err()
	}
	raw := func() error {
		c, err := db.Conn(ctx)
		if err != nil {
			return err
		}
		defer c.Close()
		return c.Raw(func(dc any) error {
			rows, err := dc.(driver.QueryerContext).QueryContext(ctx, q, nil)
			if err != nil {
				return err
			}
			defer rows.Close()
			dest := make([]driver.Value, 20)
			for {
				if err := rows.Next(dest); err == io.EOF {
					return nil
				} else if err != nil {
					return err
				}
			}
		})
	}
	plumb := func() error {
		_, err := src.Scan(ctx, connectors.Request{Table: "district_sensors", Columns: cols})
		return err
	}
	if err := bare(); err != nil { // warm the page cache
		b.Fatal(err)
	}
	var tb, tr, tp time.Duration
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		for _, x := range []struct {
			f func() error
			d *time.Duration
		}{{bare, &tb}, {raw, &tr}, {plumb, &tp}} {
			start := time.Now()
			if err := x.f(); err != nil {
				b.Fatal(err)
			}
			*x.d += time.Since(start)
		}
	}
	b.StopTimer()
	per := func(d time.Duration) float64 { return float64(n) * float64(b.N) / d.Seconds() }
	b.ReportMetric(per(tb), "bare_rows/s")
	b.ReportMetric(per(tr), "driver_rows/s")
	b.ReportMetric(per(tp), "plumb_rows/s")
	b.ReportMetric(per(tp)/per(tb), "plumb_vs_bare")
	b.ReportMetric(per(tp)/per(tr), "plumb_vs_driver")
}
