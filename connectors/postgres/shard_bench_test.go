package postgres

import (
	"context"
	"fmt"
	"io"
	"net"
	"os"
	"strconv"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"plumb/connectors"
	"plumb/connectors/postgres/pgtest"
)

// countingProxy forwards TCP connections to addr and counts the bytes sent
// back to the client (shard → coordinator).
func countingProxy(b testing.TB, addr string) (port int, back *atomic.Int64) {
	b.Helper()
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(func() { l.Close() })
	back = new(atomic.Int64)
	go func() {
		for {
			c, err := l.Accept()
			if err != nil {
				return
			}
			go func() {
				defer c.Close()
				s, err := net.Dial("tcp", addr)
				if err != nil {
					return
				}
				defer s.Close()
				go io.Copy(s, c)
				io.Copy(countingWriter{c, back}, s)
			}()
		}
	}()
	return l.Addr().(*net.TCPAddr).Port, back
}

type countingWriter struct {
	w io.Writer
	n *atomic.Int64
}

func (c countingWriter) Write(p []byte) (int, error) {
	n, err := c.w.Write(p)
	c.n.Add(int64(n))
	return n, err
}

// BenchmarkShardPushdown measures, in one run, on PLUMB_BENCH_SHARD_ROWS
// rows (default 500 000) × PLUMB_BENCH_SHARD_COLS float8 columns (default
// 20; one with mean 1e9 and spread 1): on one instance the bare
// sums-of-products SELECT (the floor), the same with each column's min
// and max, and plumb --pushdown on the same
// rows in a plain table; through a coordinator whose table is two foreign
// partitions on two shards (three servers on this machine), plumb
// --pushdown and, for contrast, plumb streaming. It reports the times,
// their ratios, and the bytes on each link: shard → coordinator (a
// counting proxy in front of each shard) and coordinator → plumb (plumb's
// sockets). Beside the wall-clock times it reports each server's
// processor time (pgtest's CPUTime: backends and parallel workers), which
// moves far less on a machine shared with other work. Run it alone:
// go test -run XXX -bench ShardPushdown -benchtime 3x ./connectors/postgres/
func BenchmarkShardPushdown(b *testing.B) {
	rows, p := 500000, 20
	if s := os.Getenv("PLUMB_BENCH_SHARD_ROWS"); s != "" {
		rows, _ = strconv.Atoi(s)
	}
	if s := os.Getenv("PLUMB_BENCH_SHARD_COLS"); s != "" {
		p, _ = strconv.Atoi(s)
	}
	cols := make([]string, p)
	var ddl, gen []string
	for j := range cols {
		cols[j] = fmt.Sprintf("c%d", j+1)
		ddl = append(ddl, cols[j]+" float8")
		switch j {
		case 0:
			gen = append(gen, "1e9 + sin(i * 0.37)") // mean 1e9, spread 1
		case 1:
			gen = append(gen, "15 + 8 * cos(i * 0.11) + 0.5 * sin(i * 0.7)")
		default:
			gen = append(gen, fmt.Sprintf("%d + %d * sin(i * %g + %d)", 10*j, j, 0.01*float64(j+1), j))
		}
	}
	c := pgtest.NewCluster(b, 2)
	c.ShardTable(b, "readings", "id int, "+strings.Join(ddl, ", "), "id")
	var shardBytes []*atomic.Int64
	var alter []string
	for i, s := range c.Shards {
		port, n := countingProxy(b, fmt.Sprintf("127.0.0.1:%d", s.Port))
		shardBytes = append(shardBytes, n)
		alter = append(alter, fmt.Sprintf("ALTER SERVER shard%d OPTIONS (SET port '%d')", i, port))
		if os.Getenv("PLUMB_BENCH_SHARD_JIT") == "1" {
			// The shards' own JIT setting (pgtest turns it off, as the
			// README advises).
			alter = append(alter, fmt.Sprintf("ALTER SERVER shard%d OPTIONS (DROP options)", i))
		}
	}
	for j := range gen {
		gen[j] += " AS " + cols[j]
	}
	fill := fmt.Sprintf("SELECT i AS id, %s FROM generate_series(1, %d) AS i", strings.Join(gen, ", "), rows)
	pgtest.Exec(b, c.URL, append(alter,
		"INSERT INTO readings "+fill,
		"CREATE TABLE readings_local AS "+fill,
		"VACUUM ANALYZE readings_local", "ANALYZE readings")...)
	for i, u := range c.ShardURLs {
		pgtest.Exec(b, u, fmt.Sprintf("VACUUM ANALYZE readings_p%d", i))
	}
	ctx := context.Background()
	var pairs []string
	for i := range cols {
		for j := i; j < p; j++ {
			pairs = append(pairs, "sum("+cols[i]+" * "+cols[j]+")")
		}
	}
	bare := "SELECT count(*), " + strings.Join(pairs, ", ") + " FROM readings_local"
	// The floor with each column's min and max beside the sums: what the
	// extremes alone cost, which no statement that reports them can save.
	var ext []string
	for _, c := range cols {
		ext = append(ext, "min("+c+")", "max("+c+")")
	}
	bareExt := "SELECT count(*), " + strings.Join(append(pairs, ext...), ", ") + " FROM readings_local"
	conn, err := pgx.Connect(ctx, c.URL)
	if err != nil {
		b.Fatal(err)
	}
	defer conn.Close(ctx)
	if _, err := conn.Exec(ctx, "SET jit = off"); err != nil {
		b.Fatal(err)
	}
	push, plumbBytes := openCounting(b, c.URL, connectors.Options{Pushdown: true})
	stream, _ := openCounting(b, c.URL, connectors.Options{})
	local := connectors.Request{Table: "readings_local", Columns: cols}
	sharded := connectors.Request{Table: "readings", Columns: cols}
	scan := func(s *Source, req connectors.Request) func() error {
		return func() error { _, err := s.Scan(ctx, req); return err }
	}
	// Warm the caches and open the connections.
	for _, f := range []func() error{scan(push, local), scan(push, sharded)} {
		if err := f(); err != nil {
			b.Fatal(err)
		}
	}
	shardTotal := func() int64 {
		var n int64
		for _, x := range shardBytes {
			n += x.Load()
		}
		return n
	}
	m := map[string]float64{}
	coord := c.Coordinator
	// timed runs f and adds its wall-clock and processor times (the
	// coordinator's, and each shard's) under name.
	timed := func(name string, f func() error) {
		cpu0 := coord.CPUTime()
		sh0 := make([]time.Duration, len(c.Shards))
		for i, s := range c.Shards {
			sh0[i] = s.CPUTime()
		}
		m[name+"_s"] += timeIt(b, f)
		m[name+"_cpu_s"] += (coord.CPUTime() - cpu0).Seconds()
		for i, s := range c.Shards {
			m[fmt.Sprintf("%s_shard%d_cpu_s", name, i)] += (s.CPUTime() - sh0[i]).Seconds()
		}
	}
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		timed("bare_sums", func() error { _, err := conn.Exec(ctx, bare); return err })
		timed("bare_extremes", func() error { _, err := conn.Exec(ctx, bareExt); return err })
		before := plumbBytes.Load()
		timed("push_one", scan(push, local))
		m["push_one_bytes_to_plumb"] += float64(plumbBytes.Load() - before)
		before, sb := plumbBytes.Load(), shardTotal()
		timed("push_shards", scan(push, sharded))
		m["push_shards_bytes_to_plumb"] += float64(plumbBytes.Load() - before)
		m["push_shards_bytes_from_shards"] += float64(shardTotal() - sb)
		sb = shardTotal()
		timed("stream_shards", scan(stream, sharded))
		m["stream_shards_bytes_from_shards"] += float64(shardTotal() - sb)
	}
	b.StopTimer()
	for k := range m {
		m[k] /= float64(b.N)
	}
	m["push_one_vs_bare"] = m["push_one_s"] / m["bare_sums_s"]
	m["push_one_cpu_vs_bare"] = m["push_one_cpu_s"] / m["bare_sums_cpu_s"]
	m["bare_extremes_vs_bare"] = m["bare_extremes_s"] / m["bare_sums_s"]
	m["bare_extremes_cpu_vs_bare"] = m["bare_extremes_cpu_s"] / m["bare_sums_cpu_s"]
	m["push_one_cpu_vs_bare_extremes"] = m["push_one_cpu_s"] / m["bare_extremes_cpu_s"]
	m["push_shards_cpu_all_vs_push_one"] = (m["push_shards_cpu_s"] + m["push_shards_shard0_cpu_s"] + m["push_shards_shard1_cpu_s"]) / m["push_one_cpu_s"]
	for k := range m {
		// Only the coordinator works for the local table.
		if strings.HasPrefix(k, "bare_sums_shard") || strings.HasPrefix(k, "bare_extremes_shard") || strings.HasPrefix(k, "push_one_shard") {
			delete(m, k)
		}
	}
	m["push_shards_vs_push_one"] = m["push_shards_s"] / m["push_one_s"]
	m["stream_shards_vs_push_shards"] = m["stream_shards_s"] / m["push_shards_s"]
	for k, v := range m {
		b.ReportMetric(v, k)
	}
}
