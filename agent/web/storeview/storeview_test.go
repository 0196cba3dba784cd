package storeview

import (
	"context"
	"html"
	"io"
	"net/http"
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
	"plumb/diagnostics"
	"plumb/stream"
)

const configYAML = `
store: sqlite:state.db
sources:
  districts: sqlite:districts.db
watches:
  - name: district_daily
    source: districts
    table: district_daily
    target: demand_m3
    time_column: day
    window: 28d
    segment_by: district
    schedule: "15 2 * * *"
    limits:
      vif: {warn: 5, critical: 10}
      condition: {warn: 15, critical: 30}
      horizon: 14d
  - name: untouched
    source: districts
    query: SELECT temperature_c, rainfall_mm FROM district_daily
    schedule: "@daily"
`

var regressors = []string{
	"temperature_c", "rainfall_mm", "population_served",
	"residential_connections", "commercial_connections", "total_connections",
	"pipe_age_years", "pressure_bar", "metered_volume_m3", "billed_volume_m3",
}

func values(r demo.Row) []float64 {
	return []float64{r.TemperatureC, r.RainfallMM, float64(r.PopulationServed),
		float64(r.ResidentialConnections), float64(r.CommercialConnections), float64(r.TotalConnections),
		r.PipeAgeYears, r.PressureBar, r.MeteredVolumeM3, r.BilledVolumeM3, r.DemandM3}
}

// backfill writes, through the real SQLite store, what a backfill of the
// demo scenario records: one point per 28-day window and segment, from
// diagnostics.Analyze on merged daily accumulators. It returns the last
// whole-table report.
func backfill(t *testing.T, st agent.Store, watch string, alerts []agent.Alert) *diagnostics.Report {
	t.Helper()
	sc := demo.Default
	names := append(slices.Clone(regressors), demo.Target)
	segs := append([]string{""}, sc.Districts...)
	daily := map[string][]*stream.Moments{}
	for _, s := range segs {
		for range sc.Days {
			daily[s] = append(daily[s], stream.NewMoments(names))
		}
	}
	for _, r := range sc.Rows() {
		d := int(r.Day.Sub(sc.Start).Hours() / 24)
		for _, s := range []string{"", r.District} {
			b := stream.NewBlock(len(names), 1, false)
			row, _ := b.AppendRow()
			copy(row, values(r))
			daily[s][d].Add(b)
		}
	}
	var res agent.RunResult
	var last *diagnostics.Report
	for end := 27; end < sc.Days; end++ {
		at := sc.Start.AddDate(0, 0, end+1)
		for _, s := range segs {
			m := daily[s][end-27].Clone()
			for d := end - 26; d <= end; d++ {
				m.Merge(daily[s][d])
			}
			rep, err := diagnostics.Analyze(m, nil, diagnostics.Options{Target: demo.Target})
			if err != nil {
				t.Fatalf("%s day %d: %v", s, end, err)
			}
			p, _, err := agent.PointFromReport(watch, s, at, rep)
			if err != nil {
				t.Fatal(err)
			}
			res.Points = append(res.Points, p)
			if s == "" {
				last = rep
			}
		}
	}
	end := sc.Start.AddDate(0, 0, sc.Days)
	res.Run = agent.Run{Watch: watch, Kind: agent.RunBackfill, Status: agent.StatusOK, StartedAt: end.Add(time.Hour),
		FinishedAt: end.Add(time.Hour + 4*time.Second), RowsRead: int64(len(sc.Rows())), Points: len(res.Points), AsOf: end}
	res.Alerts = alerts
	if _, err := st.CommitRun(context.Background(), &res); err != nil {
		t.Fatal(err)
	}
	// A later run that failed.
	fail := agent.RunResult{Run: agent.Run{Watch: watch, Kind: agent.RunLive, Status: agent.StatusFailed,
		StartedAt: end.Add(25 * time.Hour), FinishedAt: end.Add(25*time.Hour + 10*time.Second),
		Error: "source districts: database is locked"}}
	if _, err := st.CommitRun(context.Background(), &fail); err != nil {
		t.Fatal(err)
	}
	return last
}

