package postgres

import (
	"context"
	"fmt"
	"math"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"plumb/connectors"
	"plumb/connectors/internal/demand"
	"plumb/connectors/postgres/pgtest"
)

// shardColumns are the value columns of the sharded test table: a district
// meter reading with mean 1e9 and spread about 1, and readings of ordinary
// magnitudes, one a near-copy and one the sum of two others.
var shardColumns = []string{"meter_reading", "temperature", "rainfall", "pressure", "billed_volume", "metered_volume", "connections"}

const shardDDL = `id int, day date, district text, meter_reading float8, temperature float8, rainfall float8,
	pressure float8, billed_volume float8, metered_volume float8, connections float8`

// shardRows inserts rows [from, to) through the coordinator, which routes
// them to the shards.
func shardRows(from, to int) string {
	return fmt.Sprintf(`INSERT INTO readings SELECT i, date '2024-05-01' + (i %% 20), 'district ' || (i %% 3),
		1e9 + sin(i * 0.37), 15 + 8 * cos(i * 0.11), abs(sin(i * 0.05)) * 12, 3.2 + (i %% 17) * 0.05 + sin(i) * 0.01,
		400 + 50 * sin(i * 0.013) + 3 * cos(i), 400 + 50 * sin(i * 0.013) + 3 * cos(i) + 0.001 * sin(i * 7),
		(i %% 50) + (i %% 7)
		FROM generate_series(%d, %d) AS i`, from, to-1)
}

// newShardCluster starts a coordinator and two shards with readings
// hash-partitioned over them and ANALYZEd on the coordinator (which reads
// a sample of each shard; the statements are cleared afterwards).
func newShardCluster(t *testing.T, rows int) *pgtest.Cluster {
	t.Helper()
	c := pgtest.NewCluster(t, 2)
	c.ShardTable(t, "readings", shardDDL, "id")
	pgtest.Exec(t, c.URL, shardRows(0, rows), "ANALYZE readings")
	return c
}

// TestShardedPushdown: through a coordinator whose table is two foreign
// partitions on two shards, pushdown gives streaming's rows and
// accumulators (identity of two computations: to 1e-12 relative, the
// bound the other pushdown tests use), for the whole table and daily by
// district, with a column of mean 1e9 and spread 1; each shard computes
// its partition's aggregate in one statement and no row crosses.
func TestShardedPushdown(t *testing.T) {
	c := newShardCluster(t, 20000)
	ctx := context.Background()
	stream := openPG(t, c.URL, connectors.Options{})
	push := openPG(t, c.URL, connectors.Options{Pushdown: true})
	for _, r := range []struct {
		name   string
		req    connectors.Request
		groups int64
	}{
		{"whole table", connectors.Request{Table: "readings", Columns: shardColumns}, 1},
		{"daily by district", connectors.Request{Table: "readings", Columns: shardColumns, TimeColumn: "day", Bucket: "day", Segment: "district"}, 60},
		{"weekly, filtered", connectors.Request{Table: "readings", Columns: shardColumns, TimeColumn: "day", Bucket: "week", Where: "temperature > 10"}, 20},
	} {
		t.Run(r.name, func(t *testing.T) {
			want, err := stream.Scan(ctx, r.req)
			if err != nil {
				t.Fatal(err)
			}
			got := pushOnShards(t, c, push, r.req)
			c.CheckOneAggregate(t, 1, r.groups)
			if got.Partitions != 2 || !got.Pushdown {
				t.Errorf("partitions %d pushdown %v, want 2 true", got.Partitions, got.Pushdown)
			}
			demand.SameResult(t, r.name, want, got, 1e-12)
		})
	}
}

