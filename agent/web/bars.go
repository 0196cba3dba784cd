package web

import (
	"cmp"
	"fmt"
	"math"
	"slices"

	"plumb/diagnostics"
)

// patternDef is a fill pattern: a colour with a grey-safe texture. Kind
// is "diag" (diagonal lines), "cross" (cross-hatch) or "dots".
type patternDef struct {
	ID     string
	Colour string
	Kind   string
}

// bar is one horizontal bar.
type bar struct {
	Label   string
	Class   string // data-category: ok, warning, critical, undefined, …
	Group   string // the row's name when several bars share a row
	X, Y    float64
	W, H    float64
	Fill    string
	Pattern string
	Value   string
	ValueX  float64
	Title   string
}

// rowLabel is a label at the left of a row of bars.
type rowLabel struct {
	Y    float64
	Text string
}

// vline is a vertical limit line.
type vline struct {
	X      float64
	Stroke stroke
	Label  string
}

// barChart is a horizontal bar chart on a log axis.
type barChart struct {
	ID, Title, Desc string
	W, H            float64
	Plot            rect
	XTicks          []tick
	XLabel          string
	Rows            []rowLabel
	Bars            []bar
	Levels          []vline
	Patterns        []patternDef
	Legend          []legendItem
	LegendY         float64
}

// vifChart lays out each column's VIF against the warn and critical
// levels: the columns whose VIF is undefined first, then by VIF, largest
// first.
func vifChart(id string, cols []diagnostics.ColumnReport, warn, crit float64) *barChart {
	rows := slices.Clone(cols)
	slices.SortStableFunc(rows, func(a, b diagnostics.ColumnReport) int {
		av, bv := math.Inf(1), math.Inf(1)
		if a.VIF != nil {
			av = *a.VIF
		}
		if b.VIF != nil {
			bv = *b.VIF
		}
		return cmp.Compare(bv, av)
	})
	const rowH, top = 24.0, 16.0
	c := &barChart{ID: id, Title: "VIF per column", W: 960,
		XLabel: "variance inflation factor VIF = 1/(1 − R²) (log scale)"}
	c.Plot = rect{X: 200, Y: top, W: 620, H: rowH * float64(max(len(rows), 1))}
	c.H = c.Plot.Bottom() + 92
	c.Desc = fmt.Sprintf("VIF of %d columns against the warn level %s and the critical level %s", len(rows), fmtNum(warn), fmtNum(crit))
	hi := math.Max(crit*3, 10)
	for _, r := range rows {
		if r.VIF != nil {
			hi = math.Max(hi, *r.VIF*1.2)
		}
	}
	hi = math.Pow(10, math.Ceil(math.Log10(hi)-1e-9))
	xs := logScale{Lo: 1, Hi: hi, P0: c.Plot.X, P1: c.Plot.Right()}
	c.XTicks = xs.ticks()
	c.Patterns = []patternDef{
		{ID: id + "-warning", Colour: colOrange, Kind: "diag"},
		{ID: id + "-critical", Colour: colVermillion, Kind: "cross"},
		{ID: id + "-undefined", Colour: "#A8A8A8", Kind: "dots"},
	}
	used := map[string]bool{}
	for i, r := range rows {
		y := c.Plot.Y + float64(i)*rowH
		b := bar{Label: r.Name, X: c.Plot.X, Y: y + 4, H: rowH - 8}
		c.Rows = append(c.Rows, rowLabel{Y: y + rowH/2, Text: r.Name})
		switch {
		case r.VIF == nil:
			why := r.Undefined
			if why == "" {
				why = "undefined"
			}
			b.Class, b.W, b.Pattern = "undefined", c.Plot.W, id+"-undefined"
			b.Value, b.Title = "∞ · "+why, r.Name+": VIF undefined ("+why+")"
		default:
			v := *r.VIF
			b.W = math.Max(xs.At(v)-c.Plot.X, 1.5)
			b.Value = fmtNum(v)
			b.Title = fmt.Sprintf("%s: VIF %s, standard error ×%s", r.Name, fmtNum(v), fmtNum(math.Sqrt(v)))
			switch {
			case crit > 0 && v >= crit:
				b.Class, b.Pattern = "critical", id+"-critical"
			case warn > 0 && v >= warn:
				b.Class, b.Pattern = "warning", id+"-warning"
			default:
				b.Class, b.Fill = "ok", colGreen
			}
		}
		used[b.Class] = true
		b.ValueX = b.X + b.W + 6
		if b.Class == "undefined" {
			b.ValueX = b.X + 8
		}
		c.Bars = append(c.Bars, b)
	}
	c.Legend = []legendItem{
		{Label: "below warn", Kind: "bar", Fill: colGreen},
		{Label: "warn to critical", Kind: "bar", Pattern: id + "-warning"},
		{Label: "critical or above", Kind: "bar", Pattern: id + "-critical"},
		{Label: "undefined (∞)", Kind: "bar", Pattern: id + "-undefined"},
	}
	// The legend shows the level lines drawn, with their strokes.
	if warn > 0 {
		st := stroke{Colour: colOrange, Width: 1.5, Dash: dashWarn}
		c.Levels = append(c.Levels, vline{X: xs.At(warn), Stroke: st, Label: "warn " + fmtNum(warn)})
		c.Legend = append(c.Legend, legendItem{Label: "warn level", Kind: "line", Stroke: st})
	}
	if crit > 0 {
		st := stroke{Colour: colVermillion, Width: 1.5, Dash: dashCritical}
		c.Levels = append(c.Levels, vline{X: xs.At(crit), Stroke: st, Label: "critical " + fmtNum(crit)})
		c.Legend = append(c.Legend, legendItem{Label: "critical level", Kind: "line", Stroke: st})
	}
	c.LegendY = c.Plot.Bottom() + 62
	return c
}

