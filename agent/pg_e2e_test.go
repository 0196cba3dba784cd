package agent_test

import (
	"context"
	"fmt"
	"math/rand/v2"
	"os"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"plumb/agent"
	"plumb/agent/config"
	"plumb/agent/sqlstore"
	"plumb/connectors"
	_ "plumb/connectors/postgres"
	"plumb/connectors/postgres/pgtest"
)

func TestMain(m *testing.M) { os.Exit(pgtest.Main(m)) }

// TestPostgresEndToEnd runs the drifting table from a PostgreSQL source
// into a PostgreSQL state store: live runs day by day (incremental, with
// the time filter on a date column), then a backfill that must find the
// same alerts.
func TestPostgresEndToEnd(t *testing.T) {
	ctx := context.Background()
	srcURL, storeURL := pgtest.Start(t), pgtest.Start(t)
	conn, err := pgx.Connect(ctx, srcURL)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	if _, err := conn.Exec(ctx, `CREATE TABLE district_daily (day date NOT NULL, district text NOT NULL,
		temperature_c float8, residential_connections float8, commercial_connections float8, billed_volume_m3 numeric(12,3))`); err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(7, 11))
	addDay := func(d int) {
		t.Helper()
		rows := make([][]any, 0, perDay)
		for i := 0; i < perDay; i++ {
			res := 10000 + 500*rng.NormFloat64()
			com := 600 + 50*rng.NormFloat64()
			temp := 17 + 4*rng.NormFloat64()
			billed := 0.1*res + 0.3*com + noiseSD(d)*rng.NormFloat64()
			rows = append(rows, []any{start.AddDate(0, 0, d), fmt.Sprintf("d%02d", i%4), temp, res, com, fmt.Sprintf("%.3f", billed)})
		}
		if _, err := conn.CopyFrom(ctx, pgx.Identifier{"district_daily"},
			[]string{"day", "district", "temperature_c", "residential_connections", "commercial_connections", "billed_volume_m3"},
			pgx.CopyFromRows(rows)); err != nil {
			t.Fatal(err)
		}
	}
	recv := newReceiver(t, "hook-secret")
	cfgFor := func(store string) *config.Config {
		cfg, err := config.Parse([]byte(fmt.Sprintf(`
store: %s
sources: {warehouse: "%s"}
notifiers:
  oncall: {webhook: "%s", secret_env: S}
watches:
  - name: billing
    source: warehouse
    table: district_daily
    columns: [temperature_c, residential_connections, commercial_connections, billed_volume_m3]
    time_column: day
    window: 7 buckets
    segment_by: district
    limits:
      vif: {warn: 5, critical: 10}
      condition: {warn: 1000000, critical: 10000000}
    notify: [oncall]
`, store, srcURL, recv.srv.URL)))
		if err != nil {
			t.Fatal(err)
		}
		if err := cfg.Resolve(config.Resolver{Env: func(string) (string, bool) { return "hook-secret", true }}); err != nil {
			t.Fatal(err)
		}
		return cfg
	}
	cfg := cfgFor(storeURL)
	st := openTestStore(t, cfg)
	clock := &fakeClock{}
	r := &agent.Runner{Store: st, Config: cfg, Clock: clock}
	const days = 50
	var lastRead int64
	for d := 0; d < days; d++ {
		addDay(d)
		clock.Set(start.AddDate(0, 0, d+1).Add(6 * time.Hour))
		out, err := r.Run(ctx, cfg.Watches[0], agent.RunOptions{})
		if err != nil || out.Err != nil {
			t.Fatalf("day %d: %v %v", d, err, out.Err)
		}
		lastRead = out.Run.RowsRead
	}
	// The last run read the rescanned buckets (2), the new day and the
	// filter's two-day margin: 5 days of 40 rows.
	if lastRead != 5*perDay {
		t.Errorf("the last incremental run read %d rows, want %d", lastRead, 5*perDay)
	}
	ps, err := st.Points(ctx, "billing", agent.PointQuery{})
	if err != nil || len(ps) != days {
		t.Fatalf("%d points, %v", len(ps), err)
	}
	segs, err := st.Points(ctx, "billing", agent.PointQuery{Segment: connectors.SegmentKey("d01")})
	if err != nil || len(segs) == 0 {
		t.Fatalf("segment points %d, %v", len(segs), err)
	}
	live := alertKeys(t, st)
	if len(live) == 0 {
		t.Fatal("no alerts from the drift")
	}

	// A backfill into a second PostgreSQL store finds the same alerts.
	store2 := pgtest.Start(t)
	cfg2 := cfgFor(store2)
	st2, err := sqlstore.Open(ctx, cfg2.StoreURL(), sqlstore.Options{Migrate: true})
	if err != nil {
		t.Fatal(err)
	}
	defer st2.Close()
	clock.Set(start.AddDate(0, 0, days).Add(6 * time.Hour))
	out, err := (&agent.Runner{Store: st2, Config: cfg2, Clock: clock}).Run(ctx, cfg2.Watches[0], agent.RunOptions{Kind: agent.RunBackfill})
	if err != nil || out.Err != nil {
		t.Fatal(err, out.Err)
	}
	back := alertKeys(t, st2)
	if fmt.Sprint(live) != fmt.Sprint(back) {
		t.Fatalf("live\n%v\nbackfill\n%v", live, back)
	}
}