// TestShardedPushdownShippable: the statement plumb sends for each foreign
// partition is sent whole to its shard: EXPLAIN VERBOSE on the coordinator
// shows one Foreign Scan whose Remote SQL holds the aggregate and the
// GROUP BY, with nothing computed on the coordinator.
func TestShardedPushdownShippable(t *testing.T) {
	c := newShardCluster(t, 2000)
	ctx := context.Background()
	src := openPG(t, c.URL, connectors.Options{Pushdown: true})
	conn, err := pgx.Connect(ctx, c.URL)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	for _, req := range []connectors.Request{
		{Table: "readings", Columns: shardColumns},
		{Table: "readings", Columns: shardColumns, TimeColumn: "day", Bucket: "week", Segment: "district"},
		{Table: "readings", Columns: shardColumns[:3], Weight: "pressure", Where: "district <> 'district 9'"},
		{Table: "readings", Columns: shardColumns[:3], SamplePct: 30, Seed: 7},
	} {
		checkShipped(t, conn, src, req, 2)
	}
}

// checkShipped checks with EXPLAIN VERBOSE, in a transaction set up as
// plumb sets up its own, that each leaf's statement is one Foreign Scan
// whose Remote SQL holds the aggregate.
func checkShipped(t *testing.T, conn *pgx.Conn, src *Source, req connectors.Request, leaves int) {
	t.Helper()
	ctx := context.Background()
	tx, err := conn.Begin(ctx)
	if err != nil {
		t.Fatal(err)
	}
	defer tx.Rollback(ctx)
	_, _, pds, err := src.preparePush(ctx, tx, req)
	if err != nil {
		t.Fatal(err)
	}
	if len(pds) != leaves {
		t.Fatalf("%d leaves, want %d", len(pds), leaves)
	}
	for _, pd := range pds {
		if pd.needProbe {
			t.Errorf("%s: no centres from pg_stats after ANALYZE", pd.source)
		}
		if err := pd.planFor(ctx, tx); err != nil {
			t.Fatal(err)
		}
		rows, err := tx.Query(ctx, "EXPLAIN (VERBOSE, COSTS OFF) "+pd.aggSQL())
		if err != nil {
			t.Fatal(err)
		}
		lines, err := pgx.CollectRows(rows, pgx.RowTo[string])
		if err != nil {
			t.Fatal(err)
		}
		plan := strings.Join(lines, "\n")
		if !strings.HasPrefix(strings.TrimSpace(lines[0]), "Foreign Scan") || !strings.Contains(plan, "Relations: Aggregate on") {
			t.Errorf("%s: the aggregate is not sent to the shard:\n%.2000s", pd.source, plan)
			continue
		}
		remote := plan[strings.Index(plan, "Remote SQL:"):]
		if !strings.Contains(remote, "sum(") && !strings.Contains(remote, "regr_sxy(") {
			t.Errorf("%s: Remote SQL without the aggregate:\n%.2000s", pd.source, plan)
		}
	}
}

// TestShardedPushdownWide: with 30 columns (465 co-moments) the aggregate
// is still sent to the shards (PostgreSQL 15's postgres_fdw would fetch the
// rows instead, costing the products twice; see planFor).
func TestShardedPushdownWide(t *testing.T) {
	c := pgtest.NewCluster(t, 2)
	var ddl, gen, cols []string
	for j := 0; j < 30; j++ {
		cols = append(cols, fmt.Sprintf("sensor_%02d", j+1))
		ddl = append(ddl, cols[j]+" float8")
		gen = append(gen, fmt.Sprintf("%d + sin(i * %g)", 10*j, 0.01*float64(j+1)))
	}
	c.ShardTable(t, "sensors", "id int, "+strings.Join(ddl, ", "), "id")
	pgtest.Exec(t, c.URL, "INSERT INTO sensors SELECT i, "+strings.Join(gen, ", ")+" FROM generate_series(1, 20000) AS i", "ANALYZE sensors")
	ctx := context.Background()
	src := openPG(t, c.URL, connectors.Options{Pushdown: true})
	conn, err := pgx.Connect(ctx, c.URL)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	for _, p := range []int{10, 20, 30} {
		checkShipped(t, conn, src, connectors.Request{Table: "sensors", Columns: cols[:p]}, 2)
	}
	want, err := openPG(t, c.URL, connectors.Options{}).Scan(ctx, connectors.Request{Table: "sensors", Columns: cols})
	if err != nil {
		t.Fatal(err)
	}
	got := pushOnShards(t, c, src, connectors.Request{Table: "sensors", Columns: cols})
	c.CheckOneAggregate(t, 1, 1)
	demand.SameResult(t, "30 columns", want, got, 1e-12)
}

