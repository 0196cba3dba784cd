package pgtest

import (
	"context"
	"fmt"
	"os"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
)

// Cluster is a coordinator and its shard servers, each a throwaway
// PostgreSQL of its own on its own port: the coordinator reaches the shards
// through postgres_fdw, and the shards load pg_stat_statements so that a
// test can read which statements each received.
type Cluster struct {
	Coordinator *Server
	Shards      []*Server
	// URL is a fresh database on the coordinator, with postgres_fdw and
	// one foreign server per shard (shard0, shard1, …, with jit off in
	// their sessions) mapped for the superuser.
	URL string
	// ShardURLs are a fresh database on each shard, with
	// pg_stat_statements.
	ShardURLs []string
}

// NewCluster starts a coordinator and n shards (in parallel), creates a
// database on each and links them; all are stopped and removed in the
// test's cleanup. Without server binaries the test is skipped outside CI,
// as Start does.
func NewCluster(t testing.TB, n int) *Cluster {
	t.Helper()
	servers := make([]*Server, n+1)
	errs := make([]error, n+1)
	var wg sync.WaitGroup
	for i := range servers {
		wg.Add(1)
		go func(i int) {
			defer wg.Done()
			var settings []string
			if i > 0 {
				settings = []string{"shared_preload_libraries=pg_stat_statements", "pg_stat_statements.track=all"}
			}
			servers[i], errs[i] = startServer(settings...)
		}(i)
	}
	wg.Wait()
	for _, s := range servers {
		if s != nil {
			t.Cleanup(s.Stop)
		}
	}
	for _, err := range errs {
		if err != nil {
			unavailable(t, err)
		}
	}
	c := &Cluster{Coordinator: servers[0], Shards: servers[1:]}
	c.URL = c.Coordinator.NewDatabase(t)
	ddl := []string{"CREATE EXTENSION postgres_fdw"}
	for i, s := range c.Shards {
		u := s.NewDatabase(t)
		c.ShardURLs = append(c.ShardURLs, u)
		Exec(t, u, "CREATE EXTENSION pg_stat_statements")
		db := u[strings.LastIndexByte(u, '/')+1 : strings.IndexByte(u, '?')]
		ddl = append(ddl,
			// jit=off in the coordinator's sessions on the shard, as
			// plumb's README advises: compiling a wide aggregate costs
			// seconds.
			fmt.Sprintf("CREATE SERVER shard%d FOREIGN DATA WRAPPER postgres_fdw OPTIONS (host '127.0.0.1', port '%d', dbname '%s', batch_size '1000', options '-c jit=off')", i, s.Port, db),
			fmt.Sprintf("CREATE USER MAPPING FOR postgres SERVER shard%d OPTIONS (user 'postgres', password '%s')", i, s.Password))
	}
	Exec(t, c.URL, ddl...)
	return c
}

// ShardTable creates table name on the coordinator, hash-partitioned on
// key into one foreign partition per shard (name_p0, name_p1, …, each a
// table of that name on its shard), all with the columns of columns (SQL
// column definitions).
func (c *Cluster) ShardTable(t testing.TB, name, columns, key string) {
	t.Helper()
	ddl := []string{fmt.Sprintf("CREATE TABLE %s (%s) PARTITION BY HASH (%s)", name, columns, key)}
	for i, u := range c.ShardURLs {
		part := fmt.Sprintf("%s_p%d", name, i)
		Exec(t, u, fmt.Sprintf("CREATE TABLE %s (%s)", part, columns))
		ddl = append(ddl, fmt.Sprintf("CREATE FOREIGN TABLE %s PARTITION OF %s FOR VALUES WITH (MODULUS %d, REMAINDER %d) SERVER shard%d OPTIONS (table_name '%s')",
			part, name, len(c.ShardURLs), i, i, part))
	}
	Exec(t, c.URL, ddl...)
}

// ResetStatements clears pg_stat_statements on every shard.
func (c *Cluster) ResetStatements(t testing.TB) {
	t.Helper()
	for _, u := range c.ShardURLs {
		Exec(t, u, "SELECT pg_stat_statements_reset()")
	}
}

// Statement is one entry of a shard's pg_stat_statements.
type Statement struct {
	Query string
	Calls int64
	Rows  int64
}

