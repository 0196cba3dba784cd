package web

import (
	"bytes"
	"context"
	"encoding/xml"
	"io"
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