// TestShardedPushdownBytes: what plumb reads from the coordinator does not
// grow with the rows: doubling the rows of the sharded table leaves the
// bytes read per scan (wire bytes on plumb's sockets, the fewest of three
// scans) unchanged. They are the aggregates, O(p² × partitions ×
// groups), and the catalog queries (the columns, and pg_stats reduced in
// the server to eight numbers per column and relation); the bound is 16
// bytes per number aggregated plus 16 KiB for the catalog.
func TestShardedPushdownBytes(t *testing.T) {
	c := newShardCluster(t, 10000)
	ctx := context.Background()
	req := connectors.Request{Table: "readings", Columns: shardColumns}
	src, n := openCounting(t, c.URL, connectors.Options{Pushdown: true})
	// The fewest bytes of three scans: a connection that runs a
	// statement for the first time also receives its description.
	scan := func() int64 {
		least := int64(math.MaxInt64)
		for range 3 {
			before := n.Load()
			if _, err := src.Scan(ctx, req); err != nil {
				t.Fatal(err)
			}
			least = min(least, n.Load()-before)
		}
		return least
	}
	small := scan()
	pgtest.Exec(t, c.URL, shardRows(10000, 20000))
	large := scan()
	if small != large {
		t.Errorf("bytes read %d for 10000 rows, %d for 20000: want the same", small, large)
	}
	p := int64(len(shardColumns))
	numbers := 2 * 2 * (4 + 3*p + p*(p+1)/2) // 2 partitions × at most 2 groups (complete or not) per leaf
	if bound := 16*numbers + 16<<10; large > bound {
		t.Errorf("bytes read %d, want at most %d", large, bound)
	}
	t.Logf("bytes from the coordinator per pushdown scan: %d (p = %d, 2 partitions)", large, p)
}

// TestShardedPushdownNoStatistics: foreign partitions that were never
// ANALYZEd on the coordinator have no pg_stats there. With the centres
// given (a watch's previous means) each shard still receives one
// aggregate and nothing else; without them plumb reads a few rows of each
// partition first, and the result is the same.
func TestShardedPushdownNoStatistics(t *testing.T) {
	c := pgtest.NewCluster(t, 2)
	c.ShardTable(t, "readings", shardDDL, "id")
	pgtest.Exec(t, c.URL, shardRows(0, 5000))
	ctx := context.Background()
	stream := openPG(t, c.URL, connectors.Options{})
	push := openPG(t, c.URL, connectors.Options{Pushdown: true})
	req := connectors.Request{Table: "readings", Columns: shardColumns}
	want, err := stream.Scan(ctx, req)
	if err != nil {
		t.Fatal(err)
	}
	m := want.Merged().Moments
	req.Centres = map[string]float64{}
	for j, name := range m.Names() {
		req.Centres[name] = m.Mean(j)
	}
	got := pushOnShards(t, c, push, req)
	c.CheckOneAggregate(t, 1, 1)
	demand.SameResult(t, "given centres", want, got, 1e-12)

	req.Centres = nil
	if got, err = push.Scan(ctx, req); err != nil {
		t.Fatal(err)
	}
	demand.SameResult(t, "probed centres", want, got, 1e-12)
}

