package postgres

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"net"
	"os"
	osexec "os/exec"
	"runtime"
	"strconv"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"

	"plumb/connectors"
	"plumb/connectors/postgres/pgtest"
)

// The benchmark table: a district's sensor readings, 20 float8 columns,
// some of them near-copies and sums of others, generated in the server.
const benchTable = "district_sensors"

func benchColumns() []string {
	c := make([]string, 20)
	for i := range c {
		c[i] = fmt.Sprintf("sensor_%02d", i+1)
	}
	return c
}

func createBenchTable(b testing.TB, u string, rows int) {
	b.Helper()
	var list []string
	for i := 1; i <= 20; i++ {
		switch {
		case i == 19: // a near-copy of sensor_01
			list = append(list, "r1 * 1.02 + random() * 0.01 AS sensor_19")
		case i == 20: // the sum of two others
			list = append(list, "r1 + r2 AS sensor_20")
		case i == 1:
			list = append(list, "r1 AS sensor_01")
		case i == 2:
			list = append(list, "r2 AS sensor_02")
		default:
			list = append(list, fmt.Sprintf("random() * %d + %d AS sensor_%02d", i, 10*i, i))
		}
	}
	pgtest.Exec(b, u,
		"CREATE TABLE "+benchTable+" AS SELECT "+strings.Join(list, ", ")+
			" FROM (SELECT random() * 40 + 10 AS r1, random() * 900 + 4000 AS r2 FROM generate_series(1, "+strconv.Itoa(rows)+")) AS g",
		"VACUUM ANALYZE "+benchTable)
}

type countingConn struct {
	net.Conn
	n *atomic.Int64
}

func (c countingConn) Read(p []byte) (int, error) {
	n, err := c.Conn.Read(p)
	c.n.Add(int64(n))
	return n, err
}

func openCounting(b testing.TB, u string, opts connectors.Options) (*Source, *atomic.Int64) {
	b.Helper()
	cfg, err := pgxpool.ParseConfig(u)
	if err != nil {
		b.Fatal(err)
	}
	var n atomic.Int64
	d := &net.Dialer{}
	cfg.ConnConfig.DialFunc = func(ctx context.Context, network, addr string) (net.Conn, error) {
		c, err := d.DialContext(ctx, network, addr)
		if err != nil {
			return nil, err
		}
		return countingConn{c, &n}, nil
	}
	src, err := OpenConfig(context.Background(), cfg, "bench", opts)
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(func() { src.Close() })
	return src, &n
}

func timeIt(b *testing.B, f func() error) float64 {
	b.Helper()
	start := time.Now()
	if err := f(); err != nil {
		b.Fatal(err)
	}
	return time.Since(start).Seconds()
}

func peakRSSMB() float64 {
	s, _ := os.ReadFile("/proc/self/status")
	for _, line := range strings.Split(string(s), "\n") {
		if strings.HasPrefix(line, "VmHWM:") {
			kb, _ := strconv.ParseFloat(strings.Fields(line)[1], 64)
			return kb / 1024
		}
	}
	return 0
}

// BenchmarkScan1M measures, in one run on one table of PLUMB_BENCH_ROWS
// rows (default 1e6) × 20 float8 columns: the floor (COPY binary to
// nowhere), the bare sums-of-products SELECT, and plumb streaming (COPY
// and binary rows), --parallel 2 and --pushdown; with PLUMB_BENCH_PEER=1
// also the pandas + statsmodels pipeline of testdata/peer. It reports the
// times and their ratios. Run it alone: go test -run XXX -bench Scan1M
// -benchtime 1x ./connectors/postgres/
func BenchmarkScan1M(b *testing.B) {
	rows := 1000000
	if s := os.Getenv("PLUMB_BENCH_ROWS"); s != "" {
		rows, _ = strconv.Atoi(s)
	}
	u := pgtest.Start(b)
	createBenchTable(b, u, rows)
	cols := benchColumns()
	ctx := context.Background()
	req := connectors.Request{Table: benchTable, Columns: cols}
	list := strings.Join(cols, ", ")
	pairs := []string{}
	for i := range cols {
		for j := i; j < len(cols); j++ {
			pairs = append(pairs, "sum("+cols[i]+" * "+cols[j]+")")
		}
	}
	bare := "SELECT count(*), " + strings.Join(pairs, ", ") + " FROM " + benchTable

	conn, err := pgx.Connect(ctx, u)
	if err != nil {
		b.Fatal(err)
	}
	defer conn.Close(ctx)
	if _, err := conn.Exec(ctx, "SET jit = off"); err != nil {
		b.Fatal(err)
	}
	stream, _ := openCounting(b, u, connectors.Options{})
	par, _ := openCounting(b, u, connectors.Options{Parallel: 2})
	push, pushBytes := openCounting(b, u, connectors.Options{Pushdown: true})
	scan := func(s *Source) func() error {
		return func() error { _, err := s.Scan(ctx, req); return err }
	}
	// Warm the cache once.
	if _, err := conn.PgConn().CopyTo(ctx, io.Discard, "COPY (SELECT "+list+" FROM "+benchTable+") TO STDOUT (FORMAT binary)"); err != nil {
		b.Fatal(err)
	}
	b.ResetTimer()
	var m = map[string]float64{}
	for i := 0; i < b.N; i++ {
		m["floor_s"] += timeIt(b, func() error {
			_, err := conn.PgConn().CopyTo(ctx, io.Discard, "COPY (SELECT "+list+" FROM "+benchTable+") TO STDOUT (FORMAT binary)")
			return err
		})
		m["bare_sums_s"] += timeIt(b, func() error { _, err := conn.Exec(ctx, bare); return err })
		stream.mode = readCopy
		var ms0, ms1 runtime.MemStats
		runtime.ReadMemStats(&ms0)
		m["stream_copy_s"] += timeIt(b, scan(stream))
		runtime.ReadMemStats(&ms1)
		m["stream_allocs_per_row"] += float64(ms1.Mallocs-ms0.Mallocs) / float64(rows)
		stream.mode = readRows
		m["stream_rows_s"] += timeIt(b, scan(stream))
		m["parallel2_s"] += timeIt(b, scan(par))
		before := pushBytes.Load()
		m["pushdown_s"] += timeIt(b, scan(push))
		m["pushdown_bytes"] += float64(pushBytes.Load() - before)
	}
	b.StopTimer()
	for k := range m {
		m[k] /= float64(b.N)
	}
	best := min(m["stream_copy_s"], m["stream_rows_s"])
	m["stream_vs_floor"] = m["stream_copy_s"] / m["floor_s"]
	m["rows_vs_floor"] = m["stream_rows_s"] / m["floor_s"]
	m["parallel2_vs_stream"] = m["parallel2_s"] / best
	m["pushdown_vs_bare"] = m["pushdown_s"] / m["bare_sums_s"]
	m["peak_rss_MB"] = peakRSSMB()
	if os.Getenv("PLUMB_BENCH_PEER") == "1" {
		out, err := osexec.Command("/usr/bin/python3", "../../testdata/peer/peer.py", "--url", u, "--table", benchTable, "--json").Output()
		if err != nil {
			b.Fatalf("peer script: %v\n%s", err, out)
		}
		var peer map[string]float64
		if err := json.Unmarshal(out, &peer); err != nil {
			b.Fatalf("peer script output %q: %v", out, err)
		}
		m["peer_s"] = peer["peer_s"]
		m["peer_rss_MB"] = peer["peer_peak_rss_MB"]
		m["peer_vs_plumb"] = peer["peer_s"] / best
	}
	for k, v := range m {
		b.ReportMetric(v, k)
	}
}
