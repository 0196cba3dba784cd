package web

import (
	"context"
	"math"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"plumb/agent/demo"
	"plumb/agent/web/webtest"
	"plumb/connectors"
	"plumb/diagnostics"
)

// firstDayOf returns the first day of the scenario on which district
// (any, when "") draws on source, from the generated rows themselves.
func firstDayOf(t *testing.T, source, district string) time.Time {
	t.Helper()
	for _, r := range demo.Default.Rows() {
		if r.SupplySource == source && (district == "" || r.District == district) {
			return r.Day
		}
	}
	t.Fatalf("no row draws on %s", source)
	return time.Time{}
}

// reportFactor returns the factor entry of name in a report's groups[].
func reportFactor(t *testing.T, rep *diagnostics.Report, name string) diagnostics.GroupReport {
	t.Helper()
	for _, g := range rep.GVIF {
		if g.Kind == diagnostics.GroupFactor && g.Name == name {
			return g
		}
	}
	t.Fatalf("report has no factor %s: %+v", name, rep.GVIF)
	return diagnostics.GroupReport{}
}

// TestFactorSeries: the supply watch's series carry the factor of their
// last report, and the new source is noted in the series whose rows hold
// it — the whole table and the district that receives it — dated to the
// first day a row draws on it, and in no other.
func TestFactorSeries(t *testing.T) {
	f := buildDemoFixture(t)
	sc := demo.Default
	d, err := f.view.Watch(context.Background(), "district_supply")
	if err != nil {
		t.Fatal(err)
	}
	first := firstDayOf(t, sc.NewSource, "")
	if first.Before(sc.Start.AddDate(0, 0, sc.NewSourceDay)) {
		t.Fatalf("%s drawn on %v, before NewSourceDay", sc.NewSource, first)
	}
	for _, seg := range d.Segments {
		g := reportFactor(t, seg.Report, "supply_source")
		if len(seg.Factors) != 1 || seg.Factors[0].Name != "supply_source" {
			t.Fatalf("segment %q: factors %+v", seg.Segment, seg.Factors)
		}
		fc := seg.Factors[0]
		if fc.DF != g.DF || *fc.GVIF != *g.GVIF || *fc.GVIFAdjusted != *g.GVIFAdjusted ||
			!slices.Equal(fc.Levels, g.Levels) || !slices.Equal(fc.Absent, g.Absent) || fc.Base != g.Base {
			t.Errorf("segment %q: factor %+v, report %+v", seg.Segment, fc, g)
		}
		// GVIF^(1/(2·df)) by its definition (exact arithmetic up to rounding).
		if want := math.Pow(*fc.GVIF, 1/(2*float64(fc.DF))); math.Abs(*fc.GVIFAdjusted-want) > 1e-12*want {
			t.Errorf("segment %q: GVIF^(1/(2·df)) %v, want %v", seg.Segment, *fc.GVIFAdjusted, want)
		}
		receives := seg.Segment == connectors.WholeTable || seg.Segment == connectors.SegmentKey(sc.NewSourceIn)
		if !receives {
			if len(seg.NewLevels) != 0 {
				t.Errorf("segment %q never draws on %s, yet notes %+v", seg.Segment, sc.NewSource, seg.NewLevels)
			}
			if !slices.Contains(fc.Absent, sc.NewSource) {
				t.Errorf("segment %q: %s should be absent: %+v", seg.Segment, sc.NewSource, fc)
			}
			continue
		}
		want := firstDayOf(t, sc.NewSource, "")
		if len(seg.NewLevels) != 1 {
			t.Fatalf("segment %q: new levels %+v, want %s", seg.Segment, seg.NewLevels, sc.NewSource)
		}
		n := seg.NewLevels[0]
		if n.Factor != "supply_source" || n.Level != sc.NewSource || !n.Since.Equal(want.AddDate(0, 0, 1)) {
			t.Errorf("segment %q: new level %+v, want %s since the window ending after %v", seg.Segment, n, sc.NewSource, want)
		}
		if got := n.Note(connectors.DataThrough); got != "new level “desalinated” of supply_source since "+want.Format(time.DateOnly) {
			t.Errorf("note %q", got)
		}
	}
}