// TestPushdownCentresFromStatistics: the provisional centres come from
// pg_stats for integers, numeric and float8 columns holding NaN and
// infinities (beside a boolean factor), without a probe, each within the column's range; the
// results equal streaming (identity of two computations, to 1e-12).
func TestPushdownCentresFromStatistics(t *testing.T) {
	u := pgtestStart(t)
	pgtest.Exec(t, u, `CREATE TABLE meter_events AS
		SELECT i % 3 = 0 AS leak_flag, (i % 1000)::int8 * 1000000007 AS meter_serial, (i * 0.001)::numeric(12,3) AS flow_m3,
			CASE WHEN i % 97 = 0 THEN 'NaN'::float8 WHEN i % 89 = 0 THEN 'Infinity'::float8 ELSE 1e9 + sin(i) END AS reading
		FROM generate_series(1, 5000) AS i`, `ANALYZE meter_events`)
	ctx := context.Background()
	src := openPG(t, u, connectors.Options{Pushdown: true})
	req := connectors.Request{Table: "meter_events"}
	conn, err := pgx.Connect(ctx, u)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	tx, err := conn.Begin(ctx)
	if err != nil {
		t.Fatal(err)
	}
	_, _, pds, err := src.preparePush(ctx, tx, req)
	tx.Rollback(ctx)
	if err != nil {
		t.Fatal(err)
	}
	lo := []float64{0, 0.001, 1e9 - 1}
	hi := []float64{999 * 1000000007, 5, 1e9 + 1}
	if pds[0].needProbe {
		t.Fatal("probe needed: no centres from pg_stats")
	}
	for j, col := range pds[0].plan.Values {
		if c := pds[0].shiftBy[j]; !(c >= lo[j] && c <= hi[j]) {
			t.Errorf("column %s: centre %v outside [%v, %v]", col.Name, c, lo[j], hi[j])
		}
	}
	want, err := openPG(t, u, connectors.Options{}).Scan(ctx, req)
	if err != nil {
		t.Fatal(err)
	}
	got, err := src.Scan(ctx, req)
	if err != nil {
		t.Fatal(err)
	}
	demand.SameResult(t, "statistics", want, got, 1e-12)
}

// TestShardedPushdownTimes: on foreign partitions a bucket is floored here
// from a shippable fine bin (date_bin), for timestamptz in a zone with
// daylight saving time and in UTC, for timestamp, by an integer segment;
// the results equal streaming's (to 1e-12) and each shard still receives
// one aggregate statement.
func TestShardedPushdownTimes(t *testing.T) {
	c := pgtest.NewCluster(t, 2)
	c.ShardTable(t, "flows", "id int, read_at timestamptz, logged timestamp, station int, flow float8, pressure float8, temperature float8", "id")
	pgtest.Exec(t, c.URL, `INSERT INTO flows SELECT i, timestamptz '2025-03-28 00:00+00' + i * interval '7 minutes',
			timestamp '2025-10-24 00:00' + i * interval '11 minutes', i % 4,
			40 + 10 * sin(i * 0.01) + cos(i), 3 + 0.1 * sin(i * 0.3), 12 + 5 * sin(i * 0.002) + 0.3 * cos(i * 1.3)
		FROM generate_series(1, 3000) AS i`, "ANALYZE flows")
	ctx := context.Background()
	stream := openPG(t, c.URL, connectors.Options{})
	push := openPG(t, c.URL, connectors.Options{Pushdown: true})
	ams, err := time.LoadLocation("Europe/Amsterdam")
	if err != nil {
		t.Skip("no time zone data:", err)
	}
	cols := []string{"flow", "pressure", "temperature"}
	for _, r := range []struct {
		name   string
		req    connectors.Request
		groups int64
	}{
		{"daily in Amsterdam by station", connectors.Request{Table: "flows", Columns: cols, TimeColumn: "read_at", Bucket: "day", Location: ams, Segment: "station"}, 4 * 96 * 16},
		{"hourly in UTC", connectors.Request{Table: "flows", Columns: cols, TimeColumn: "read_at", Bucket: "hour"}, 400},
		{"weekly wall clock in Amsterdam", connectors.Request{Table: "flows", Columns: cols, TimeColumn: "logged", Bucket: "week", Location: ams}, 40},
		{"monthly wall clock", connectors.Request{Table: "flows", Columns: cols, TimeColumn: "logged", Bucket: "month"}, 40},
	} {
		t.Run(r.name, func(t *testing.T) {
			want, err := stream.Scan(ctx, r.req)
			if err != nil {
				t.Fatal(err)
			}
			got := pushOnShards(t, c, push, r.req)
			c.CheckOneAggregate(t, 1, r.groups)
			demand.SameResult(t, r.name, want, got, 1e-12)
		})
	}
}

