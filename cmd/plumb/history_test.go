package main

import (
	"bytes"
	"context"
	"encoding/json"
	"encoding/xml"
	"fmt"
	"image/png"
	"io"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"plumb/agent"
	"plumb/agent/demo"
	"plumb/agent/web"
	"plumb/diagnostics"
)

// TestHistoryPlot writes the timeline chart of the demo's volumes watch
// to SVG and PNG files and reads them back: a well-formed SVG document
// holding both timelines with their levels, and a decodable PNG.
func TestHistoryPlot(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "demo")
	if code, _, errs := runCLI(t, "demo", "--dir", dir, "--no-serve", "--start", "2026-06-01"); code != 0 {
		t.Fatalf("demo: exit %d: %s", code, errs)
	}
	cfg := filepath.Join(dir, "plumb.yaml")

	svgPath := filepath.Join(t.TempDir(), "volumes.svg")
	code, out, errs := runCLI(t, "history", "district_volumes", "--config", cfg, "--plot", svgPath)
	if code != 0 || !strings.Contains(out, "wrote "+svgPath) {
		t.Fatalf("history --plot svg: exit %d\n%s\n%s", code, out, errs)
	}
	b, err := os.ReadFile(svgPath)
	if err != nil {
		t.Fatal(err)
	}
	dec := xml.NewDecoder(bytes.NewReader(b))
	root := ""
	series := map[string]int{}
	for {
		tok, err := dec.Token()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatalf("not well-formed XML: %v", err)
		}
		se, ok := tok.(xml.StartElement)
		if !ok {
			continue
		}
		if root == "" {
			root = se.Name.Space + " " + se.Name.Local
		}
		for _, a := range se.Attr {
			if a.Name.Local == "data-series" || a.Name.Local == "data-level" {
				series[a.Name.Local+"="+a.Value]++
			}
		}
	}
	if root != "http://www.w3.org/2000/svg svg" {
		t.Errorf("root element %q", root)
	}
	// The volumes converge at the end of the demo: both metrics still
	// rise, so both charts carry a forecast.
	for k, want := range map[string]int{"data-series=condition_number": 1, "data-series=max_vif": 1,
		"data-series=forecast": 2, "data-level=warn": 2, "data-level=critical": 2} {
		if series[k] != want {
			t.Errorf("%s: %d, want %d (all: %v)", k, series[k], want, series)
		}
	}

	pngPath := filepath.Join(t.TempDir(), "hillside.png")
	if code, _, errs := runCLI(t, "history", "district_daily", "--segment", "hillside", "--config", cfg, "--plot", pngPath); code != 0 {
		t.Fatalf("history --plot png: exit %d: %s", code, errs)
	}
	b, err = os.ReadFile(pngPath)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.HasPrefix(b, []byte("\x89PNG\r\n\x1a\n")) {
		t.Fatalf("no PNG signature: %q", b[:min(len(b), 8)])
	}
	img, err := png.Decode(bytes.NewReader(b))
	if err != nil || img.Bounds().Dx() < 100 || img.Bounds().Dy() < 100 {
		t.Fatalf("PNG: %v, %v", err, img)
	}

	if code, _, errs := runCLI(t, "history", "district_volumes", "--config", cfg, "--plot", filepath.Join(t.TempDir(), "x.pdf")); code != exitUsage || !strings.Contains(errs, ".svg or .png") {
		t.Errorf("--plot x.pdf: exit %d, %q: want a usage error", code, errs)
	}
	if code, _, errs := runCLI(t, "history", "district_volumes", "--config", cfg, "--segment", "nowhere", "--plot", svgPath); code != exitUsage || !strings.Contains(errs, "nowhere") {
		t.Errorf("--segment nowhere: exit %d, %q: want a usage error", code, errs)
	}
}

// TestHistoryUnknownSegment: --segment with a name the watch has no
// history for is an error naming the segments it has, not "no history".
func TestHistoryUnknownSegment(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "demo")
	if code, _, errs := runCLI(t, "demo", "--dir", dir, "--no-serve", "--start", "2026-06-01"); code != 0 {
		t.Fatalf("demo: exit %d: %s", code, errs)
	}
	cfg := filepath.Join(dir, "plumb.yaml")
	for _, args := range [][]string{
		{"history", "district_daily", "--segment", "hilside", "--config", cfg},
		{"history", "district_daily", "--segment", "hilside", "--config", cfg, "--format", "json"},
		{"history", "district_daily", "--segment", "hilside", "--config", cfg, "--plot", filepath.Join(t.TempDir(), "h.svg")},
	} {
		code, out, errs := runCLI(t, args...)
		if code != exitUsage || out != "" || strings.Contains(errs, "no history yet") ||
			!strings.Contains(errs, `no segment "hilside"; its segments (values of district): `) || !strings.Contains(errs, "hillside") {
			t.Errorf("%v: exit %d\n%s\n%s", args, code, out, errs)
		}
	}
	code, _, errs := runCLI(t, "history", "district_volumes", "--segment", "hillside", "--config", cfg)
	if code != exitUsage || !strings.Contains(errs, "not segmented") {
		t.Errorf("unsegmented watch: exit %d: %s", code, errs)
	}
	code, out, errs := runCLI(t, "history", "district_daily", "--segment", "hillside", "--config", cfg, "--limit", "2")
	if code != 0 || strings.Count(out, "\n") != 3 {
		t.Errorf("known segment: exit %d\n%s\n%s", code, out, errs)
	}
}

