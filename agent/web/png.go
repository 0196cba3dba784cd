package web

import (
	"fmt"
	"image/color"
	"io"
	"math"
	"strconv"
	"strings"
	"time"

	xfont "golang.org/x/image/font"
	"gonum.org/v1/plot/font"
	"gonum.org/v1/plot/font/liberation"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/vgimg"
)

// WriteTimelinePNG draws the same timeline charts as WriteTimelineSVG
// into a PNG image (at 2× for sharp print), for `plumb history --plot
// FILE.png`. The layout is the SVG's; the hatch of the forecast band
// becomes a translucent fill with an outline.
func WriteTimelinePNG(w io.Writer, title string, tl []Point, forecasts []Forecast, l Limits) error {
	const head = 40.0
	cond, vif := timelineCharts(tl, forecasts, l)
	width, height := cond.W, head+cond.H+vif.H+10
	c := vgimg.NewWith(vgimg.UseWH(vg.Length(width), vg.Length(height)), vgimg.UseDPI(144),
		vgimg.UseBackgroundColor(color.White))
	p := &painter{c: c, h: height, fonts: font.NewCache(liberation.Collection())}
	p.text(16, 26, title, 17, true, "start", "#1F2328")
	if len(tl) > 0 {
		note := fmt.Sprintf("%d windows, %s to %s", len(tl), tl[0].At.UTC().Format(time.DateOnly), tl[len(tl)-1].At.UTC().Format(time.DateOnly))
		p.text(width-16, 26, note, 12, false, "end", "#5B6169")
	}
	p.line(cond, head)
	p.line(vif, head+cond.H)
	if _, err := (vgimg.PngCanvas{Canvas: c}).WriteTo(w); err != nil {
		return fmt.Errorf("timeline chart: %w", err)
	}
	return nil
}

// painter draws chart models in SVG coordinates (y down) on a vg canvas
// (y up).
type painter struct {
	c     *vgimg.Canvas
	h     float64 // canvas height, for the flip
	dy    float64 // offset of the chart being drawn
	fonts *font.Cache
}

func (p *painter) pt(x, y float64) vg.Point {
	return vg.Point{X: vg.Length(x), Y: vg.Length(p.h - (y + p.dy))}
}

func hexColour(s string, alpha float64) color.Color {
	v := parseHex(s)
	return color.NRGBA{R: uint8(v[0]), G: uint8(v[1]), B: uint8(v[2]), A: uint8(math.Round(255 * alpha))}
}

func (p *painter) stroke(path vg.Path, st stroke) {
	p.c.SetColor(hexColour(st.Colour, 1))
	p.c.SetLineWidth(vg.Length(st.Width))
	var dash []vg.Length
	for _, f := range strings.Fields(st.Dash) {
		if v, err := strconv.ParseFloat(f, 64); err == nil {
			dash = append(dash, vg.Length(v))
		}
	}
	p.c.SetLineDash(dash, 0)
	p.c.Stroke(path)
}

func (p *painter) seg(x0, y0, x1, y1 float64, st stroke) {
	var path vg.Path
	path.Move(p.pt(x0, y0))
	path.Line(p.pt(x1, y1))
	p.stroke(path, st)
}

func (p *painter) rect(x, y, w, h float64, fill string, alpha float64) {
	var path vg.Path
	path.Move(p.pt(x, y))
	path.Line(p.pt(x+w, y))
	path.Line(p.pt(x+w, y+h))
	path.Line(p.pt(x, y+h))
	path.Close()
	p.c.SetColor(hexColour(fill, alpha))
	p.c.Fill(path)
}

// svgPath turns the M/L/Z path data the charts write into a vg path.
func (p *painter) svgPath(d string) vg.Path {
	var path vg.Path
	var nums []float64
	op := byte(0)
	flush := func() {
		for i := 0; i+1 < len(nums); i += 2 {
			if op == 'M' && i == 0 {
				path.Move(p.pt(nums[i], nums[i+1]))
			} else {
				path.Line(p.pt(nums[i], nums[i+1]))
			}
		}
		nums = nums[:0]
	}
	for _, tok := range strings.FieldsFunc(d, func(r rune) bool { return r == ' ' || r == ',' }) {
		for tok != "" {
			switch tok[0] {
			case 'M', 'L', 'Z':
				flush()
				op = tok[0]
				if op == 'Z' {
					path.Close()
				}
				tok = tok[1:]
				continue
			}
			end := strings.IndexAny(tok, "MLZ")
			if end < 0 {
				end = len(tok)
			}
			if v, err := strconv.ParseFloat(tok[:end], 64); err == nil {
				nums = append(nums, v)
			}
			tok = tok[end:]
		}
	}
	flush()
	return path
}

