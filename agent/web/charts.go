package web

import (
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"

	"plumb/connectors"
)

// Charts are laid out here, in SVG user units, and drawn by the templates
// in templates/charts.tmpl. Only presentation attributes are used (no
// style attributes or elements), so the inline SVG passes the pages'
// Content-Security-Policy and a chart written to a file looks the same.

// rect is a plot area.
type rect struct{ X, Y, W, H float64 }

func (r rect) Right() float64  { return r.X + r.W }
func (r rect) Bottom() float64 { return r.Y + r.H }

// tick is an axis tick: its position along the axis and its label.
type tick struct {
	Pos   float64
	Label string
	Minor bool
}

// stroke is how a line is drawn.
type stroke struct {
	Colour string
	Width  float64
	Dash   string
	// Cap is the line cap, "" for butt; a legend draws its sample with
	// the same cap, so that a dashed line looks the same in both.
	Cap string
}

// legendItem is one entry of a legend; Kind is line, area, bar or marker.
type legendItem struct {
	Label   string
	Kind    string
	Stroke  stroke
	Fill    string
	Pattern string // id of a pattern for Kind bar or area
}

// series is one drawn line.
type series struct {
	Name   string
	Class  string // data-series attribute: tests and readers find it by name
	D      string // path data
	Stroke stroke
	Dots   []dot // points worth marking (the last one, clipped ones)
}

type dot struct {
	X, Y  float64
	R     float64
	Shape string // circle or triangle
	Fill  string
	Title string
}

// level is a horizontal limit line.
type level struct {
	Name   string
	Y      float64
	Stroke stroke
	Label  string
}

// limitLine draws a limit ("warn" or "critical", in its colour and dash)
// at height y, with its label on the chart and its entry in the legend.
func (c *lineChart) limitLine(name string, y float64, label, legend string) {
	st := stroke{Colour: colOrange, Width: 1.5, Dash: dashWarn}
	if name == "critical" {
		st = stroke{Colour: colVermillion, Width: 1.5, Dash: dashCritical}
	}
	c.Levels = append(c.Levels, level{Name: name, Y: y, Stroke: st, Label: label})
	c.Legend = append(c.Legend, legendItem{Label: legend, Kind: "line", Stroke: st})
}

// cone is a forecast band.
type cone struct {
	D       string // closed polygon of the band
	Centre  string // path of the central line
	Fill    string
	Pattern string
	Stroke  stroke
}

// lineChart is a timeline: one metric over time on a log axis, its levels
// and its forecast.
type lineChart struct {
	ID, Title, Desc string
	Metric          string
	W, H            float64
	Plot            rect
	XTicks, YTicks  []tick
	XLabel, YLabel  string
	Series          []series
	Levels          []level
	Cone            *cone
	Clipped         []clipRun
	Alerts          []alertMark
	Legend          []legendItem
	LegendY         float64
	// Filling shades the first windows, still filling (nil when none).
	Filling      *rect
	FillingTitle string
	Empty        string    // message when there is nothing to draw
	xs           timeScale // the time axis, for marks added after the layout
	// Fixed draws the chart at its own size at OffsetY inside another
	// SVG (a file), rather than at the page's width.
	Fixed   bool
	OffsetY float64
}

// logScale maps [Lo, Hi] logarithmically onto pixels [P0, P1].
type logScale struct{ Lo, Hi, P0, P1 float64 }

func (s logScale) At(v float64) float64 {
	v = math.Min(math.Max(v, s.Lo), s.Hi)
	f := (math.Log10(v) - math.Log10(s.Lo)) / (math.Log10(s.Hi) - math.Log10(s.Lo))
	return s.P0 + f*(s.P1-s.P0)
}

// ticks returns ticks at 1, 2, 5 × powers of ten (labelled) within range,
// fewer when the range is wide.
func (s logScale) ticks() []tick {
	var out []tick
	decades := math.Log10(s.Hi) - math.Log10(s.Lo)
	steps := []float64{1, 2, 5}
	if decades > 4 {
		steps = []float64{1}
	}
	for e := math.Floor(math.Log10(s.Lo)); e <= math.Ceil(math.Log10(s.Hi)); e++ {
		for _, m := range steps {
			v := m * math.Pow(10, e)
			if v < s.Lo*0.999 || v > s.Hi*1.001 {
				continue
			}
			out = append(out, tick{Pos: s.At(v), Label: fmtTick(v), Minor: m != 1})
		}
	}
	return out
}

// timeScale maps times linearly onto pixels.
type timeScale struct {
	T0, T1 time.Time
	P0, P1 float64
}

