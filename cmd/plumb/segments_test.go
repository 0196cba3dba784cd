package main

import (
	"context"
	"database/sql"
	"encoding/json"
	"fmt"
	"io"
	"math/rand/v2"
	"net/http"
	"net/http/httptest"
	"net/url"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"plumb/agent"
	"plumb/agent/web"
	"plumb/agent/web/storeview"
	"plumb/connectors"
)

// The empty string, NULL, the text "(null)" and an ordinary value are four
// segments of their own, apart from the whole table, in the store, the
// JSON API, /metrics and the command line.
func TestSegmentsStayApart(t *testing.T) {
	dir := t.TempDir()
	src := filepath.Join(dir, "zones.db")
	db, err := sql.Open("sqlite", "file:"+src+"?mode=rwc")
	if err != nil {
		t.Fatal(err)
	}
	if _, err := db.Exec(`CREATE TABLE pressure_log (day TEXT, zone TEXT, pressure_bar REAL, pipe_age_years REAL, flow_m3 REAL)`); err != nil {
		t.Fatal(err)
	}
	type seg struct {
		value  any // nil for NULL
		key    string
		label  string
		perDay int
	}
	segs := []seg{
		{"hillside", connectors.SegmentKey("hillside"), "hillside", 5},
		{"", connectors.SegmentKey(""), `""`, 4},
		{nil, connectors.NullSegment, "NULL", 6},
		{"(null)", connectors.SegmentKey("(null)"), "(null)", 7},
	}
	rng := rand.New(rand.NewPCG(9, 9))
	day0 := time.Date(2026, 5, 1, 0, 0, 0, 0, time.UTC)
	tx, _ := db.Begin()
	const days = 20
	total := 0
	for d := range days {
		for _, s := range segs {
			for range s.perDay {
				a, b := rng.NormFloat64(), rng.NormFloat64()
				if _, err := tx.Exec(`INSERT INTO pressure_log VALUES (?, ?, ?, ?, ?)`, day0.AddDate(0, 0, d).Format("2006-01-02"), s.value,
					a, b, a+0.5*b+rng.NormFloat64()); err != nil {
					t.Fatal(err)
				}
				total++
			}
		}
	}
	if err := tx.Commit(); err != nil {
		t.Fatal(err)
	}
	db.Close()
	cfg := filepath.Join(dir, "plumb.yaml")
	if err := os.WriteFile(cfg, []byte(fmt.Sprintf(`store: sqlite:%s
sources:
  zones: sqlite:%s
watches:
  - name: zone_pressure
    source: zones
    table: pressure_log
    time_column: day
    window: %dd
    segment_by: zone
`, filepath.Join(dir, "state.db"), src, days)), 0o600); err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	if code, out, errs := plumbCLI(t, ctx, "check", "--config", cfg, "-q"); code != 0 && code != 1 && code != 2 {
		t.Fatalf("check: exit %d\n%s\n%s", code, out, errs)
	}

	// The store: one series per key, each with its own rows.
	c, err := loadStoreConfig(cfg)
	if err != nil {
		t.Fatal(err)
	}
	st, err := openStore(ctx, c, false, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	last := func(key string) agent.Point {
		t.Helper()
		ps, err := st.Points(ctx, "zone_pressure", agent.PointQuery{Segment: key, Limit: 1})
		if err != nil || len(ps) != 1 {
			t.Fatalf("points of %q: %d, %v", key, len(ps), err)
		}
		return ps[0]
	}
	if p := last(connectors.WholeTable); p.RowsUsed != int64(total) {
		t.Errorf("whole table: %d rows, want %d", p.RowsUsed, total)
	}
	for _, s := range segs {
		if p := last(s.key); p.RowsUsed != int64(days*s.perDay) {
			t.Errorf("segment %s: %d rows, want %d", s.label, p.RowsUsed, days*s.perDay)
		}
	}

	// The JSON API and /metrics.
	srv, err := web.New(web.Options{View: storeview.New(st, c)})
	if err != nil {
		t.Fatal(err)
	}
	ts := httptest.NewServer(srv.Handler())
	defer ts.Close()
	get := func(path string) string {
		t.Helper()
		resp, err := http.Get(ts.URL + path)
		if err != nil {
			t.Fatal(err)
		}
		defer resp.Body.Close()
		b, _ := io.ReadAll(resp.Body)
		if resp.StatusCode != 200 {
			t.Fatalf("GET %s: %d\n%s", path, resp.StatusCode, b)
		}
		return string(b)
	}
	var detail struct {
		Segments []map[string]json.RawMessage `json:"segments"`
	}
	if err := json.Unmarshal([]byte(get("/api/watches/zone_pressure")), &detail); err != nil {
		t.Fatal(err)
	}
	rowsOf := func(m map[string]json.RawMessage) int64 {
		var l struct{ Rows int64 }
		json.Unmarshal(m["latest"], &l)
		return l.Rows
	}
	found := map[string]int64{}
	for _, m := range detail.Segments {
		segRaw, hasSeg := m["segment"]
		whole := string(m["whole_table"]) == "true"
		switch {
		case whole && hasSeg && string(segRaw) == "null":
			found["whole"] = rowsOf(m)
		case !whole && hasSeg:
			found["segment "+string(segRaw)] = rowsOf(m)
		default:
			t.Errorf("a series with whole_table %s and segment %s", m["whole_table"], segRaw)
		}
	}
	want := map[string]int64{"whole": int64(total), `segment "hillside"`: days * 5, `segment ""`: days * 4,
		"segment null": days * 6, `segment "(null)"`: days * 7}
	if fmt.Sprint(found) != fmt.Sprint(want) {
		t.Errorf("API series %v, want %v", found, want)
	}
	metrics := get("/metrics")
	for _, s := range segs {
		line := fmt.Sprintf("plumb_rows_used{segment=%q,watch=\"zone_pressure\"} %d", s.label, days*s.perDay)
		if !strings.Contains(metrics, line) {
			t.Errorf("/metrics lacks %s", line)
		}
		// A segment's own history and page answer to its label.
		var hist []map[string]any
		if err := json.Unmarshal([]byte(get("/api/watches/zone_pressure/history?segment="+url.QueryEscape(s.label))), &hist); err != nil || len(hist) == 0 {
			t.Errorf("history of %s: %d points, %v", s.label, len(hist), err)
		} else if rows := hist[len(hist)-1]["rows"].(float64); rows != float64(days*s.perDay) {
			t.Errorf("history of %s ends with %v rows, want %d", s.label, rows, days*s.perDay)
		}
		get("/watches/zone_pressure?segment=" + url.QueryEscape(s.label))
	}
	if line := fmt.Sprintf("plumb_rows_used{segment=\"\",watch=\"zone_pressure\"} %d", total); !strings.Contains(metrics, line) {
		t.Errorf("/metrics lacks the whole table: %s", line)
	}

	// The command line names segments by the same labels.
	for _, s := range segs {
		code, out, errs := plumbCLI(t, ctx, "history", "zone_pressure", "--config", cfg, "--segment", s.label, "--format", "json")
		var hist []map[string]any
		if code != 0 || json.Unmarshal([]byte(out), &hist) != nil || len(hist) == 0 {
			t.Fatalf("history --segment %s: exit %d\n%s\n%s", s.label, code, out, errs)
		}
		if rows := hist[len(hist)-1]["rows"].(float64); rows != float64(days*s.perDay) {
			t.Errorf("history --segment %s: latest %v rows, want %d", s.label, rows, days*s.perDay)
		}
	}
	code, out, _ := plumbCLI(t, ctx, "scan", "--db", "sqlite:"+src, "--table", "pressure_log", "--segment", "zone", "--format", "json")
	var scan struct {
		Groups []map[string]json.RawMessage `json:"by_group"`
	}
	if code != 0 || json.Unmarshal([]byte(out), &scan) != nil || len(scan.Groups) != len(segs) {
		t.Fatalf("scan: exit %d, %d groups\n%s", code, len(scan.Groups), out)
	}
	var keys []string
	for _, g := range scan.Groups {
		keys = append(keys, string(g["segment"]))
	}
	if got := strings.Join(keys, " "); got != `"" "(null)" "hillside" null` {
		t.Errorf("scan groups %s", got)
	}
}
