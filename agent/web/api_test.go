package web

import (
	"context"
	"encoding/json"
	"math"
	"testing"
	"time"

	"plumb/connectors"
	"plumb/diagnostics"
)

func getJSON(t *testing.T, url string, wantCode int, v any) {
	t.Helper()
	code, h, body := get(t, url, "")
	if code != wantCode {
		t.Fatalf("GET %s: %d, want %d\n%s", url, code, wantCode, body)
	}
	if ct := h.Get("Content-Type"); ct != "application/json; charset=utf-8" {
		t.Errorf("GET %s: Content-Type %q", url, ct)
	}
	if err := json.Unmarshal([]byte(body), v); err != nil {
		t.Fatalf("GET %s: %v\n%s", url, err, body)
	}
}

func TestAPI(t *testing.T) {
	f := buildDemoFixture(t)
	ts := newTestServer(t, f.view, "", f.now)
	d, err := f.view.Watch(context.Background(), "district_daily")
	if err != nil {
		t.Fatal(err)
	}

	var ws []map[string]any
	getJSON(t, ts.URL+"/api/watches", 200, &ws)
	if len(ws) != 4 || ws[0]["name"] != "district_daily" || ws[2]["state"] != "blind" || ws[3]["name"] != "district_supply" {
		t.Errorf("/api/watches: %v", ws)
	}

	// History: the points of `plumb history --format json`, oldest first,
	// unbounded values as null.
	var hist []struct {
		At              string   `json:"at"`
		ConditionNumber *float64 `json:"condition_number"`
		MaxVIF          *float64 `json:"max_vif"`
		Rank            int      `json:"rank"`
		Rows            int64    `json:"rows"`
	}
	getJSON(t, ts.URL+"/api/watches/district_daily/history", 200, &hist)
	whole := d.Segment("")
	if len(hist) != len(whole.Timeline) {
		t.Fatalf("history has %d points, want %d", len(hist), len(whole.Timeline))
	}
	for i, h := range hist {
		p := whole.Timeline[i]
		at, err := time.Parse(time.RFC3339, h.At)
		if err != nil || !at.Equal(p.At) {
			t.Errorf("point %d: at %q (%v), want %v", i, h.At, err, p.At)
		}
		if i > 0 && h.At <= hist[i-1].At {
			t.Errorf("point %d: not oldest first", i)
		}
		if math.IsInf(p.ConditionNumber, 1) != (h.ConditionNumber == nil) {
			t.Errorf("point %d: condition_number %v for %v", i, h.ConditionNumber, p.ConditionNumber)
		}
		if h.ConditionNumber != nil && *h.ConditionNumber != p.ConditionNumber {
			t.Errorf("point %d: condition_number %v, want %v", i, *h.ConditionNumber, p.ConditionNumber)
		}
		if h.Rank != p.Rank || h.Rows != p.Rows {
			t.Errorf("point %d: rank %d rows %d, want %d %d", i, h.Rank, h.Rows, p.Rank, p.Rows)
		}
	}
	if hist[len(hist)-1].ConditionNumber != nil {
		t.Errorf("the last window holds the exact dependency: condition_number should be null")
	}
	var seg []map[string]any
	getJSON(t, ts.URL+"/api/watches/district_daily/history?segment=hillside", 200, &seg)
	if len(seg) != len(d.Segment(connectors.SegmentKey("hillside")).Timeline) {
		t.Errorf("hillside history: %d points", len(seg))
	}

	var runs []map[string]any
	getJSON(t, ts.URL+"/api/watches/district_daily/runs", 200, &runs)
	if len(runs) != len(d.Runs) || runs[0]["id"].(float64) != float64(d.Runs[0].ID) {
		t.Errorf("runs: %d, first %v", len(runs), runs[0])
	}
	if _, ok := runs[0]["duration_seconds"].(float64); !ok {
		t.Errorf("a run has no duration_seconds: %v", runs[0])
	}

	var rep diagnostics.Report
	getJSON(t, ts.URL+"/api/watches/district_daily/report?segment=hillside", 200, &rep)
	if len(rep.Columns) != len(demoRegressors) || rep.RowsUsed != d.Segment(connectors.SegmentKey("hillside")).Report.RowsUsed {
		t.Errorf("report: %d columns, %d rows", len(rep.Columns), rep.RowsUsed)
	}

	var detail struct {
		Summary  WatchSummary `json:"summary"`
		Segments []struct {
			Segment   string         `json:"segment"`
			Report    map[string]any `json:"report"`
			Forecasts []any          `json:"forecasts"`
		} `json:"segments"`
	}
	getJSON(t, ts.URL+"/api/watches/district_volumes", 200, &detail)
	if len(detail.Segments) != 1 || detail.Segments[0].Report != nil || len(detail.Segments[0].Forecasts) == 0 {
		t.Errorf("detail: %+v", detail.Segments)
	}

	var open, all []Alert
	getJSON(t, ts.URL+"/api/alerts?state=open", 200, &open)
	getJSON(t, ts.URL+"/api/alerts", 200, &all)
	if len(open) == 0 || len(all) < len(open) {
		t.Errorf("alerts: %d open of %d", len(open), len(all))
	}
	for i := 1; i < len(all); i++ {
		if all[i].OpenedAt.After(all[i-1].OpenedAt) {
			t.Errorf("alerts not newest first at %d", i)
		}
	}

	var e map[string]string
	getJSON(t, ts.URL+"/api/alerts?state=maybe", 400, &e)
	getJSON(t, ts.URL+"/api/watches/nope", 404, &e)
	getJSON(t, ts.URL+"/api/watches/nope/history", 404, &e)
	getJSON(t, ts.URL+"/api/watches/district_daily/history?segment=atlantis", 404, &e)
	if e["error"] == "" {
		t.Errorf("a 404 should say why: %v", e)
	}
	getJSON(t, ts.URL+"/api/watches/zone_pressure/report", 404, &e)
	var h map[string]string
	getJSON(t, ts.URL+"/healthz", 200, &h)
	if h["status"] != "ok" {
		t.Errorf("/healthz: %v", h)
	}
}