func (s timeScale) At(t time.Time) float64 {
	span := s.T1.Sub(s.T0)
	if span <= 0 {
		return (s.P0 + s.P1) / 2
	}
	return s.P0 + float64(t.Sub(s.T0))/float64(span)*(s.P1-s.P0)
}

// ticks returns day-aligned ticks about every 80 px.
func (s timeScale) ticks() []tick {
	span := s.T1.Sub(s.T0)
	if span <= 0 {
		return []tick{{Pos: s.At(s.T0), Label: s.T0.Format("Jan 2")}}
	}
	want := math.Max(1, (s.P1-s.P0)/80)
	days := span.Hours() / 24 / want
	step := 1
	for _, c := range []int{1, 2, 7, 14, 28, 56, 91, 182, 364} {
		step = c
		if float64(c) >= days {
			break
		}
	}
	var out []tick
	t := time.Date(s.T0.Year(), s.T0.Month(), s.T0.Day(), 0, 0, 0, 0, s.T0.Location())
	if t.Before(s.T0) {
		t = t.AddDate(0, 0, 1)
	}
	if step >= 7 { // weekly ticks fall on Mondays
		for t.Weekday() != time.Monday {
			t = t.AddDate(0, 0, 1)
		}
	}
	if span < 48*time.Hour { // hourly data: label hours
		for t := s.T0.Truncate(time.Hour); !t.After(s.T1); t = t.Add(6 * time.Hour) {
			if !t.Before(s.T0) {
				out = append(out, tick{Pos: s.At(t), Label: t.Format("Jan 2 15h")})
			}
		}
		return out
	}
	for ; !t.After(s.T1); t = t.AddDate(0, 0, step) {
		out = append(out, tick{Pos: s.At(t), Label: t.Format("Jan 2")})
	}
	return out
}

// metricOf returns a point's value of metric: for the condition number,
// the one the limits judge.
func metricOf(p Point, metric string) float64 {
	if metric == MetricMaxVIF {
		return p.MaxVIF
	}
	return p.Judged
}

// CondTitle names the condition number a basis judges.
func CondTitle(basis string) string {
	if basis == "intercept" {
		return "Condition number (with the intercept)"
	}
	return "Centered condition number"
}