// TestHistoryFactors: a watch with a categorical column on the demo
// scenario, backfilled: `plumb history` shows the factor's GVIF^(1/(2·df))
// per point as the stored report has it, and --format json carries the
// factor of each point's report.
func TestHistoryFactors(t *testing.T) {
	dir := t.TempDir()
	sc := demo.Default
	src := filepath.Join(dir, "districts.db")
	if err := sc.WriteSQLite(context.Background(), src); err != nil {
		t.Fatal(err)
	}
	cfg := filepath.Join(dir, "plumb.yaml")
	if err := os.WriteFile(cfg, []byte(fmt.Sprintf(`store: sqlite:%s
sources: {districts: "sqlite:%s"}
watches:
  - name: supply
    source: districts
    table: district_daily
    columns: [supply_source, chlorine_mg_l, temperature_c, rainfall_mm]
    time_column: day
    bucket: day
    window: 28 buckets
`, filepath.Join(dir, "state.db"), src)), 0o600); err != nil {
		t.Fatal(err)
	}
	if code, out, errs := runCLI(t, "backfill", "supply", "--config", cfg); code != 0 {
		t.Fatalf("backfill: exit %d\n%s\n%s", code, out, errs)
	}
	// The stored reports, read on their own.
	c, err := loadStoreConfig(cfg)
	if err != nil {
		t.Fatal(err)
	}
	st, err := openStore(context.Background(), c, false, nil)
	if err != nil {
		t.Fatal(err)
	}
	ps, err := st.Points(context.Background(), "supply", agent.PointQuery{})
	st.Close()
	if err != nil || len(ps) < 28 {
		t.Fatalf("points: %d, %v", len(ps), err)
	}
	stored := make([]diagnostics.GroupReport, len(ps))
	for i, p := range ps {
		var rep diagnostics.Report
		if err := json.Unmarshal(p.Report, &rep); err != nil {
			t.Fatal(err)
		}
		for _, g := range rep.GVIF {
			if g.Kind == diagnostics.GroupFactor && g.Name == "supply_source" {
				stored[i] = g
			}
		}
		if stored[i].Name == "" {
			t.Fatalf("%s: no supply_source in the stored report", p.At)
		}
	}

	code, out, errs := runCLI(t, "history", "supply", "--config", cfg, "--format", "json")
	if code != 0 {
		t.Fatalf("history json: exit %d: %s", code, errs)
	}
	var hist []struct {
		At      time.Time `json:"at"`
		Factors []struct {
			Name         string   `json:"name"`
			DF           int      `json:"df"`
			GVIF         *float64 `json:"gvif"`
			GVIFAdjusted *float64 `json:"gvif_adjusted"`
			Levels       []string `json:"levels"`
			Absent       []string `json:"absent"`
			Base         string   `json:"base"`
		} `json:"factors"`
	}
	if err := json.Unmarshal([]byte(out), &hist); err != nil {
		t.Fatalf("history json: %v\n%s", err, out)
	}
	if len(hist) != len(ps) {
		t.Fatalf("%d points in JSON, %d stored", len(hist), len(ps))
	}
	sawNew := false
	for i, h := range hist {
		g := stored[i]
		if len(h.Factors) != 1 {
			t.Fatalf("%s: factors %+v", h.At, h.Factors)
		}
		f := h.Factors[0]
		if f.Name != g.Name || f.DF != g.DF || f.Base != g.Base || !slices.Equal(f.Levels, g.Levels) || f.Absent == nil ||
			(f.GVIF == nil) != (g.GVIF == nil) || g.GVIF != nil && (*f.GVIF != *g.GVIF || *f.GVIFAdjusted != *g.GVIFAdjusted) {
			t.Errorf("%s: factor %+v, stored %+v", h.At, f, g)
		}
		sawNew = sawNew || slices.Contains(f.Levels, sc.NewSource)
	}
	if !sawNew {
		t.Errorf("no point lists the new source %s", sc.NewSource)
	}

	code, out, errs = runCLI(t, "history", "supply", "--config", cfg)
	if code != 0 {
		t.Fatalf("history: exit %d: %s", code, errs)
	}
	lines := strings.Split(strings.TrimRight(out, "\n"), "\n")
	head := strings.Fields(lines[0])
	col := slices.Index(head, "supply_source")
	if col < 0 {
		t.Fatalf("no supply_source column in %q", lines[0])
	}
	// "data through" and "max VIF" are two words each in the heading, one
	// field each in a row.
	col -= 2
	for i, g := range stored {
		fields := strings.Fields(lines[1+i])
		want := "–"
		switch {
		case g.GVIFAdjusted != nil:
			want = web.FormatNumber(*g.GVIFAdjusted)
		case g.DF > 0:
			want = "∞"
		}
		if col >= len(fields) || fields[col] != want {
			t.Errorf("row %d %q: supply_source %q, want %q", i, lines[1+i], fields[min(col, len(fields)-1)], want)
		}
	}
	if !strings.Contains(out, "supply_source: GVIF^(1/(2·df))") {
		t.Errorf("no legend of the factor column:\n%s", out)
	}
}