// splitChart lays out, per regressor, the three severities of the
// variance split (1 = the alarm level of each factor).
func splitChart(id string, split []diagnostics.VarianceSplit) *barChart {
	const groupH, barH, top = 46.0, 11.0, 16.0
	c := &barChart{ID: id, Title: "Why each coefficient's variance is large", W: 960,
		XLabel: "severity of each factor (1 = alarm level; log scale)"}
	c.Plot = rect{X: 200, Y: top, W: 620, H: groupH * float64(max(len(split), 1))}
	c.H = c.Plot.Bottom() + 92
	c.Desc = fmt.Sprintf("poor fit, little variation and redundancy severities of %d coefficients", len(split))
	hi := 10.0
	for _, s := range split {
		hi = math.Max(hi, math.Max(s.FitSeverity, math.Max(s.VariationSeverity, s.RedundancySeverity))*1.2)
	}
	hi = math.Min(math.Pow(10, math.Ceil(math.Log10(hi)-1e-9)), 1e4)
	xs := logScale{Lo: 0.01, Hi: hi, P0: c.Plot.X, P1: c.Plot.Right()}
	c.XTicks = xs.ticks()
	c.Patterns = []patternDef{
		{ID: id + "-variation", Colour: colOrange, Kind: "diag"},
		{ID: id + "-redundancy", Colour: colPurple, Kind: "cross"},
	}
	factors := []struct {
		class, label, fill, pattern string
		v                           func(diagnostics.VarianceSplit) float64
	}{
		{"poor-fit", "poor fit (σ²)", colBlue, "", func(s diagnostics.VarianceSplit) float64 { return s.FitSeverity }},
		{"little-variation", "little variation (SST)", "", id + "-variation", func(s diagnostics.VarianceSplit) float64 { return s.VariationSeverity }},
		{"redundancy", "redundancy (1 − R²)", "", id + "-redundancy", func(s diagnostics.VarianceSplit) float64 { return s.RedundancySeverity }},
	}
	for i, s := range split {
		y := c.Plot.Y + float64(i)*groupH
		c.Rows = append(c.Rows, rowLabel{Y: y + groupH/2, Text: s.Name})
		for k, f := range factors {
			v := f.v(s)
			w := 1.5
			if v > 0 && !math.IsNaN(v) {
				w = math.Max(xs.At(v)-c.Plot.X, 1.5)
			}
			b := bar{Label: f.label, Class: f.class, Group: s.Name, X: c.Plot.X, Y: y + 6 + float64(k)*barH, W: w, H: barH - 2,
				Fill: f.fill, Pattern: f.pattern, Value: fmtNum(v), Title: fmt.Sprintf("%s — %s: %s", s.Name, f.label, fmtNum(v))}
			b.ValueX = b.X + b.W + 6
			c.Bars = append(c.Bars, b)
		}
	}
	c.Levels = []vline{{X: xs.At(1), Stroke: stroke{Colour: colBlack, Width: 1.2, Dash: dashWarn}, Label: "alarm 1"}}
	c.Legend = []legendItem{
		{Label: factors[0].label, Kind: "bar", Fill: colBlue},
		{Label: factors[1].label, Kind: "bar", Pattern: id + "-variation"},
		{Label: factors[2].label, Kind: "bar", Pattern: id + "-redundancy"},
		{Label: "alarm level", Kind: "line", Stroke: c.Levels[0].Stroke},
	}
	c.LegendY = c.Plot.Bottom() + 62
	return c
}