// TestPushdownNestedPartitions: a table partitioned in two levels (by
// range of day, then by hash of id) is aggregated leaf by leaf, in one
// snapshot, with --sample applied per leaf (TABLESAMPLE BERNOULLI with the
// seed: the rows streaming's sample of the parent reads); the results
// equal streaming's (identity of two computations, to 1e-12).
func TestPushdownNestedPartitions(t *testing.T) {
	u := pgtestStart(t)
	pgtest.Exec(t, u, `CREATE TABLE meter_daily (id int, day date, district text, temperature float8, metered_volume float8, billed_volume float8) PARTITION BY RANGE (day)`,
		`CREATE TABLE meter_daily_spring PARTITION OF meter_daily FOR VALUES FROM ('2025-03-01') TO ('2025-06-01') PARTITION BY HASH (id)`,
		`CREATE TABLE meter_daily_spring_0 PARTITION OF meter_daily_spring FOR VALUES WITH (MODULUS 2, REMAINDER 0)`,
		`CREATE TABLE meter_daily_spring_1 PARTITION OF meter_daily_spring FOR VALUES WITH (MODULUS 2, REMAINDER 1)`,
		`CREATE TABLE meter_daily_summer PARTITION OF meter_daily FOR VALUES FROM ('2025-06-01') TO ('2025-09-01')`,
		`INSERT INTO meter_daily SELECT i, date '2025-03-01' + (i % 180), 'district ' || (i % 3), 15 + 8 * cos(i * 0.11),
			1e9 + sin(i * 0.37), 1e9 + sin(i * 0.37) + 0.01 * cos(i) FROM generate_series(1, 9000) AS i`,
		`ANALYZE meter_daily`)
	ctx := context.Background()
	stream := openPG(t, u, connectors.Options{})
	push := openPG(t, u, connectors.Options{Pushdown: true, Parallel: 2})
	cols := []string{"temperature", "metered_volume", "billed_volume"}
	for _, req := range []connectors.Request{
		{Table: "meter_daily", Columns: cols},
		{Table: "meter_daily", Columns: cols, TimeColumn: "day", Bucket: "month", Segment: "district"},
		{Table: "meter_daily", Columns: cols, SamplePct: 30, Seed: 11},
	} {
		want, err := stream.Scan(ctx, req)
		if err != nil {
			t.Fatal(err)
		}
		got, err := push.Scan(ctx, req)
		if err != nil {
			t.Fatal(err)
		}
		if got.Partitions != 3 {
			t.Errorf("%d partitions aggregated, want the 3 leaves", got.Partitions)
		}
		if req.SamplePct > 0 && (got.Read < 2000 || got.Read > 3400 || !got.Sampled) {
			t.Errorf("sample of 30%%: %d of 9000 rows read, sampled %v", got.Read, got.Sampled)
		}
		demand.SameResult(t, fmt.Sprintf("%+v", req), want, got, 1e-12)
	}
}

// TestShardedPushdownSample: --sample on foreign partitions keeps about
// the share asked for by a hash of the values (TABLESAMPLE cannot be sent
// to a foreign table), the same rows on every run, in one aggregate per
// shard.
func TestShardedPushdownSample(t *testing.T) {
	c := newShardCluster(t, 20000)
	ctx := context.Background()
	push := openPG(t, c.URL, connectors.Options{Pushdown: true})
	req := connectors.Request{Table: "readings", Columns: shardColumns, SamplePct: 25, Seed: 3}
	a := pushOnShards(t, c, push, req)
	c.CheckOneAggregate(t, 1, 1)
	b, err := push.Scan(ctx, req)
	if err != nil {
		t.Fatal(err)
	}
	// Binomial(20000, 0.25): mean 5000, sd 61; ±5 sd.
	if !a.Sampled || a.Read < 4700 || a.Read > 5300 {
		t.Errorf("25%% sample: %d of 20000 rows, sampled %v", a.Read, a.Sampled)
	}
	demand.SameResult(t, "the same sample twice", a, b, 0)
}

// pushOnShards runs req's pushdown with the shards' statement counts
// reset just before, so that CheckOneAggregate sees this scan alone.
func pushOnShards(t *testing.T, c *pgtest.Cluster, push *Source, req connectors.Request) *connectors.Result {
	t.Helper()
	c.ResetStatements(t)
	got, err := push.Scan(context.Background(), req)
	if err != nil {
		t.Fatal(err)
	}
	return got
}
