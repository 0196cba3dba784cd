package storeview

import (
	"context"
	"encoding/json"
	"fmt"
	"net/http/httptest"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"plumb/agent"
	"plumb/agent/config"
	"plumb/agent/demo"
	"plumb/agent/sqlstore"
	"plumb/agent/web"
	"plumb/agent/web/webtest"
	"plumb/connectors"
	"plumb/diagnostics"

	_ "plumb/connectors/sqlite"
)

const demoConfig = `
store: sqlite:%s
sources: {districts: "sqlite:%s"}
watches:
  - name: district_daily
    source: districts
    table: district_daily
    target: demand_m3
    time_column: day
    bucket: day
    window: 28 buckets
    segment_by: district
    limits:
      vif: {warn: 5, critical: 10}
      condition: {warn: 15, critical: 30}
      horizon: 14d
  - name: district_volumes
    source: districts
    table: district_daily
    columns: [temperature_c, rainfall_mm, metered_volume_m3, billed_volume_m3]
    time_column: day
    bucket: day
    window: 14 buckets
    limits:
      vif: {warn: 5, critical: 10}
      condition: {warn: 15, critical: 30}
      horizon: 14d
`

// fixedClock is the agent's clock in the test.
type fixedClock struct{ t time.Time }

func (c fixedClock) Now() time.Time { return c.t }

// backfillDemo writes the demo scenario's database, opens a SQLite state
// store for the configuration configYAML (a format with the store's and
// the database's paths, in that order) and backfills every watch as of
// the morning after the scenario's last day, which it returns.
func backfillDemo(t *testing.T, configYAML string) (*config.Config, *sqlstore.Store, time.Time) {
	t.Helper()
	ctx := context.Background()
	dir := t.TempDir()
	sc := demo.Default
	dbPath := filepath.Join(dir, "districts.db")
	if err := sc.WriteSQLite(ctx, dbPath); err != nil {
		t.Fatal(err)
	}
	cfg, err := config.Parse([]byte(fmt.Sprintf(configYAML, filepath.Join(dir, "state.db"), dbPath)))
	if err != nil {
		t.Fatal(err)
	}
	if err := cfg.Resolve(config.Resolver{Env: func(string) (string, bool) { return "", false }}); err != nil {
		t.Fatal(err)
	}
	st, err := sqlstore.Open(ctx, cfg.StoreURL(), sqlstore.Options{Migrate: true})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { st.Close() })
	now := sc.Start.AddDate(0, 0, sc.Days).Add(3 * time.Hour)
	run := &agent.Runner{Store: st, Config: cfg, Clock: fixedClock{now}}
	for _, w := range cfg.Watches {
		out, err := run.Run(ctx, w, agent.RunOptions{Kind: agent.RunBackfill})
		if err != nil || out.Err != nil {
			t.Fatalf("backfill %s: %v / %v", w.Name, err, out.Err)
		}
	}
	return cfg, st, now
}

// TestDemoDashboard runs the whole chain on the demo scenario: the demo
// database, the agent's backfill into a real SQLite state store, this
// view, the HTTP server, and chromium reading the pages.
func TestDemoDashboard(t *testing.T) {
	ctx := context.Background()
	sc := demo.Default
	cfg, st, now := backfillDemo(t, demoConfig)

	// The exact dependency the agent stored for the whole table.
	ps, err := st.Points(ctx, "district_daily", agent.PointQuery{Segment: "", Limit: 1})
	if err != nil || len(ps) != 1 {
		t.Fatalf("points: %v, %v", ps, err)
	}
	var rep diagnostics.Report
	if err := json.Unmarshal(ps[0].Report, &rep); err != nil {
		t.Fatal(err)
	}
	var eq string
	for _, d := range rep.Dependencies {
		if d.Kind == diagnostics.KindExact {
			eq = d.Equation
		}
	}
	if eq == "" {
		t.Fatalf("the demo's last window should hold the exact dependency of total_connections; dependencies: %+v", rep.Dependencies)
	}

	v := New(st, cfg)
	v.Now = func() time.Time { return now }
	srv, err := web.New(web.Options{View: v, Now: v.Now})
	if err != nil {
		t.Fatal(err)
	}
	ts := httptest.NewServer(srv.Handler())
	defer ts.Close()

	// An open alert whose message speaks of a later window than the one
	// that raised it says, on the alerts page, on what data it was
	// updated.
	open, err := st.Alerts(ctx, agent.AlertQuery{OpenOnly: true})
	if err != nil {
		t.Fatal(err)
	}
	page, later := get(t, ts.URL+"/alerts"), 0
	for _, a := range open {
		if a.UpdatedAsOf.After(a.AsOf) {
			later++
			if want := "updated on data through " + connectors.DataThrough(a.UpdatedAsOf); !strings.Contains(page, want) {
				t.Errorf("alert %s: the alerts page does not say %q", a.ID, want)
			}
		}
	}
	if later == 0 {
		t.Errorf("none of the demo's %d open alerts was updated after it was raised", len(open))
	}

	b := webtest.NewBrowser(t)
	b.Visit(ts.URL + "/")
	b.Screenshot("demo-overview.png")
	rows := webtest.Overview(b)
	if len(rows) != len(cfg.Watches) {
		t.Fatalf("overview: %+v", rows)
	}
	for _, r := range rows {
		if r.Href != "/watches/"+r.Name || r.Sparklines != 1 {
			t.Errorf("overview row %+v", r)
		}
	}
	b.Click(`a.watch[href="/watches/district_daily"]`, "#tl-cond")
	b.Visit(ts.URL + "/watches/district_daily")
	b.Screenshot("demo-watch.png")
	d, err := v.Watch(ctx, "district_daily")
	if err != nil {
		t.Fatal(err)
	}
	p := webtest.WatchPage(b)
	whole := d.Segment("")
	if p.Series["condition_number"] != 1 || p.Series["max_vif"] != 1 || p.Vertices["condition_number"] != len(whole.Timeline) {
		t.Errorf("timelines: %v, %v vertices for %d points", p.Series, p.Vertices, len(whole.Timeline))
	}
	if p.Charts != 5 || len(p.Bars) != len(rep.Columns) || p.HeatCells != len(rep.Columns)*len(rep.Columns) || p.Foreign != 0 {
		t.Errorf("charts %d, bars %d, cells %d, foreign %d", p.Charts, len(p.Bars), p.HeatCells, p.Foreign)
	}
	if !p.HasEquation(eq) {
		t.Errorf("equation %q not on the page: %q", eq, p.Equations)
	}
	b.Visit(ts.URL + "/watches/district_daily?segment=" + sc.StuckDistrict)
	b.Screenshot("demo-stuck.png")
	if p := webtest.WatchPage(b); !slices.Contains(p.Undefined, "pressure_bar") {
		t.Errorf("%s: pressure_bar should be drawn as constant; undefined: %q", sc.StuckDistrict, p.Undefined)
	}
	b.Visit(ts.URL + "/watches/district_volumes")
	b.Screenshot("demo-volumes.png")
}