func TestStoreView(t *testing.T) {
	ctx := context.Background()
	cfg, err := config.Parse([]byte(configYAML))
	if err != nil {
		t.Fatal(err)
	}
	st, err := sqlstore.Open(ctx, "sqlite:"+filepath.Join(t.TempDir(), "state.db"), sqlstore.Options{Migrate: true})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()

	sc := demo.Default
	exactAt := sc.Start.AddDate(0, 0, sc.ChangeDay+28)
	resolved := exactAt.Add(48 * time.Hour)
	alerts := []agent.Alert{
		{ID: "a-exact", Watch: "district_daily", Rule: agent.RuleExact, Subject: "total_connections", Severity: agent.Critical,
			AsOf: exactAt, OpenedAt: exactAt, UpdatedAsOf: exactAt, UpdatedAt: exactAt, Message: "new exact dependency",
			NotifyState: agent.NotifyPending, Detail: agent.AlertDetail{Equation: "total_connections = residential_connections + commercial_connections",
				Columns: []string{"total_connections"}, Remedy: "drop total_connections"}},
		{ID: "a-level", Watch: "district_daily", Segment: "harbour", Rule: agent.RuleLevel, Subject: "max_vif", Severity: agent.Warning,
			AsOf: exactAt, OpenedAt: exactAt, UpdatedAsOf: exactAt, UpdatedAt: exactAt, ResolvedAsOf: resolved, ResolvedAt: resolved,
			Message: "max VIF above 5", NotifyState: agent.NotifySuppressed},
	}
	last := backfill(t, st, "district_daily", alerts)

	v := New(st, cfg)
	v.Now = func() time.Time { return resolved.Add(24 * time.Hour) }
	ws, err := v.Watches(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if len(ws) != 2 || ws[0].Name != "district_daily" || ws[1].Name != "untouched" || ws[1].Table != "query" {
		t.Fatalf("watches: %+v", ws)
	}
	s := ws[0]
	if s.State != web.StateCritical || s.RunFailures != 1 || s.ConsecutiveFailures != 1 || s.LastRun == nil || s.LastRun.Status != agent.StatusFailed {
		t.Errorf("summary: state %s, failures %d/%d, last run %+v", s.State, s.RunFailures, s.ConsecutiveFailures, s.LastRun)
	}
	if len(s.OpenAlerts) != 1 || s.OpenAlerts[0].ID != "a-exact" {
		t.Errorf("open alerts: %+v", s.OpenAlerts)
	}
	if len(s.Segments) != 1+len(sc.Districts) || s.Segments[0].Segment != "" || len(s.Segments[0].Trend) != 30 {
		t.Errorf("segments: %d, first %q, trend %d", len(s.Segments), s.Segments[0].Segment, len(s.Segments[0].Trend))
	}

	d, err := v.Watch(ctx, "district_daily")
	if err != nil {
		t.Fatal(err)
	}
	whole := d.Segment("")
	if len(whole.Timeline) != sc.Days-27 || whole.Report == nil || len(whole.Forecasts) == 0 && whole.Timeline[len(whole.Timeline)-1].RankDeficiency() == 0 {
		t.Fatalf("whole table: %d points, report %v, %d forecasts", len(whole.Timeline), whole.Report != nil, len(whole.Forecasts))
	}
	if whole.Report.RowsUsed != last.RowsUsed || len(whole.Report.Dependencies) != len(last.Dependencies) {
		t.Errorf("the stored report does not read back: %d rows, %d dependencies", whole.Report.RowsUsed, len(whole.Report.Dependencies))
	}
	p := whole.Timeline[len(whole.Timeline)-1]
	if p.Rank != last.Rank || p.Rows != last.RowsUsed || p.Columns != len(last.Columns) {
		t.Errorf("last point %+v against the report's rank %d rows %d", p, last.Rank, last.RowsUsed)
	}
	if len(d.Runs) != 2 || d.Runs[0].Status != agent.StatusFailed || !d.Runs[1].Backfill || d.Runs[1].Duration != 4*time.Second {
		t.Errorf("runs: %+v", d.Runs)
	}
	if len(d.Alerts) != 2 || d.Alerts[0].Equation == "" {
		t.Errorf("alerts: %+v", d.Alerts)
	}
	for _, a := range d.Alerts {
		if (a.ID == "a-level") != (a.ResolvedAt != nil) {
			t.Errorf("alert %s: resolved %v", a.ID, a.ResolvedAt)
		}
	}
	if _, err := v.Watch(ctx, "nope"); err == nil || !strings.Contains(err.Error(), "nope") {
		t.Errorf("unknown watch: %v", err)
	}
	u, err := v.Watch(ctx, "untouched")
	if err != nil || len(u.Segments) != 1 || u.Segments[0].Latest != nil || u.Summary.State != web.StateOK {
		t.Errorf("a watch without runs: %+v, %v", u, err)
	}

	// The cache: a detail is reused until a run is committed.
	again, err := v.Watch(ctx, "district_daily")
	if err != nil || again.Segment("") == nil || again.Segment("").Report != whole.Report {
		t.Errorf("a second read without a new run should come from the cache")
	}
	more := agent.RunResult{Run: agent.Run{Watch: "district_daily", Kind: agent.RunLive, Status: agent.StatusFailed,
		StartedAt: resolved.Add(time.Hour), FinishedAt: resolved.Add(time.Hour + time.Second), Error: "source districts: timeout"}}
	if _, err := st.CommitRun(ctx, &more); err != nil {
		t.Fatal(err)
	}
	ws, err = v.Watches(ctx)
	if err != nil || ws[0].ConsecutiveFailures != 2 || ws[0].RunFailures != 2 {
		t.Errorf("after a new run the summary should be reread: %+v, %v", ws[0], err)
	}
	d, err = v.Watch(ctx, "district_daily")
	if err != nil || len(d.Runs) != 3 || d.Segment("").Report == nil {
		t.Errorf("after a new run the detail should be reread in full: %d runs, %v", len(d.Runs), err)
	}

	// Served: the page carries the stored exact dependency's equation.
	srv, err := web.New(web.Options{View: v, Now: v.Now})
	if err != nil {
		t.Fatal(err)
	}
	ts := httptest.NewServer(srv.Handler())
	defer ts.Close()
	var eq string
	for _, dep := range last.Dependencies {
		if dep.Kind == diagnostics.KindExact {
			eq = dep.Equation
		}
	}
	if eq == "" {
		t.Fatal("the demo's last window should hold an exact dependency")
	}
	for path, want := range map[string]string{
		"/watches/district_daily": eq,
		"/":                       "district_daily",
		"/metrics":                `plumb_rank_deficiency{segment="",watch="district_daily"} 1`,
	} {
		resp, err := http.Get(ts.URL + path)
		if err != nil {
			t.Fatal(err)
		}
		b, _ := io.ReadAll(resp.Body)
		resp.Body.Close()
		if resp.StatusCode != 200 || !strings.Contains(html.UnescapeString(string(b)), want) {
			t.Errorf("GET %s: %d, %q not in the answer", path, resp.StatusCode, want)
		}
	}
}
