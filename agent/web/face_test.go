package web

import (
	"context"
	"encoding/xml"
	"fmt"
	"io"
	"regexp"
	"strings"
	"testing"
)

// TestOverviewCountsSegments: "by district (N)" counts the districts, not
// the whole table beside them.
func TestOverviewCountsSegments(t *testing.T) {
	f := buildDemoFixture(t)
	ts := newTestServer(t, f.view, "", f.now)
	_, _, body := get(t, ts.URL+"/", "")
	if !strings.Contains(body, "by district (4)") {
		t.Errorf("overview does not say by district (4) for the demo's four districts:\n%s", body)
	}
	ws, _ := f.view.Watches(context.Background())
	for _, w := range ws {
		if w.Name == "district_daily" && (len(w.Segments) != 5 || w.SegmentCount() != 4) {
			t.Errorf("district_daily: %d segment entries, SegmentCount %d; want the whole table and 4 districts", len(w.Segments), w.SegmentCount())
		}
	}
}

// TestAlertsPage: the Alerts link of every page opens an HTML page of the
// alerts (open ones, or all with state=all), not raw JSON.
func TestAlertsPage(t *testing.T) {
	f := buildDemoFixture(t)
	ts := newTestServer(t, f.view, "", f.now)
	_, _, overview := get(t, ts.URL+"/", "")
	if !strings.Contains(overview, `<a href="/alerts">Alerts</a>`) || strings.Contains(overview, "Alerts (JSON)") {
		t.Fatalf("the navigation does not link the alerts page")
	}
	open, err := allAlerts(context.Background(), f.view, true)
	if err != nil {
		t.Fatal(err)
	}
	all, _ := allAlerts(context.Background(), f.view, false)
	if len(open) == 0 || len(all) < len(open) {
		t.Fatalf("fixture: %d open of %d alerts", len(open), len(all))
	}
	for path, n := range map[string]int{"/alerts": len(open), "/alerts?state=all": len(all)} {
		code, h, body := get(t, ts.URL+path, "")
		if code != 200 || !strings.HasPrefix(h.Get("Content-Type"), "text/html") {
			t.Fatalf("GET %s: %d %s", path, code, h.Get("Content-Type"))
		}
		if got := strings.Count(body, "<tr data-alert="); got != n {
			t.Errorf("GET %s: %d rows, want %d", path, got, n)
		}
		if !strings.Contains(body, "<title>Alerts · plumb</title>") || !strings.Contains(body, `href="/watches/district_daily`) {
			t.Errorf("GET %s: not the alerts page:\n%s", path, body)
		}
	}
}

// TestNumbersForPeople: no page prints a number in e-notation or a
// negative zero rate.
func TestNumbersForPeople(t *testing.T) {
	f := buildDemoFixture(t)
	ts := newTestServer(t, f.view, "", f.now)
	eNotation := regexp.MustCompile(`[0-9]e[+-]?[0-9]`)
	for _, path := range []string{"/", "/alerts?state=all", "/watches/district_daily", "/watches/district_daily?segment=hillside", "/watches/district_volumes", "/watches/zone_pressure"} {
		_, _, body := get(t, ts.URL+path, "")
		text := regexp.MustCompile(`(?s)<[^>]*>`).ReplaceAllString(body, " ") // the words, not the SVG path data
		if m := eNotation.FindString(text); m != "" {
			i := strings.Index(text, m)
			t.Errorf("GET %s: e-notation %q in %q", path, m, text[max(0, i-60):min(len(text), i+60)])
		}
		for _, bad := range []string{"-0.0%", "+0.0%", "−0.0%"} {
			if strings.Contains(text, bad) {
				t.Errorf("GET %s: says %q", path, bad)
			}
		}
	}
}

// svgLine is the look of a stroked line: what a legend sample must share
// with the line it names.
type svgLine struct{ stroke, width, dash, cap string }

func (l svgLine) String() string {
	return fmt.Sprintf("stroke %s width %s dash %q cap %q", l.stroke, l.width, l.dash, l.cap)
}

// TestLegendMatchesLines: every line sample in a chart's legend has the
// stroke, width, dash pattern and line cap of a line drawn in that chart.
func TestLegendMatchesLines(t *testing.T) {
	f := buildDemoFixture(t)
	ts := newTestServer(t, f.view, "", f.now)
	svgRe := regexp.MustCompile(`(?s)<svg .*?</svg>`)
	checked := 0
	for _, path := range []string{"/watches/district_daily", "/watches/district_volumes", "/watches/district_daily?segment=hillside"} {
		_, _, body := get(t, ts.URL+path, "")
		for i, svg := range svgRe.FindAllString(body, -1) {
			legend, drawn := map[svgLine]bool{}, map[svgLine]bool{}
			dec := xml.NewDecoder(strings.NewReader(svg))
			depth, legendDepth := 0, -1
			for {
				tok, err := dec.Token()
				if err == io.EOF {
					break
				}
				if err != nil {
					t.Fatalf("%s svg %d: %v", path, i, err)
				}
				switch e := tok.(type) {
				case xml.StartElement:
					depth++
					attr := map[string]string{}
					for _, a := range e.Attr {
						attr[a.Name.Local] = a.Value
					}
					if _, ok := attr["data-legend-item"]; ok && legendDepth < 0 {
						legendDepth = depth
					}
					if (e.Name.Local != "line" && e.Name.Local != "path") || attr["stroke"] == "" || attr["fill"] != "" && attr["fill"] != "none" && e.Name.Local == "path" {
						continue
					}
					l := svgLine{attr["stroke"], attr["stroke-width"], attr["stroke-dasharray"], attr["stroke-linecap"]}
					if legendDepth > 0 {
						if e.Name.Local == "line" {
							legend[l] = true
						}
					} else if attr["data-series"] != "" || attr["data-level"] != "" {
						drawn[l] = true
					}
				case xml.EndElement:
					if depth == legendDepth {
						legendDepth = -1
					}
					depth--
				}
			}
			for l := range legend {
				checked++
				if !drawn[l] {
					t.Errorf("%s chart %d: legend line (%v) matches no line drawn: %v", path, i, l, drawn)
				}
			}
		}
	}
	if checked < 10 {
		t.Errorf("only %d legend lines checked", checked)
	}
}
