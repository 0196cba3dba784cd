package web

import (
	"context"
	"slices"
	"strings"
	"testing"

	"plumb/agent/web/webtest"
)

func TestBrowserDashboard(t *testing.T) {
	f := buildDemoFixture(t)
	if f.equation == "" || f.exactFrom.IsZero() {
		t.Fatal("the demo data should carry an exact dependency in district_daily (total_connections); the fixture found none")
	}
	ts := newTestServer(t, f.view, "", f.now)
	b := webtest.NewBrowser(t)

	// Overview: every watch listed with its state, linked to its page.
	b.Visit(ts.URL + "/")
	b.Screenshot("overview.png")
	rows := webtest.Overview(b)
	want := map[string]string{"district_daily": "critical", "district_volumes": "", "zone_pressure": "blind", "district_supply": ""}
	if len(rows) != len(want) {
		t.Fatalf("overview lists %d watches, want %d: %v", len(rows), len(want), rows)
	}
	for _, r := range rows {
		st, ok := want[r.Name]
		if !ok {
			t.Errorf("unexpected watch %q", r.Name)
			continue
		}
		if st != "" && r.State != st {
			t.Errorf("watch %s: state %q, want %q", r.Name, r.State, st)
		}
		if r.Href != "/watches/"+r.Name {
			t.Errorf("watch %s links to %q", r.Name, r.Href)
		}
		if wantSpark := r.Name != "zone_pressure"; (r.Sparklines == 1) != wantSpark {
			t.Errorf("watch %s: %d sparklines", r.Name, r.Sparklines)
		}
	}

	// The segmented watch counts its districts, not the whole table too.
	if sub := webtest.Eval[string](b, `document.querySelector('tr[data-watch="district_daily"] .sub').textContent`); !strings.Contains(sub, "by district (4)") {
		t.Errorf("overview: district_daily says %q, want by district (4)", sub)
	}

	// The Alerts link opens a page of the open alerts, not raw JSON.
	open, err := allAlerts(context.Background(), f.view, true)
	if err != nil {
		t.Fatal(err)
	}
	// Wait for the new page's footer: the whole page is parsed then.
	b.Click(`header nav a[href="/alerts"]`, "body:has(table[data-alerts]) footer")
	if ct := webtest.Eval[string](b, "document.contentType"); ct != "text/html" {
		t.Errorf("the Alerts link opens %s, want an HTML page", ct)
	}
	if n := webtest.Eval[int](b, `document.querySelectorAll("tr[data-alert]").length`); n != len(open) {
		t.Errorf("alerts page: %d rows, want the %d open alerts", n, len(open))
	}
	b.Visit(ts.URL + "/alerts")
	b.Screenshot("alerts.png")
	b.Visit(ts.URL + "/")

	// Follow the link to the watch page.
	b.Click(`a.watch[href="/watches/district_daily"]`, "#tl-cond")
	if loc := webtest.Eval[string](b, "location.pathname"); loc != "/watches/district_daily" {
		t.Errorf("the link led to %s", loc)
	}
	b.Visit(ts.URL + "/watches/district_daily")
	b.Screenshot("watch.png")
	d, err := f.view.Watch(context.Background(), "district_daily")
	if err != nil {
		t.Fatal(err)
	}
	whole := d.Segment("")
	p := webtest.WatchPage(b)
	n := len(whole.Report.Columns)
	for what, c := range map[string][2]int{
		"condition series":    {p.Series["condition_number"], 1},
		"max VIF series":      {p.Series["max_vif"], 1},
		"condition vertices":  {p.Vertices["condition_number"], len(whole.Timeline)},
		"max VIF vertices":    {p.Vertices["max_vif"], len(whole.Timeline)},
		"warn levels":         {p.Levels["warn"], 2},
		"critical levels":     {p.Levels["critical"], 2},
		"charts":              {p.Charts, 5}, // 2 timelines, VIF bars, heat map, variance split
		"legends":             {p.Legends, 5},
		"VIF bars":            {len(p.Bars), n},
		"heat map cells":      {p.HeatCells, n * n},
		"variance split rows": {p.Coefficients, len(whole.Report.Regression.Attribution)},
		"run log rows":        {p.Runs, len(d.Runs)},
		"foreign elements":    {p.Foreign, 0},
	} {
		if c[0] != c[1] {
			t.Errorf("watch page: %s: %d, want %d", what, c[0], c[1])
		}
	}
	if !p.HasEquation(f.equation) {
		t.Errorf("exact-dependency equation %q not on the page; equations there: %q", f.equation, p.Equations)
	}
	if !strings.Contains(f.equation, "total_connections") {
		t.Errorf("the demo's exact dependency should involve total_connections: %q", f.equation)
	}

	// The stuck sensor's segment: a constant column shown as undefined.
	b.Visit(ts.URL + "/watches/district_daily?segment=hillside")
	b.Screenshot("watch-hillside.png")
	if p := webtest.WatchPage(b); !slices.Contains(p.Undefined, "pressure_bar") {
		t.Errorf("hillside: pressure_bar should be drawn as undefined (constant); undefined bars: %q", p.Undefined)
	}

	// The other watches' pages load cleanly too.
	b.Visit(ts.URL + "/watches/district_volumes")
	b.Screenshot("watch-volumes.png")
	if p := webtest.WatchPage(b); p.Series["forecast-range"] != 2 || p.Series["forecast"] != 2 {
		t.Errorf("district_volumes: forecast cones %d, lines %d; want 2 each", p.Series["forecast-range"], p.Series["forecast"])
	}
	b.Visit(ts.URL + "/watches/zone_pressure")
	b.Screenshot("watch-blind.png")
	if p := webtest.WatchPage(b); p.FailedRuns != 4 {
		t.Errorf("zone_pressure: %d failed runs in the log, want 4", p.FailedRuns)
	}
}
