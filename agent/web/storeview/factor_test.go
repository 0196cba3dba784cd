package storeview

import (
	"context"
	"encoding/json"
	"io"
	"math"
	"net/http"
	"net/http/httptest"
	"slices"
	"strings"
	"testing"
	"time"

	dto "github.com/prometheus/client_model/go"
	"github.com/prometheus/common/expfmt"
	"github.com/prometheus/common/model"

	"plumb/agent"
	"plumb/agent/demo"
	"plumb/agent/web"
	"plumb/agent/web/webtest"
	"plumb/connectors"
	"plumb/diagnostics"
)

// supplyConfig watches the demo scenario's supply sources beside numeric
// columns, per district, in 28-day windows.
const supplyConfig = `
store: sqlite:%s
sources: {districts: "sqlite:%s"}
watches:
  - name: supply
    source: districts
    table: district_daily
    columns: [supply_source, chlorine_mg_l, temperature_c, rainfall_mm]
    time_column: day
    bucket: day
    window: 28 buckets
    segment_by: district
`

// supplyFactor decodes a stored point's report and returns its entry for
// supply_source.
func supplyFactor(t *testing.T, p agent.Point) diagnostics.GroupReport {
	t.Helper()
	var rep diagnostics.Report
	if err := json.Unmarshal(p.Report, &rep); err != nil {
		t.Fatal(err)
	}
	for _, g := range rep.GVIF {
		if g.Kind == diagnostics.GroupFactor && g.Name == "supply_source" {
			return g
		}
	}
	t.Fatalf("%s segment %q: no supply_source in groups[]", p.At, p.Segment)
	return diagnostics.GroupReport{}
}