// TestNewLevels: a level is new when the rows up to the first full
// window lack it and a later window's hold it; levels seen while the
// first window fills are not new; a factor the baseline lacks has none.
func TestNewLevels(t *testing.T) {
	day := func(d int) time.Time { return time.Date(2026, 3, d, 0, 0, 0, 0, time.UTC) }
	fs := func(levels, absent []string) []Factor {
		return []Factor{{Name: "tariff_band", Levels: levels, Absent: absent}}
	}
	tl := []Point{
		{At: day(1), Filling: true, Factors: fs([]string{"A"}, []string{"C"})},
		{At: day(2), Filling: true, Factors: fs([]string{"A", "B"}, []string{"C"})},
		{At: day(3), Factors: fs([]string{"A"}, []string{"B", "C"})},
		{At: day(4), Factors: append(fs([]string{"A", "B", "C"}, nil), Factor{Name: "day_type", Levels: []string{"weekday", "weekend"}})},
		{At: day(5), Factors: fs([]string{"A", "D"}, []string{"B", "C"})},
		{At: day(6), Factors: fs([]string{"A", "C", "D"}, []string{"B"})},
	}
	got := newLevels(tl)
	want := []NewLevel{{"tariff_band", "C", day(4)}, {"tariff_band", "D", day(5)}}
	if !slices.Equal(got, want) {
		t.Errorf("new levels %+v, want %+v", got, want)
	}
	if got := newLevels(tl[:2]); len(got) != 0 {
		t.Errorf("no full window yet: %+v", got)
	}
	if got := newLevels(tl[2:3]); len(got) != 0 {
		t.Errorf("one point: %+v", got)
	}
}

func TestMetricsFactors(t *testing.T) {
	f := buildDemoFixture(t)
	sc := demo.Default
	ts := newTestServer(t, f.view, "", f.now)
	fams := scrape(t, ts.URL, "")
	d, err := f.view.Watch(context.Background(), "district_supply")
	if err != nil {
		t.Fatal(err)
	}
	for _, seg := range d.Segments {
		g := reportFactor(t, seg.Report, "supply_source")
		l := map[string]string{"watch": "district_supply", "segment": connectors.SegmentLabel(seg.Segment), "factor": "supply_source"}
		// Exact: the text format round-trips float64 (common practice, no source).
		for name, want := range map[string]float64{
			"plumb_factor_gvif":          *g.GVIF,
			"plumb_factor_gvif_adjusted": *g.GVIFAdjusted,
			"plumb_factor_df":            float64(g.DF),
		} {
			if got, ok := sample(t, fams, name, l); !ok || got != want {
				t.Errorf("%s%v = %v, %v; want %v", name, l, got, ok, want)
			}
		}
		present, absent := float64(len(g.Levels)), float64(len(g.Absent))
		// The scenario: four sources in all; only harbour and the whole
		// table draw on the new one in the last window.
		wantAbsent := 1.0
		if seg.Segment == connectors.WholeTable || seg.Segment == connectors.SegmentKey(sc.NewSourceIn) {
			wantAbsent = 0
		}
		if absent != wantAbsent || present+absent != 4 {
			t.Errorf("segment %q: %v present, %v absent levels in the report", seg.Segment, present, absent)
		}
		for state, want := range map[string]float64{"present": present, "absent": absent} {
			sl := map[string]string{"watch": "district_supply", "segment": l["segment"], "factor": "supply_source", "state": state}
			if got, ok := sample(t, fams, "plumb_factor_levels", sl); !ok || got != want {
				t.Errorf("plumb_factor_levels%v = %v, %v; want %v", sl, got, ok, want)
			}
		}
	}
	// Watches without a categorical column send no factor series.
	for _, m := range fams["plumb_factor_gvif"].GetMetric() {
		for _, lp := range m.GetLabel() {
			if lp.GetName() == "watch" && lp.GetValue() != "district_supply" {
				t.Errorf("plumb_factor_gvif for watch %s", lp.GetValue())
			}
		}
	}
}

func TestAPIFactors(t *testing.T) {
	f := buildDemoFixture(t)
	sc := demo.Default
	ts := newTestServer(t, f.view, "", f.now)
	var detail struct {
		Segments []struct {
			WholeTable bool    `json:"whole_table"`
			Segment    *string `json:"segment"`
			Factors    []struct {
				Name         string   `json:"name"`
				DF           int      `json:"df"`
				GVIF         *float64 `json:"gvif"`
				GVIFAdjusted *float64 `json:"gvif_adjusted"`
				Levels       []string `json:"levels"`
				Absent       []string `json:"absent"`
				Base         string   `json:"base"`
			} `json:"factors"`
			NewLevels []struct {
				Factor string    `json:"factor"`
				Level  string    `json:"level"`
				Since  time.Time `json:"since"`
			} `json:"new_levels"`
		} `json:"segments"`
	}
	getJSON(t, ts.URL+"/api/watches/district_supply", 200, &detail)
	d, _ := f.view.Watch(context.Background(), "district_supply")
	if len(detail.Segments) != len(d.Segments) {
		t.Fatalf("%d segments, want %d", len(detail.Segments), len(d.Segments))
	}
	for i, s := range detail.Segments {
		g := reportFactor(t, d.Segments[i].Report, "supply_source")
		if len(s.Factors) != 1 || s.Factors[0].GVIF == nil || *s.Factors[0].GVIF != *g.GVIF || s.Factors[0].DF != g.DF ||
			!slices.Equal(s.Factors[0].Levels, g.Levels) || s.Factors[0].Base != g.Base || s.Factors[0].Absent == nil {
			t.Errorf("segment %d: factors %+v, report %+v", i, s.Factors, g)
		}
		if s.NewLevels == nil {
			t.Errorf("segment %d: new_levels missing", i)
		}
		if s.WholeTable && (len(s.NewLevels) != 1 || s.NewLevels[0].Level != sc.NewSource) {
			t.Errorf("whole table: new_levels %+v", s.NewLevels)
		}
	}
	// Each point of the history carries the factor; watches without one an
	// empty list.
	var hist []struct {
		Factors []struct {
			Name         string   `json:"name"`
			GVIFAdjusted *float64 `json:"gvif_adjusted"`
		} `json:"factors"`
	}
	getJSON(t, ts.URL+"/api/watches/district_supply/history", 200, &hist)
	whole := d.Segment("")
	if len(hist) != len(whole.Timeline) {
		t.Fatalf("history: %d points", len(hist))
	}
	for i, h := range hist {
		if len(h.Factors) != 1 || h.Factors[0].GVIFAdjusted == nil || *h.Factors[0].GVIFAdjusted != *whole.Timeline[i].Factors[0].GVIFAdjusted {
			t.Errorf("point %d: factors %+v", i, h.Factors)
		}
	}
	var plain []map[string]any
	getJSON(t, ts.URL+"/api/watches/district_volumes/history", 200, &plain)
	if fs, ok := plain[0]["factors"].([]any); !ok || len(fs) != 0 {
		t.Errorf("a watch without categorical columns: factors %v, want []", plain[0]["factors"])
	}
}

