package main

import (
	"bytes"
	"encoding/xml"
	"image/png"
	"io"
	"os"
	"path/filepath"
	"strings"
	"testing"
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