// TestFactorDashboard runs the agent's backfill of a watch with a
// categorical column on the demo scenario into a real SQLite store and
// reads it through this view: every point carries the factor of its
// stored report, the whole table and harbour note the new source from
// the first point whose report lists it among its levels, the other
// districts do not, /metrics and the JSON API carry the factor, and
// chromium shows the panel and the note.
func TestFactorDashboard(t *testing.T) {
	ctx := context.Background()
	sc := demo.Default
	cfg, st, now := backfillDemo(t, supplyConfig)
	v := New(st, cfg)
	v.Now = func() time.Time { return now }
	d, err := v.Watch(ctx, "supply")
	if err != nil {
		t.Fatal(err)
	}
	ps, err := st.Points(ctx, "supply", agent.PointQuery{AllSegs: true})
	if err != nil {
		t.Fatal(err)
	}
	bySeg := map[string][]agent.Point{}
	for _, p := range ps {
		bySeg[p.Segment] = append(bySeg[p.Segment], p)
	}
	// The first day a row of harbour draws on the new source, from the
	// generated rows.
	var firstDay time.Time
	for _, r := range sc.Rows() {
		if r.SupplySource == sc.NewSource {
			firstDay = r.Day
			break
		}
	}
	if len(d.Segments) != len(sc.Districts)+1 {
		t.Fatalf("%d series, want the whole table and %d districts", len(d.Segments), len(sc.Districts))
	}
	for _, seg := range d.Segments {
		stored := bySeg[seg.Segment]
		if len(seg.Timeline) != len(stored) || len(stored) == 0 {
			t.Fatalf("segment %q: %d points on the timeline, %d stored", seg.Segment, len(seg.Timeline), len(stored))
		}
		var since time.Time
		for i, p := range stored {
			g := supplyFactor(t, p)
			fs := seg.Timeline[i].Factors
			if len(fs) != 1 || fs[0].Name != g.Name || fs[0].DF != g.DF || !slices.Equal(fs[0].Levels, g.Levels) ||
				!slices.Equal(fs[0].Absent, g.Absent) || (g.GVIF == nil) != (fs[0].GVIF == nil) ||
				g.GVIF != nil && *g.GVIF != *fs[0].GVIF {
				t.Fatalf("segment %q %s: timeline factors %+v, stored %+v", seg.Segment, p.At, fs, g)
			}
			if since.IsZero() && slices.Contains(g.Levels, sc.NewSource) {
				since = p.At
			}
		}
		if !reflectEqual(seg.Factors, seg.Timeline[len(seg.Timeline)-1].Factors) {
			t.Errorf("segment %q: panel factors %+v are not the last point's", seg.Segment, seg.Factors)
		}
		if seg.Segment == connectors.WholeTable || seg.Segment == connectors.SegmentKey(sc.NewSourceIn) {
			// The window ending the midnight after the first day holds it.
			if !since.Equal(firstDay.AddDate(0, 0, 1)) {
				t.Errorf("segment %q: first point listing %s at %v, want the window through %v", seg.Segment, sc.NewSource, since, firstDay)
			}
			want := []web.NewLevel{{Factor: "supply_source", Level: sc.NewSource, Since: since}}
			if !slices.Equal(seg.NewLevels, want) {
				t.Errorf("segment %q: new levels %+v, want %+v", seg.Segment, seg.NewLevels, want)
			}
		} else if len(seg.NewLevels) != 0 || !since.IsZero() {
			t.Errorf("segment %q never draws on %s, yet notes %+v (first listed %v)", seg.Segment, sc.NewSource, seg.NewLevels, since)
		}
	}
	// Noted, not alerted.
	as, err := st.Alerts(ctx, agent.AlertQuery{Watch: "supply"})
	if err != nil {
		t.Fatal(err)
	}
	for _, a := range as {
		t.Logf("alert %s %q segment %q: %s", a.Rule, a.Subject, a.Segment, a.Message)
		if strings.Contains(a.Subject, sc.NewSource) || a.Rule == agent.RuleConstant {
			t.Errorf("alert %s about %q: %s", a.Rule, a.Subject, a.Message)
		}
	}

	srv, err := web.New(web.Options{View: v, Now: v.Now})
	if err != nil {
		t.Fatal(err)
	}
	ts := httptest.NewServer(srv.Handler())
	defer ts.Close()

	// /metrics: the whole table's factor as its last stored report says.
	last := bySeg[connectors.WholeTable][len(bySeg[connectors.WholeTable])-1]
	g := supplyFactor(t, last)
	fams := scrapeMetrics(t, ts.URL)
	wantGVIF, wantAdj := math.Inf(1), math.Inf(1)
	if g.GVIF != nil {
		wantGVIF, wantAdj = *g.GVIF, *g.GVIFAdjusted
	}
	for name, want := range map[string]float64{"plumb_factor_gvif": wantGVIF, "plumb_factor_gvif_adjusted": wantAdj, "plumb_factor_df": float64(g.DF)} {
		if got, ok := metricValue(fams, name, map[string]string{"watch": "supply", "segment": "", "factor": "supply_source"}); !ok || got != want {
			t.Errorf("%s = %v, %v; want %v", name, got, ok, want)
		}
	}
	if got, ok := metricValue(fams, "plumb_factor_levels", map[string]string{"watch": "supply", "segment": "", "factor": "supply_source", "state": "present"}); !ok || got != float64(len(g.Levels)) {
		t.Errorf("plumb_factor_levels present = %v, %v; want %d", got, ok, len(g.Levels))
	}

	// The browser: the panel on every series, the note where it belongs.
	b := webtest.NewBrowser(t)
	note := "new level “" + sc.NewSource + "” of supply_source since " + firstDay.Format(time.DateOnly)
	for _, seg := range append([]string{""}, sc.Districts...) {
		u := ts.URL + "/watches/supply"
		if seg != "" {
			u += "?segment=" + seg
		}
		b.Visit(u)
		b.Screenshot("supply-" + seg + ".png")
		p := webtest.FactorPanel(b)
		if !p.Shown || len(p.Rows) != 1 || p.Rows[0].Factor != "supply_source" || p.Rows[0].GVIFAdjusted == "" || p.Vertices["supply_source"] == 0 {
			t.Errorf("%s: panel %+v", u, p)
		}
		wantNotes := []string{}
		if seg == "" || seg == sc.NewSourceIn {
			wantNotes = []string{note}
		}
		if !slices.Equal(p.Notes, wantNotes) {
			t.Errorf("%s: notes %q, want %q", u, p.Notes, wantNotes)
		}
	}
}

func reflectEqual(a, b []web.Factor) bool {
	x, _ := json.Marshal(a)
	y, _ := json.Marshal(b)
	return string(x) == string(y)
}

func scrapeMetrics(t *testing.T, url string) map[string]*dto.MetricFamily {
	t.Helper()
	resp, err := http.Get(url + "/metrics")
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	body, err := io.ReadAll(resp.Body)
	if err != nil {
		t.Fatal(err)
	}
	parser := expfmt.NewTextParser(model.UTF8Validation)
	fams, err := parser.TextToMetricFamilies(strings.NewReader(string(body)))
	if err != nil {
		t.Fatalf("parsing /metrics: %v", err)
	}
	return fams
}

// metricValue returns the gauge of the family's sample with exactly labels.
func metricValue(fams map[string]*dto.MetricFamily, name string, labels map[string]string) (float64, bool) {
	f, ok := fams[name]
	if !ok {
		return 0, false
	}
	for _, m := range f.Metric {
		got := map[string]string{}
		for _, l := range m.Label {
			got[l.GetName()] = l.GetValue()
		}
		if len(got) == len(labels) && func() bool {
			for k, v := range labels {
				if got[k] != v {
					return false
				}
			}
			return true
		}() && m.Gauge != nil {
			return m.Gauge.GetValue(), true
		}
	}
	return 0, false
}
