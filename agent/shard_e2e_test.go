package agent_test

import (
	"context"
	"fmt"
	"math"
	"path/filepath"
	"testing"
	"time"

	"plumb/agent"
	"plumb/agent/config"
	"plumb/connectors/postgres/pgtest"
	"plumb/stream"
)

// TestShardedWatchPushdown: a watch with pushdown: true on a table whose
// partitions are foreign tables on two shards stores, run after run, the
// bucket accumulators (daily, per district) of the same watch streaming
// the rows (identity of two computations, to 1e-12 relative), and each
// shard receives one aggregate statement per run and returns no rows but
// the groups. The table is not ANALYZEd on the coordinator: the first run
// reads a few rows of each partition for its centres, the later ones shift
// by the previous run's means.
func TestShardedWatchPushdown(t *testing.T) {
	ctx := context.Background()
	c := pgtest.NewCluster(t, 2)
	c.ShardTable(t, "district_readings", `id int, day date, district text, meter_reading float8,
		temperature_c float8, metered_volume_m3 float8, billed_volume_m3 float8`, "id")
	const perDay = 90
	addDay := func(d int) {
		pgtest.Exec(t, c.URL, fmt.Sprintf(`INSERT INTO district_readings
			SELECT i, date '2025-03-01' + %d, 'district ' || (i %% 3), 1e9 + sin(i * 0.37),
				15 + 8 * cos(i * 0.11), 400 + 50 * sin(i * 0.013) + 3 * cos(i),
				400 + 50 * sin(i * 0.013) + 3 * cos(i) + 0.01 * sin(i * 7)
			FROM generate_series(%d, %d) AS i`, d, d*perDay, (d+1)*perDay-1))
	}
	cfg, err := config.Parse([]byte(fmt.Sprintf(`
store: sqlite:%s
sources: {coordinator: "%s"}
watches:
  - name: streamed
    source: coordinator
    table: district_readings
    columns: [meter_reading, temperature_c, metered_volume_m3, billed_volume_m3]
    time_column: day
    window: 7 buckets
    segment_by: district
    precision: fast
  - name: pushed
    source: coordinator
    table: district_readings
    columns: [meter_reading, temperature_c, metered_volume_m3, billed_volume_m3]
    time_column: day
    window: 7 buckets
    segment_by: district
    pushdown: true
`, filepath.Join(t.TempDir(), "state.db"), c.URL)))
	if err != nil {
		t.Fatal(err)
	}
	st := openTestStore(t, cfg)
	clock := &fakeClock{}
	r := &agent.Runner{Store: st, Config: cfg, Clock: clock}
	day0 := time.Date(2025, 3, 1, 0, 0, 0, 0, time.UTC)
	for d := 0; d < 5; d++ {
		addDay(d)
		clock.Set(day0.AddDate(0, 0, d+1).Add(6 * time.Hour))
		if out, err := r.Run(ctx, cfg.Watch("streamed"), agent.RunOptions{}); err != nil || out.Err != nil {
			t.Fatalf("day %d streamed: %v %v", d, err, out.Err)
		}
		c.ResetStatements(t)
		if out, err := r.Run(ctx, cfg.Watch("pushed"), agent.RunOptions{}); err != nil || out.Err != nil {
			t.Fatalf("day %d pushed: %v %v", d, err, out.Err)
		}
		if d > 0 {
			// Rescanned buckets (2), the new day and the filter's margin:
			// at most 5 days × 3 districts, and complete rows only.
			c.CheckOneAggregate(t, 1, 15)
		}
		sameBuckets(t, st, day0, day0.AddDate(0, 0, d+1))
	}
}

// sameBuckets compares the stored buckets of the two watches.
func sameBuckets(t *testing.T, st agent.Store, from, to time.Time) {
	t.Helper()
	ctx := context.Background()
	a, err := st.Buckets(ctx, "streamed", from, to)
	if err != nil {
		t.Fatal(err)
	}
	b, err := st.Buckets(ctx, "pushed", from, to)
	if err != nil {
		t.Fatal(err)
	}
	if len(a) != len(b) || len(a) == 0 {
		t.Fatalf("%d buckets streamed, %d pushed", len(a), len(b))
	}
	for i := range a {
		if !a[i].Start.Equal(b[i].Start) || a[i].Segment != b[i].Segment {
			t.Fatalf("bucket %d: %v %s streamed, %v %s pushed", i, a[i].Start, a[i].Segment, b[i].Start, b[i].Segment)
		}
		ma, err := stream.UnmarshalMoments(a[i].Moments)
		if err != nil {
			t.Fatal(err)
		}
		mb, err := stream.UnmarshalMoments(b[i].Moments)
		if err != nil {
			t.Fatal(err)
		}
		what := fmt.Sprintf("bucket %s %s", a[i].Start.Format("2006-01-02"), a[i].Segment)
		if ma.N() != mb.N() {
			t.Fatalf("%s: %d rows streamed, %d pushed", what, ma.N(), mb.N())
		}
		for j := 0; j < ma.P(); j++ {
			if e := relErr(ma.Mean(j), mb.Mean(j)); e > 1e-12 {
				t.Errorf("%s: mean of %s: %v streamed, %v pushed", what, ma.Names()[j], ma.Mean(j), mb.Mean(j))
			}
			for k := j; k < ma.P(); k++ {
				// Co-moments against the diagonal's scale, so that a
				// near-zero off-diagonal entry is judged by its columns'
				// spreads.
				ref := math.Sqrt(ma.At(j, j) * ma.At(k, k))
				if e := math.Abs(ma.At(j, k)-mb.At(j, k)) / ref; e > 1e-12 {
					t.Errorf("%s: co-moment %s·%s: %v streamed, %v pushed (%.1e)", what, ma.Names()[j], ma.Names()[k], ma.At(j, k), mb.At(j, k), e)
				}
			}
		}
	}
}

func relErr(a, b float64) float64 {
	if a == b {
		return 0
	}
	return math.Abs(a-b) / math.Max(math.Abs(a), math.Abs(b))
}