// timelineChart lays out the timeline of one metric with its warn and
// critical levels and forecast cone.
//
// The condition-number chart is titled after the basis its levels judge
// (basis, "centered" by default). Points of windows still filling lie on
// a shaded band: no alert comes from them.
func timelineChart(id, metric string, tl []Point, fc *Forecast, warn, crit float64, basis ...string) *lineChart {
	title, unit, col := CondTitle(""), "ratio, log scale", colBlue
	if len(basis) > 0 {
		title = CondTitle(basis[0])
	}
	if metric == MetricMaxVIF {
		title, unit, col = "Max VIF", "ratio, log scale", colPurple
	}
	c := &lineChart{
		ID: id, Title: title, Metric: metric, W: 960, H: 345,
		Plot:   rect{X: 64, Y: 18, W: 760, H: 232},
		XLabel: "window end (date, UTC)", YLabel: title + " (" + unit + ")",
	}
	c.Desc = fmt.Sprintf("%s per run window, %d points", title, len(tl))
	if len(tl) == 0 {
		c.Empty = "No successful run yet: nothing to draw."
		return c
	}
	// Value range: finite values, the levels and the forecast; values far
	// past the critical level are clipped to the top and marked.
	hi, lo := 1.0, math.Inf(1)
	for _, p := range tl {
		v := metricOf(p, metric)
		if !math.IsInf(v, 0) && !math.IsNaN(v) {
			hi = math.Max(hi, v)
			lo = math.Min(lo, v)
		}
	}
	hi = math.Max(hi, crit*1.5)
	hi = math.Max(hi, warn*1.5)
	if fc != nil {
		for _, fp := range fc.Points {
			if !math.IsInf(fp.Value, 0) && !math.IsNaN(fp.Value) {
				hi = math.Max(hi, fp.Value)
			}
		}
	}
	clip := math.Inf(1)
	if crit > 0 {
		clip = crit * 1000
	}
	hi = math.Min(hi, clip)
	hi = math.Pow(10, math.Ceil(math.Log10(hi)-1e-9))
	lo = 1
	ys := logScale{Lo: lo, Hi: hi, P0: c.Plot.Bottom(), P1: c.Plot.Y}
	t0, t1 := tl[0].At, tl[len(tl)-1].At
	if fc != nil && len(fc.Points) > 0 {
		if e := fc.Points[len(fc.Points)-1].At; e.After(t1) {
			t1 = e
		}
	}
	xs := timeScale{T0: t0, T1: t1, P0: c.Plot.X, P1: c.Plot.Right()}
	c.xs = xs
	c.XTicks, c.YTicks = xs.ticks(), ys.ticks()
	for i, p := range tl {
		if !p.Filling {
			if i > 0 {
				end := xs.At(p.At)
				c.Filling = &rect{X: c.Plot.X, Y: c.Plot.Y, W: end - c.Plot.X, H: c.Plot.H}
				c.FillingTitle = fmt.Sprintf("%s – %s: the window is filling; no alert comes from it",
					tl[0].At.Format("Jan 2"), tl[i-1].At.Format("Jan 2"))
			}
			break
		}
	}

	var d strings.Builder
	s := series{Name: title, Class: metric, Stroke: stroke{Colour: col, Width: 2, Cap: "round"}}
	pen := false
	for _, p := range tl {
		v := metricOf(p, metric)
		x := xs.At(p.At)
		if math.IsNaN(v) {
			pen = false
			continue
		}
		y := ys.At(v)
		if pen {
			fmt.Fprintf(&d, "L%s %s", f1(x), f1(y))
		} else {
			fmt.Fprintf(&d, "M%s %s", f1(x), f1(y))
			pen = true
		}
		if v >= hi {
			what := "above " + fmtTick(hi) + ", off the scale"
			if p.RankDeficiency() > 0 {
				what = fmt.Sprintf("rank deficient by %d: exact dependency", p.RankDeficiency())
			}
			if n := len(c.Clipped); n > 0 && c.Clipped[n-1].open && c.Clipped[n-1].What == what {
				c.Clipped[n-1].X1 = x
				c.Clipped[n-1].To = p.At
			} else {
				c.closeClipped()
				c.Clipped = append(c.Clipped, clipRun{X0: x, X1: x, From: p.At, To: p.At, What: what, open: true})
			}
		} else {
			c.closeClipped()
		}
	}
	c.closeClipped()
	for i := range c.Clipped {
		r := &c.Clipped[i]
		r.Y = c.Plot.Y
		r.Title = r.From.Format("Jan 2")
		if !r.To.Equal(r.From) {
			r.Title += " – " + r.To.Format("Jan 2")
		}
		r.Title += ": " + r.What
	}
	last := tl[len(tl)-1]
	if v := metricOf(last, metric); !math.IsNaN(v) && v < hi {
		s.Dots = append(s.Dots, dot{X: xs.At(last.At), Y: ys.At(v), R: 3.5, Shape: "circle", Fill: col,
			Title: "data through " + connectors.DataThrough(last.At) + ": " + fmtNum(v)})
	}
	s.D = d.String()
	c.Series = append(c.Series, s)
	c.Legend = append(c.Legend, legendItem{Label: title, Kind: "line", Stroke: s.Stroke})

	if fc != nil && len(fc.Points) > 1 {
		var band, centre strings.Builder
		for i, fp := range fc.Points {
			op := "L"
			if i == 0 {
				op = "M"
			}
			fmt.Fprintf(&band, "%s%s %s", op, f1(xs.At(fp.At)), f1(ys.At(fp.High)))
			fmt.Fprintf(&centre, "%s%s %s", op, f1(xs.At(fp.At)), f1(ys.At(fp.Value)))
		}
		for i := len(fc.Points) - 1; i >= 0; i-- {
			fp := fc.Points[i]
			fmt.Fprintf(&band, "L%s %s", f1(xs.At(fp.At)), f1(ys.At(fp.Low)))
		}
		band.WriteString("Z")
		c.Cone = &cone{D: band.String(), Centre: centre.String(), Fill: colSkyBlue,
			Pattern: id + "-cone", Stroke: stroke{Colour: col, Width: 1.5, Dash: dashForecast, Cap: "round"}}
		c.Series = append(c.Series, series{Name: "forecast", Class: "forecast", D: centre.String(), Stroke: c.Cone.Stroke})
		c.Legend = append(c.Legend,
			legendItem{Label: "forecast (trend)", Kind: "line", Stroke: c.Cone.Stroke},
			legendItem{Label: "forecast range", Kind: "area", Fill: colSkyBlue, Pattern: id + "-cone"})
	}
	if warn > 0 && warn < hi {
		c.limitLine("warn", ys.At(warn), "warn "+fmtNum(warn), "warn level "+fmtNum(warn))
	}
	if crit > 0 && crit < hi {
		c.limitLine("critical", ys.At(crit), "critical "+fmtNum(crit), "critical level "+fmtNum(crit))
	}
	if len(c.Clipped) > 0 {
		c.Legend = append(c.Legend, legendItem{Label: "off the scale or rank deficient (∞)", Kind: "marker", Fill: colVermillion, Pattern: id + "-clip-fill"})
	}
	c.LegendY = c.Plot.Bottom() + 58
	c.fitLegend()
	return c
}