func (p *painter) face(size float64, bold bool) font.Face {
	f := font.Font{Typeface: "Liberation", Variant: "Sans"}
	if bold {
		f.Weight = xfont.WeightBold
	}
	return p.fonts.Lookup(f, font.Length(size))
}

// text writes s with its baseline at (x, y); anchor is start, middle or
// end, as in SVG.
func (p *painter) text(x, y float64, s string, size float64, bold bool, anchor, colour string) {
	fc := p.face(size, bold)
	w := float64(fc.Width(s))
	switch anchor {
	case "middle":
		x -= w / 2
	case "end":
		x -= w
	}
	p.c.SetColor(hexColour(colour, 1))
	p.c.FillString(fc, p.pt(x, y), s)
}

// line draws a timeline chart whose top is at offset.
func (p *painter) line(c *lineChart, offset float64) {
	p.dy = offset
	pl := c.Plot
	axis := stroke{Colour: colAxis, Width: 1}
	p.rect(pl.X, pl.Y, pl.W, pl.H, "#FFFFFF", 1)
	for _, t := range c.YTicks {
		g := "#DADADA"
		size := 12.0
		if t.Minor {
			g, size = "#EFEFEF", 10
		}
		p.seg(pl.X, t.Pos, pl.Right(), t.Pos, stroke{Colour: g, Width: 1})
		p.text(pl.X-8, t.Pos+4, t.Label, size, false, "end", colAxis)
	}
	for _, t := range c.XTicks {
		p.seg(t.Pos, pl.Y, t.Pos, pl.Bottom(), stroke{Colour: "#EFEFEF", Width: 1})
		p.seg(t.Pos, pl.Bottom(), t.Pos, pl.Bottom()+5, axis)
		p.text(t.Pos, pl.Bottom()+19, t.Label, 12, false, "middle", colAxis)
	}
	p.seg(pl.X, pl.Y, pl.X, pl.Bottom(), axis)
	p.seg(pl.X, pl.Bottom(), pl.Right(), pl.Bottom(), axis)
	// The y label, turned a quarter left around its centre.
	p.c.Push()
	p.c.Translate(p.pt(16, pl.Y+pl.H/2))
	p.c.Rotate(math.Pi / 2)
	fc := p.face(12, true)
	p.c.SetColor(hexColour("#222222", 1))
	p.c.FillString(fc, vg.Point{X: -fc.Width(c.YLabel) / 2}, c.YLabel)
	p.c.Pop()
	p.text(pl.X+pl.W/2, pl.Bottom()+38, c.XLabel, 12, true, "middle", "#222222")
	if c.Empty != "" {
		p.text(pl.X+pl.W/2, pl.Y+pl.H/2, c.Empty, 12, false, "middle", colGrey)
	}
	if c.Cone != nil {
		band := p.svgPath(c.Cone.D)
		p.c.SetColor(hexColour(c.Cone.Fill, 0.35))
		p.c.Fill(band)
		p.stroke(band, stroke{Colour: c.Cone.Fill, Width: 0.8})
	}
	for _, lv := range c.Levels {
		p.seg(pl.X, lv.Y, pl.Right(), lv.Y, lv.Stroke)
		p.text(pl.Right()+6, lv.Y+4, lv.Label, 12, false, "start", "#222222")
	}
	for _, s := range c.Series {
		p.stroke(p.svgPath(s.D), s.Stroke)
	}
	for _, r := range c.Clipped {
		p.rect(r.X0-2, r.Y-9, r.X1-r.X0+4, 7, colVermillion, 1)
		var tri vg.Path
		tri.Move(p.pt(r.X0, r.Y+7))
		tri.Line(p.pt(r.X0-5, r.Y-2))
		tri.Line(p.pt(r.X0+5, r.Y-2))
		tri.Close()
		p.c.SetColor(hexColour(colVermillion, 1))
		p.c.Fill(tri)
	}
	for _, s := range c.Series {
		for _, d := range s.Dots {
			var dot vg.Path
			ctr := p.pt(d.X, d.Y)
			dot.Move(vg.Point{X: ctr.X + vg.Length(d.R), Y: ctr.Y})
			dot.Arc(ctr, vg.Length(d.R), 0, 2*math.Pi)
			dot.Close()
			p.c.SetColor(hexColour(d.Fill, 1))
			p.c.Fill(dot)
		}
	}
	for i, it := range c.Legend {
		x := pl.X + float64(i%3)*250
		y := c.LegendY + float64(i/3)*20
		switch it.Kind {
		case "line":
			p.seg(x, y, x+28, y, it.Stroke)
		case "marker":
			p.rect(x, y-7, 28, 6, it.Fill, 1)
		default:
			fill := it.Fill
			if fill == "" {
				fill = colSkyBlue
			}
			p.rect(x, y-6, 28, 12, fill, 0.5)
		}
		p.text(x+36, y+4, it.Label, 12, false, "start", "#222222")
	}
}