// Statements lists what shard i executed since the last reset (its own
// reading of the view excluded).
func (c *Cluster) Statements(t testing.TB, i int) []Statement {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	conn, err := pgx.Connect(ctx, c.ShardURLs[i])
	if err != nil {
		t.Fatalf("pgtest: shard %d: %v", i, err)
	}
	defer conn.Close(ctx)
	rows, err := conn.Query(ctx, `SELECT query, calls, rows FROM pg_stat_statements
		WHERE dbid = (SELECT oid FROM pg_database WHERE datname = current_database())
			AND query NOT LIKE '%pg_stat_statements%' ORDER BY query`)
	if err != nil {
		t.Fatalf("pgtest: shard %d: %v", i, err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (Statement, error) {
		var s Statement
		err := r.Scan(&s.Query, &s.Calls, &s.Rows)
		return s, err
	})
	if err != nil {
		t.Fatalf("pgtest: shard %d: %v", i, err)
	}
	return out
}

// Exec runs statements on the database at url, failing the test on error.
func Exec(t testing.TB, url string, sql ...string) {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Minute)
	defer cancel()
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatalf("pgtest: connect: %v", err)
	}
	defer conn.Close(ctx)
	for _, q := range sql {
		if _, err := conn.Exec(ctx, q); err != nil {
			t.Fatalf("pgtest: %s: %v", q, err)
		}
	}
}

// CPUTime returns the processor time the server has used so far: the
// postmaster's and its live children's (backends) user and system time,
// and that of the children it has reaped (parallel workers, ended
// backends), from /proc. On a machine shared with other work it measures
// a statement's cost far more steadily than the wall clock.
func (s *Server) CPUTime() time.Duration {
	pid := s.cmd.Process.Pid
	ticks := procTicks(pid, true)
	for _, c := range childrenOf(pid) {
		ticks += procTicks(c, false)
	}
	return time.Duration(ticks) * time.Second / clockTicks
}

// clockTicks is the kernel's USER_HZ, 100 on Linux everywhere plumb runs.
const clockTicks = 100

// procTicks reads utime and stime (and, with reaped, cutime and cstime)
// of a process from /proc/PID/stat.
func procTicks(pid int, reaped bool) int64 {
	b, err := os.ReadFile(fmt.Sprintf("/proc/%d/stat", pid))
	if err != nil {
		return 0
	}
	rest := string(b)
	if i := strings.LastIndexByte(rest, ')'); i >= 0 {
		rest = rest[i+1:]
	}
	f := strings.Fields(rest)
	// After the command: state(0) ppid … utime(11) stime(12) cutime(13) cstime(14).
	if len(f) < 15 {
		return 0
	}
	var n int64
	last := 12
	if reaped {
		last = 14
	}
	for i := 11; i <= last; i++ {
		v, _ := strconv.ParseInt(f[i], 10, 64)
		n += v
	}
	return n
}

// CheckOneAggregate checks that each shard received, since the last
// reset, exactly one aggregate statement per leaf it holds and no row
// fetch: postgres_fdw runs every remote query as a cursor, so the
// aggregate arrives as one DECLARE of a SELECT with sums, and every FETCH
// returns no more rows than the statement has groups (a streamed scan
// declares a cursor over the rows and fetches them a hundred at a time).
func (c *Cluster) CheckOneAggregate(t testing.TB, runs int, maxGroups int64) {
	t.Helper()
	for i := range c.Shards {
		aggs, fetched := int64(0), int64(0)
		for _, s := range c.Statements(t, i) {
			q := strings.ToUpper(s.Query)
			switch {
			case strings.HasPrefix(q, "DECLARE"):
				if !strings.Contains(q, "SUM(") && !strings.Contains(q, "REGR_SXY(") {
					t.Errorf("shard %d: a cursor over rows, not an aggregate: %.200s", i, s.Query)
					continue
				}
				aggs += s.Calls
			case strings.HasPrefix(q, "FETCH"):
				fetched += s.Rows
			}
		}
		if aggs != int64(runs) {
			t.Errorf("shard %d: %d aggregate statements, want %d (one per run)", i, aggs, runs)
		}
		if fetched > maxGroups*int64(runs) {
			t.Errorf("shard %d: %d rows fetched, want at most %d (the groups)", i, fetched, maxGroups*int64(runs))
		}
	}
}
