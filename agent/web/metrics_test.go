package web

import (
	"context"
	"errors"
	"math"
	"os"
	"regexp"
	"strings"
	"testing"

	dto "github.com/prometheus/client_model/go"
	"github.com/prometheus/common/expfmt"
	"github.com/prometheus/common/model"

	"plumb/connectors"
)

// documentedFamilies reads the family names from METRICS.md, the section
// the README carries.
func documentedFamilies(t *testing.T) []string {
	t.Helper()
	b, err := os.ReadFile("METRICS.md")
	if err != nil {
		t.Fatal(err)
	}
	var out []string
	for _, m := range regexp.MustCompile("(?m)^\\| `(plumb_[a-z_]+)` \\|").FindAllStringSubmatch(string(b), -1) {
		out = append(out, m[1])
	}
	if len(out) < 10 {
		t.Fatalf("METRICS.md documents only %d families: %v", len(out), out)
	}
	return out
}

func scrape(t *testing.T, url, token string) map[string]*dto.MetricFamily {
	t.Helper()
	code, h, body := get(t, url+"/metrics", token)
	if code != 200 {
		t.Fatalf("/metrics: %d\n%s", code, body)
	}
	if ct := h.Get("Content-Type"); !strings.HasPrefix(ct, "text/plain") {
		t.Errorf("/metrics Content-Type %q, want the text format", ct)
	}
	p := expfmt.NewTextParser(model.UTF8Validation)
	fams, err := p.TextToMetricFamilies(strings.NewReader(body))
	if err != nil {
		t.Fatalf("parsing /metrics: %v\n%s", err, body)
	}
	return fams
}

// sample returns the value of the family's sample with exactly labels.
func sample(t *testing.T, fams map[string]*dto.MetricFamily, name string, labels map[string]string) (float64, bool) {
	t.Helper()
	f, ok := fams[name]
	if !ok {
		return 0, false
	}
next:
	for _, m := range f.Metric {
		got := map[string]string{}
		for _, l := range m.Label {
			got[l.GetName()] = l.GetValue()
		}
		for k, v := range labels {
			if got[k] != v {
				continue next
			}
		}
		for k, v := range got {
			if labels[k] != v {
				continue next
			}
		}
		switch {
		case m.Gauge != nil:
			return m.Gauge.GetValue(), true
		case m.Counter != nil:
			return m.Counter.GetValue(), true
		}
	}
	return 0, false
}

