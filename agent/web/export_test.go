package web

import (
	"bytes"
	"context"
	"encoding/xml"
	"image/png"
	"io"
	"math"
	"os"
	"path/filepath"
	"testing"
)

func TestWriteTimelineSVG(t *testing.T) {
	f := buildDemoFixture(t)
	d, err := f.view.Watch(context.Background(), "district_volumes")
	if err != nil {
		t.Fatal(err)
	}
	seg := d.Segment("")
	var buf bytes.Buffer
	if err := WriteTimelineSVG(&buf, "district_volumes · whole table", seg.Timeline, seg.Forecasts, d.Summary.Limits); err != nil {
		t.Fatal(err)
	}
	if dir := os.Getenv("PLUMB_WEB_DUMP"); dir != "" {
		os.WriteFile(filepath.Join(dir, "timeline.svg"), buf.Bytes(), 0o644)
	}
	if !bytes.HasPrefix(buf.Bytes(), []byte(`<?xml version="1.0" encoding="UTF-8"?>`+"\n<svg ")) {
		t.Errorf("the file should start with the XML declaration and the svg element: %.80q", buf.String())
	}
	// A well-formed XML document whose root is an svg element holding both
	// timelines, their levels and forecasts.
	dec := xml.NewDecoder(bytes.NewReader(buf.Bytes()))
	counts := map[string]int{}
	root := ""
	for {
		tok, err := dec.Token()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatalf("not well-formed XML: %v\n%s", err, buf.String())
		}
		se, ok := tok.(xml.StartElement)
		if !ok {
			continue
		}
		if root == "" {
			root = se.Name.Local
			if se.Name.Space != "http://www.w3.org/2000/svg" {
				t.Errorf("root namespace %q", se.Name.Space)
			}
		}
		for _, a := range se.Attr {
			switch a.Name.Local {
			case "data-series", "data-level", "data-chart":
				counts[a.Name.Local+"="+a.Value]++
			}
		}
	}
	if root != "svg" {
		t.Errorf("root element %q", root)
	}
	for k, want := range map[string]int{
		"data-chart=timeline": 2, "data-series=condition_number": 1, "data-series=max_vif": 1,
		"data-series=forecast": 2, "data-series=forecast-range": 2, "data-level=warn": 2, "data-level=critical": 2,
	} {
		if counts[k] != want {
			t.Errorf("%s: %d, want %d", k, counts[k], want)
		}
	}
}

func TestWriteTimelinePNG(t *testing.T) {
	f := buildDemoFixture(t)
	d, err := f.view.Watch(context.Background(), "district_daily")
	if err != nil {
		t.Fatal(err)
	}
	seg := d.Segment("")
	var buf bytes.Buffer
	if err := WriteTimelinePNG(&buf, "district_daily · whole table", seg.Timeline, seg.Forecasts, d.Summary.Limits); err != nil {
		t.Fatal(err)
	}
	if dir := os.Getenv("PLUMB_WEB_DUMP"); dir != "" {
		os.WriteFile(filepath.Join(dir, "timeline.png"), buf.Bytes(), 0o644)
	}
	img, err := png.Decode(bytes.NewReader(buf.Bytes()))
	if err != nil {
		t.Fatal(err)
	}
	// The SVG's size in points at 144 dpi: twice as many pixels.
	l := d.Summary.Limits
	h := 40 + timelineChart("c", MetricCondition, seg.Timeline, seg.Forecast(MetricCondition), l.CondWarn, l.CondCritical).H +
		timelineChart("v", MetricMaxVIF, seg.Timeline, seg.Forecast(MetricMaxVIF), l.VIFWarn, l.VIFCritical).H + 10
	if b := img.Bounds(); b.Dx() != 1920 || b.Dy() != int(math.Round(2*h)) {
		t.Errorf("image is %v, want 1920×%.0f", b, 2*h)
	}
	// The series colours are drawn: Okabe–Ito blue (condition number) and
	// reddish purple (max VIF), and the vermillion of the critical level.
	seen := map[[3]uint32]bool{}
	bnd := img.Bounds()
	for y := bnd.Min.Y; y < bnd.Max.Y; y++ {
		for x := bnd.Min.X; x < bnd.Max.X; x++ {
			r, g, b, _ := img.At(x, y).RGBA()
			seen[[3]uint32{r >> 8, g >> 8, b >> 8}] = true
		}
	}
	for name, hex := range map[string]string{"blue": colBlue, "purple": colPurple, "vermillion": colVermillion} {
		c := parseHex(hex)
		if !seen[[3]uint32{uint32(c[0]), uint32(c[1]), uint32(c[2])}] {
			t.Errorf("no pixel of %s %s in the image", name, hex)
		}
	}
}