// fitLegend sizes the chart to its legend's rows (three items a row).
func (c *lineChart) fitLegend() {
	rows := (len(c.Legend) + 2) / 3
	c.H = math.Max(c.H, c.LegendY+float64(rows)*20)
}

// alertMark is a diamond on the time axis where an alert opened.
type alertMark struct {
	X, Y     float64
	Severity string
	Rule     string
	Fill     string
	Title    string
}

// markAlerts puts a diamond above the time axis at the data time of each
// alert of the segment that concerns the chart's metric; exact and
// constant alerts go on the condition number's chart, where the rank
// shows.
func (c *lineChart) markAlerts(alerts []Alert, segment string) {
	if c.Empty != "" {
		return
	}
	kinds := map[string]bool{}
	for _, a := range alerts {
		mine := a.Metric == c.Metric || (a.Metric == "" && c.Metric == MetricCondition && (a.Rule == "exact" || a.Rule == "constant"))
		if a.Segment != segment || !mine || a.AsOf.Before(c.xs.T0) || a.AsOf.After(c.xs.T1) {
			continue
		}
		m := alertMark{X: c.xs.At(a.AsOf), Y: c.Plot.Bottom() - 8, Severity: a.Severity, Rule: a.Rule, Fill: colOrange,
			Title: "data through " + connectors.DataThrough(a.AsOf) + " · " + a.Severity + " (" + a.Rule + "): " + a.Message}
		if a.Severity == SeverityCritical {
			m.Fill = colVermillion
		}
		c.Alerts = append(c.Alerts, m)
		kinds[a.Severity] = true
	}
	if kinds[SeverityWarning] {
		c.Legend = append(c.Legend, legendItem{Label: "warning alert opened", Kind: "diamond", Fill: colOrange, Pattern: "hollow"})
	}
	if kinds[SeverityCritical] {
		c.Legend = append(c.Legend, legendItem{Label: "critical alert opened", Kind: "diamond", Fill: colVermillion})
	}
	c.fitLegend()
}

// clipRun is a stretch of points above the top of the axis, drawn as a
// hatched band along the top edge.
type clipRun struct {
	X0, X1, Y float64
	From, To  time.Time
	What      string
	Title     string
	open      bool
}

func (c *lineChart) closeClipped() {
	if n := len(c.Clipped); n > 0 {
		c.Clipped[n-1].open = false
	}
}

// sparkline is the overview's small trend line.
type sparkline struct {
	W, H    float64
	D       string
	Colour  string
	LevelY  float64 // critical level, 0 = not drawn
	Dash    string
	LastX   float64
	LastY   float64
	Title   string
	Clipped bool
	// LastUnbounded marks a last point above the scale (∞).
	LastUnbounded bool
}

// sparklineOf draws the condition number of the trend points (log scale,
// from 1 to past the critical level).
func sparklineOf(tl []Point, crit float64) *sparkline {
	if len(tl) < 2 {
		return nil
	}
	sp := &sparkline{W: 132, H: 30, Colour: colBlue, Dash: dashCritical}
	// The scale spans the finite values and the critical level, so the
	// shape of the trend shows; unbounded values sit on the top edge.
	lo, hi := math.Inf(1), math.Inf(-1)
	if crit > 0 {
		lo, hi = crit, crit
	}
	for _, p := range tl {
		if v := metricOf(p, MetricCondition); !math.IsInf(v, 0) && !math.IsNaN(v) && v > 0 {
			lo, hi = math.Min(lo, v), math.Max(hi, v)
		}
	}
	if math.IsInf(lo, 0) {
		lo, hi = 1, 10
	}
	lo, hi = math.Max(lo/1.25, 1e-3), hi*1.25
	ys := logScale{Lo: lo, Hi: hi, P0: sp.H - 2, P1: 3}
	xs := timeScale{T0: tl[0].At, T1: tl[len(tl)-1].At, P0: 2, P1: sp.W - 4}
	var d strings.Builder
	for i, p := range tl {
		v := metricOf(p, MetricCondition)
		if math.IsNaN(v) {
			continue
		}
		if v >= hi {
			sp.Clipped = true
		}
		op := "L"
		if i == 0 || d.Len() == 0 {
			op = "M"
		}
		fmt.Fprintf(&d, "%s%s %s", op, f1(xs.At(p.At)), f1(ys.At(v)))
		sp.LastX, sp.LastY = xs.At(p.At), ys.At(v)
		sp.LastUnbounded = v >= hi
	}
	sp.D = d.String()
	if crit > 0 {
		sp.LevelY = ys.At(crit)
	}
	first, last := tl[0], tl[len(tl)-1]
	sp.Title = fmt.Sprintf("condition number from %s (%s) to %s (%s); dashed: critical level %s",
		fmtNum(metricOf(first, MetricCondition)), first.At.Format("Jan 2"),
		fmtNum(metricOf(last, MetricCondition)), last.At.Format("Jan 2"), fmtNum(crit))
	return sp
}