func TestMetrics(t *testing.T) {
	f := buildDemoFixture(t)
	ts := newTestServer(t, f.view, "", f.now)
	fams := scrape(t, ts.URL, "")
	for _, name := range documentedFamilies(t) {
		if _, ok := fams[name]; !ok {
			t.Errorf("documented family %s missing from /metrics", name)
		}
	}
	for name := range fams {
		if !strings.HasPrefix(name, "plumb_") {
			t.Errorf("family %s does not start with plumb_", name)
		}
	}

	// Values are those of the last run, segment by segment.
	d, err := f.view.Watch(context.Background(), "district_daily")
	if err != nil {
		t.Fatal(err)
	}
	for _, seg := range d.Segments {
		l := map[string]string{"watch": "district_daily", "segment": connectors.SegmentLabel(seg.Segment)}
		p := seg.Latest
		for name, want := range map[string]float64{
			"plumb_condition_number": p.ConditionNumber,
			"plumb_max_vif":          p.MaxVIF,
			"plumb_rank_deficiency":  float64(p.RankDeficiency()),
			"plumb_rows_used":        float64(p.Rows),
			"plumb_rows_dropped":     float64(p.RowsDropped),
		} {
			got, ok := sample(t, fams, name, l)
			if !ok {
				t.Errorf("%s%v missing", name, l)
				continue
			}
			// Exact: the text format round-trips float64 (common practice, no source).
			if got != want && !(math.IsInf(got, 1) && math.IsInf(want, 1)) {
				t.Errorf("%s%v = %v, want %v", name, l, got, want)
			}
		}
		for _, c := range seg.Report.Columns {
			cl := map[string]string{"watch": "district_daily", "segment": connectors.SegmentLabel(seg.Segment), "column": c.Name}
			got, ok := sample(t, fams, "plumb_column_vif", cl)
			if !ok {
				t.Errorf("plumb_column_vif%v missing", cl)
				continue
			}
			if c.VIF == nil {
				if !math.IsInf(got, 1) {
					t.Errorf("plumb_column_vif%v = %v, want +Inf (VIF undefined: %s)", cl, got, c.Undefined)
				}
				cl["reason"] = c.Undefined
				if v, ok := sample(t, fams, "plumb_column_vif_undefined", cl); !ok || v != 1 {
					t.Errorf("plumb_column_vif_undefined%v = %v, %v; want 1", cl, v, ok)
				}
			} else if got != *c.VIF {
				t.Errorf("plumb_column_vif%v = %v, want %v", cl, got, *c.VIF)
			}
		}
		for _, st := range []State{StateOK, StateWarning, StateCritical, StateBlind} {
			sl := map[string]string{"watch": "district_daily", "segment": connectors.SegmentLabel(seg.Segment), "state": string(st)}
			want := 0.0
			if st == seg.State {
				want = 1
			}
			if got, ok := sample(t, fams, "plumb_watch_state", sl); !ok || got != want {
				t.Errorf("plumb_watch_state%v = %v, %v; want %v", sl, got, ok, want)
			}
		}
	}
	// The stuck sensor: pressure_bar constant in hillside.
	if v, ok := sample(t, fams, "plumb_column_vif_undefined", map[string]string{"watch": "district_daily", "segment": "hillside",
		"column": "pressure_bar", "reason": "constant"}); !ok || v != 1 {
		t.Errorf("hillside pressure_bar should be reported constant: %v %v", v, ok)
	}
	var warn, crit float64
	for _, a := range d.Summary.OpenAlerts {
		if a.Severity == SeverityCritical {
			crit++
		} else {
			warn++
		}
	}
	for sev, want := range map[string]float64{"warning": warn, "critical": crit} {
		if got, ok := sample(t, fams, "plumb_open_alerts", map[string]string{"watch": "district_daily", "severity": sev}); !ok || got != want {
			t.Errorf("plumb_open_alerts{severity=%s} = %v, %v; want %v", sev, got, ok, want)
		}
	}
	run := d.Summary.LastRun
	if got, _ := sample(t, fams, "plumb_last_run_timestamp_seconds", map[string]string{"watch": "district_daily"}); got != float64(run.StartedAt.UnixNano())/1e9 {
		t.Errorf("plumb_last_run_timestamp_seconds = %v, want %v", got, run.StartedAt.Unix())
	}
	if got, _ := sample(t, fams, "plumb_last_run_success", map[string]string{"watch": "zone_pressure"}); got != 0 {
		t.Errorf("zone_pressure: plumb_last_run_success = %v, want 0", got)
	}
	for name, want := range map[string]float64{"plumb_run_failures_total": 4, "plumb_run_consecutive_failures": 4} {
		if got, _ := sample(t, fams, name, map[string]string{"watch": "zone_pressure"}); got != want {
			t.Errorf("zone_pressure: %s = %v, want %v", name, got, want)
		}
	}
	if got, _ := sample(t, fams, "plumb_watch_state", map[string]string{"watch": "zone_pressure", "segment": "", "state": "blind"}); got != 1 {
		t.Errorf("zone_pressure should be blind")
	}
	if got, _ := sample(t, fams, "plumb_store_up", nil); got != 1 {
		t.Errorf("plumb_store_up = %v, want 1", got)
	}
}

// failingView is a store that cannot be read.
type failingView struct{}

func (failingView) Watches(context.Context) ([]WatchSummary, error) {
	return nil, errors.New("state store plumb.db: database is locked")
}
func (failingView) Watch(context.Context, string) (*WatchDetail, error) {
	return nil, errors.New("state store plumb.db: database is locked")
}

func TestMetricsStoreDown(t *testing.T) {
	ts := newTestServer(t, failingView{}, "", f0)
	fams := scrape(t, ts.URL, "")
	if got, ok := sample(t, fams, "plumb_store_up", nil); !ok || got != 0 {
		t.Errorf("plumb_store_up = %v, %v; want 0", got, ok)
	}
	if len(fams) != 1 {
		t.Errorf("with the store down only plumb_store_up should be sent, got %d families", len(fams))
	}
	if code, _, _ := get(t, ts.URL+"/healthz", ""); code != 503 {
		t.Errorf("/healthz with the store down: %d, want 503", code)
	}
	if code, _, body := get(t, ts.URL+"/", ""); code != 503 || !strings.Contains(body, "database is locked") {
		t.Errorf("overview with the store down: %d, want 503 with the reason", code)
	}
}