// TestBrowserFactors: the watch page of the supply watch shows the
// categorical-columns panel with the last report's numbers formatted as
// the VIFs are, and the note of the new source where its rows hold it.
func TestBrowserFactors(t *testing.T) {
	f := buildDemoFixture(t)
	sc := demo.Default
	ts := newTestServer(t, f.view, "", f.now)
	d, err := f.view.Watch(context.Background(), "district_supply")
	if err != nil {
		t.Fatal(err)
	}
	b := webtest.NewBrowser(t)
	want := "new level “desalinated” of supply_source since " + firstDayOf(t, sc.NewSource, "").Format(time.DateOnly)
	for _, seg := range []string{"", sc.NewSourceIn, sc.StuckDistrict} {
		u := ts.URL + "/watches/district_supply"
		key := connectors.WholeTable
		if seg != "" {
			u += "?segment=" + seg
			key = connectors.SegmentKey(seg)
		}
		b.Visit(u)
		b.Screenshot("supply-" + seg + ".png")
		p := webtest.FactorPanel(b)
		g := reportFactor(t, d.Segment(key).Report, "supply_source")
		// The chart: one line, a vertex per point where the GVIF is defined.
		defined := 0
		for _, pt := range d.Segment(key).Timeline {
			if f := factorOf(pt.Factors, "supply_source"); f != nil && f.GVIFAdjusted != nil {
				defined++
			}
		}
		if wp := webtest.WatchPage(b); wp.Series["factor:supply_source"] != 1 || p.Vertices["supply_source"] != defined || defined == 0 {
			t.Errorf("%s: factor chart series %v, vertices %v; want 1 line of %d points", u, wp.Series, p.Vertices, defined)
		}
		if len(p.Rows) != 1 {
			t.Fatalf("%s: factor rows %+v", u, p.Rows)
		}
		r := p.Rows[0]
		if r.Factor != "supply_source" || r.GVIF != fmtNum(*g.GVIF) || r.GVIFAdjusted != fmtNum(*g.GVIFAdjusted) ||
			r.DF != strconv.Itoa(g.DF) || !strings.HasPrefix(r.Base, g.Base) {
			t.Errorf("%s: row %+v, report %+v", u, r, g)
		}
		for _, l := range g.Levels {
			if !strings.Contains(r.Present, l) {
				t.Errorf("%s: level %s not among the present: %q", u, l, r.Present)
			}
		}
		if seg == sc.StuckDistrict {
			if len(p.Notes) != 0 || !strings.Contains(r.Absent, sc.NewSource) {
				t.Errorf("%s: notes %q, absent %q; want no note and %s absent", u, p.Notes, r.Absent, sc.NewSource)
			}
			continue
		}
		if !slices.Equal(p.Notes, []string{want}) {
			t.Errorf("%s: notes %q, want %q", u, p.Notes, want)
		}
		// Noted, not alerted: no alert of the watch names the new level.
		for _, a := range d.Alerts {
			if strings.Contains(a.Message, sc.NewSource) {
				t.Errorf("alert about the new level: %s", a.Message)
			}
		}
	}
	// A watch without categorical columns has no panel.
	b.Visit(ts.URL + "/watches/district_volumes")
	if p := webtest.FactorPanel(b); p.Shown || len(p.Rows) != 0 {
		t.Errorf("district_volumes: factor panel %+v", p)
	}
}
