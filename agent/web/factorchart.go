package web

import (
	"fmt"
	"math"
	"strings"
)

// MetricFactor names the timeline of the categorical columns'
// GVIF^(1/(2·df)) (the chart's data-metric).
const MetricFactor = "gvif_adjusted"

// factorStrokes tell the factors' lines apart by colour and by dash, so
// that they stay apart in grey.
var factorStrokes = []stroke{
	{Colour: colGreen, Width: 2, Cap: "round"},
	{Colour: colBlue, Width: 2, Dash: "6 3", Cap: "round"},
	{Colour: colBlack, Width: 2, Dash: "1 3", Cap: "round"},
	{Colour: colPurple, Width: 2, Dash: "10 3 2 3", Cap: "round"},
}

// factorChart lays out the GVIF^(1/(2·df)) of each categorical column
// over the timeline, on a log axis, with the square roots of the VIF
// levels: GVIF^(1/(2·df)) is on the scale of √VIF (Fox & Monette 1992).
// A point where a factor's GVIF is undefined breaks its line. It returns
// nil when the timeline has no factor.
func factorChart(id string, tl []Point, vifWarn, vifCrit float64) *lineChart {
	var names []string
	hi := 1.0
	for _, p := range tl {
		for _, f := range p.Factors {
			known := false
			for _, n := range names {
				known = known || n == f.Name
			}
			if !known {
				names = append(names, f.Name)
			}
			if v := f.GVIFAdjusted; v != nil && !math.IsInf(*v, 0) && !math.IsNaN(*v) {
				hi = math.Max(hi, *v)
			}
		}
	}
	if len(names) == 0 || len(tl) == 0 {
		return nil
	}
	warn, crit := math.Sqrt(vifWarn), math.Sqrt(vifCrit)
	title := "GVIF^(1/(2·df)) of the categorical columns"
	c := &lineChart{
		ID: id, Title: title, Metric: MetricFactor, W: 960, H: 345,
		Plot:   rect{X: 64, Y: 18, W: 760, H: 232},
		XLabel: "window end (date, UTC)", YLabel: "GVIF^(1/(2·df)) (log scale)",
	}
	c.Desc = fmt.Sprintf("%s per run window, %d points, %d columns", title, len(tl), len(names))
	hi = math.Max(hi, crit*1.5)
	hi = math.Pow(10, math.Ceil(math.Log10(hi)-1e-9))
	ys := logScale{Lo: 1, Hi: hi, P0: c.Plot.Bottom(), P1: c.Plot.Y}
	xs := timeScale{T0: tl[0].At, T1: tl[len(tl)-1].At, P0: c.Plot.X, P1: c.Plot.Right()}
	c.xs = xs
	c.XTicks, c.YTicks = xs.ticks(), ys.ticks()
	for i, name := range names {
		st := factorStrokes[i%len(factorStrokes)]
		s := series{Name: name, Class: "factor:" + name, Stroke: st}
		var d strings.Builder
		pen := false
		var last *Point
		for j := range tl {
			f := factorOf(tl[j].Factors, name)
			if f == nil || f.GVIFAdjusted == nil {
				pen = false
				continue
			}
			x, y := xs.At(tl[j].At), ys.At(*f.GVIFAdjusted)
			op := "L"
			if !pen {
				op = "M"
			}
			fmt.Fprintf(&d, "%s%s %s", op, f1(x), f1(y))
			pen = true
			last = &tl[j]
		}
		if last != nil {
			v := *factorOf(last.Factors, name).GVIFAdjusted
			s.Dots = append(s.Dots, dot{X: xs.At(last.At), Y: ys.At(v), R: 3.5, Shape: "circle", Fill: st.Colour,
				Title: name + ": " + fmtNum(v)})
		}
		s.D = d.String()
		c.Series = append(c.Series, s)
		c.Legend = append(c.Legend, legendItem{Label: name, Kind: "line", Stroke: st})
	}
	if warn > 0 && warn < hi {
		c.limitLine("warn", ys.At(warn), "√"+fmtNum(vifWarn), "√ of the VIF warn level "+fmtNum(vifWarn))
	}
	if crit > 0 && crit < hi {
		c.limitLine("critical", ys.At(crit), "√"+fmtNum(vifCrit), "√ of the VIF critical level "+fmtNum(vifCrit))
	}
	c.LegendY = c.Plot.Bottom() + 58
	c.fitLegend()
	return c
}