// f1 formats a coordinate with one decimal.
func f1(v float64) string { return strconv.FormatFloat(v, 'f', 1, 64) }

// fmtTick labels a log-axis tick: 1, 2, 5, 10, …, 1k, 10k, 1e6.
func fmtTick(v float64) string {
	switch {
	case v >= 1e6:
		return "10" + superscript(int(math.Round(math.Log10(v))))
	case v >= 1e3:
		return strconv.FormatFloat(v/1e3, 'f', -1, 64) + "k"
	}
	return strconv.FormatFloat(v, 'f', -1, 64)
}

// FormatNumber writes a metric as the dashboard does, for the command
// line to print numbers the same way.
func FormatNumber(v float64) string { return fmtNum(v) }

// fmtNum formats a metric for people, with about three significant
// digits: 7.25, 42.5, 4218, 43 210 (grouped by a narrow space), 13.1
// million, 4.5 billion, 4.50 × 10¹⁵; ∞ for +Inf and "—" for NaN.
func fmtNum(v float64) string {
	switch {
	case math.IsNaN(v):
		return "—"
	case math.IsInf(v, 1):
		return "∞"
	case math.IsInf(v, -1):
		return "−∞"
	}
	a := math.Abs(v)
	switch {
	case a == 0:
		return "0"
	case a >= 999.5e9:
		exp := int(math.Floor(math.Log10(a)))
		m := v / math.Pow(10, float64(exp))
		if math.Abs(m) >= 9.995 {
			m, exp = m/10, exp+1
		}
		return strconv.FormatFloat(m, 'f', 2, 64) + " × 10" + superscript(exp)
	case a >= 999.5e6:
		return trimZeros(strconv.FormatFloat(v/1e9, 'f', 3-digitsBefore(a/1e9), 64)) + " billion"
	case a >= 999.5e3:
		return trimZeros(strconv.FormatFloat(v/1e6, 'f', 3-digitsBefore(a/1e6), 64)) + " million"
	case a >= 1e4:
		return fmtCount(int64(math.Round(v)))
	case a >= 100:
		return strconv.FormatFloat(v, 'f', 0, 64)
	case a >= 10:
		return trimZeros(strconv.FormatFloat(v, 'f', 1, 64))
	case a >= 0.01:
		return trimZeros(strconv.FormatFloat(v, 'f', 2, 64))
	}
	return strconv.FormatFloat(v, 'g', 3, 64)
}

// digitsBefore is the number of digits before the point of a in [1, 1000)
// once rounded to three significant digits.
func digitsBefore(a float64) int {
	switch {
	case a >= 99.95:
		return 3
	case a >= 9.995:
		return 2
	}
	return 1
}

// superscript writes n in superscript digits: 15 → ¹⁵.
func superscript(n int) string {
	const digits = "⁰¹²³⁴⁵⁶⁷⁸⁹"
	sup := []rune(digits)
	var b strings.Builder
	if n < 0 {
		b.WriteRune('⁻')
		n = -n
	}
	for _, c := range strconv.Itoa(n) {
		b.WriteRune(sup[c-'0'])
	}
	return b.String()
}

// fmtRate writes a trend's relative change per day for people: "rising
// 2.3 %/day", "falling 0.4 %/day", "flat" when it rounds to zero (never
// "-0.0%/day").
func fmtRate(rate float64) string {
	pct := 100 * rate
	switch {
	case math.IsNaN(pct):
		return "no trend"
	case math.Abs(pct) < 0.05:
		return "flat"
	case pct > 0:
		return "rising " + trimZeros(strconv.FormatFloat(pct, 'f', 1, 64)) + " %/day"
	}
	return "falling " + trimZeros(strconv.FormatFloat(-pct, 'f', 1, 64)) + " %/day"
}

// trimZeros drops trailing zeros of a decimal: "5.00" → "5", "7.50" → "7.5".
func trimZeros(s string) string {
	if !strings.Contains(s, ".") {
		return s
	}
	s = strings.TrimRight(s, "0")
	return strings.TrimSuffix(s, ".")
}
