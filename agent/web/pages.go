package web

import (
	"bytes"
	"context"
	"embed"
	"errors"
	"fmt"
	"html/template"
	"io/fs"
	"net/http"
	"net/url"
	"slices"
	"sort"
	"strings"
	"time"

	"plumb/connectors"
	"plumb/diagnostics"
)

//go:embed templates/*.tmpl
var templateFS embed.FS

//go:embed static
var embeddedStatic embed.FS

// staticFS serves /static/… from the embedded static folder.
var staticFS fs.FS = embeddedStatic

// pages holds the parsed templates.
type pages struct {
	overview, watch, alerts, notFound *template.Template
}

var funcs = template.FuncMap{
	"num":  fmtNum,
	"f1":   f1,
	"corr": fmtCorr,
	"date": func(t time.Time) string {
		if t.IsZero() {
			return "—"
		}
		return t.UTC().Format("2006-01-02")
	},
	"datetime": func(t time.Time) string {
		if t.IsZero() {
			return "—"
		}
		return t.UTC().Format("2006-01-02 15:04 UTC")
	},
	"iso":      func(t time.Time) string { return t.UTC().Format(time.RFC3339) },
	"through":  connectors.DataThrough,
	"dur":      fmtDuration,
	"count":    fmtCount,
	"icon":     stateIcon,
	"colour":   stateColour,
	"segname":  segmentName,
	"seglabel": connectors.SegmentLabel,
	"watchURL": watchURL,
	"add":      func(a, b float64) float64 { return a + b },
	"contains": strings.Contains,
	"sub":      func(a, b float64) float64 { return a - b },
	"half":     func(a float64) float64 { return a / 2 },
	"legendX":  func(i int) float64 { return float64(i%3) * 250 },
	"legendAt": func(items []legendItem, x, y float64) legendBox { return legendBox{X: x, Y: y, Items: items} },
	"legendY":  func(i int) float64 { return float64(i/3) * 20 },
}

func newPages(logout bool) (*pages, error) {
	parse := func(name string) (*template.Template, error) {
		t, err := template.New(name).Funcs(funcs).Funcs(template.FuncMap{"logout": func() bool { return logout }}).ParseFS(templateFS, "templates/layout.tmpl", "templates/charts.tmpl", "templates/"+name)
		if err != nil {
			return nil, fmt.Errorf("dashboard templates: %w", err)
		}
		return t, nil
	}
	var p pages
	var err error
	if p.overview, err = parse("overview.tmpl"); err != nil {
		return nil, err
	}
	if p.watch, err = parse("watch.tmpl"); err != nil {
		return nil, err
	}
	if p.alerts, err = parse("alerts.tmpl"); err != nil {
		return nil, err
	}
	if p.notFound, err = parse("notfound.tmpl"); err != nil {
		return nil, err
	}
	return &p, nil
}

// render executes t into a buffer first, so a template error becomes a
// 500 rather than half a page.
func (s *Server) render(w http.ResponseWriter, status int, t *template.Template, data any) {
	var buf bytes.Buffer
	if err := t.ExecuteTemplate(&buf, "layout", data); err != nil {
		s.opt.Logger.Error("dashboard template", "err", err)
		http.Error(w, "500 internal error: the page could not be drawn (see the log)", http.StatusInternalServerError)
		return
	}
	w.Header().Set("Content-Type", "text/html; charset=utf-8")
	w.Header().Set("Cache-Control", "no-store")
	w.WriteHeader(status)
	w.Write(buf.Bytes())
}

// legendBox places a legend.
type legendBox struct {
	X, Y  float64
	Items []legendItem
}

// page is what every page's layout needs.
type page struct {
	Title     string
	Generated time.Time
	Error     string
}

// alertsData is the alerts page: every watch's open alerts, or all.
type alertsData struct {
	page
	All    bool
	Alerts []Alert
}

// alertsPage lists the alerts of every watch, newest first: the open
// ones, or with ?state=all every one.
func (s *Server) alertsPage(w http.ResponseWriter, r *http.Request) {
	ctx, cancel := context.WithTimeout(r.Context(), apiTimeout)
	defer cancel()
	data := alertsData{page: page{Title: "Alerts", Generated: s.opt.Now()}, All: r.URL.Query().Get("state") == "all"}
	alerts, err := allAlerts(ctx, s.opt.View, !data.All)
	if err != nil {
		s.opt.Logger.Error("alerts page: state store", "err", err)
		data.Error = "The state store could not be read: " + err.Error()
		s.render(w, http.StatusServiceUnavailable, s.pages.alerts, data)
		return
	}
	data.Alerts = alerts
	s.render(w, http.StatusOK, s.pages.alerts, data)
}

// overviewRow is one watch on the overview.
type overviewRow struct {
	WatchSummary
	Href       string
	Headline   *SegmentSummary
	Flagged    []SegmentSummary // segments not ok, besides the headline
	Spark      *sparkline
	Warnings   int
	Criticals  int
	LastRunAgo string
}

type overviewData struct {
	page
	Rows   []overviewRow
	Counts map[string]int
}

func (s *Server) overview(w http.ResponseWriter, r *http.Request) {
	ctx, cancel := context.WithTimeout(r.Context(), apiTimeout)
	defer cancel()
	now := s.opt.Now()
	data := overviewData{page: page{Title: "Watches", Generated: now}, Counts: map[string]int{}}
	ws, err := s.opt.View.Watches(ctx)
	if err != nil {
		s.opt.Logger.Error("overview: state store", "err", err)
		data.Error = "The state store could not be read: " + err.Error()
		s.render(w, http.StatusServiceUnavailable, s.pages.overview, data)
		return
	}
	for _, ws := range ws {
		row := overviewRow{WatchSummary: ws, Href: watchURL(ws.Name, ""), Headline: ws.Headline()}
		for _, seg := range ws.Segments {
			if row.Headline != nil && seg.Segment == row.Headline.Segment {
				continue
			}
			if seg.State != StateOK && seg.State != "" {
				row.Flagged = append(row.Flagged, seg)
			}
		}
		if row.Headline != nil {
			row.Spark = sparklineOf(row.Headline.Trend, ws.Limits.CondCritical)
		}
		for _, a := range ws.OpenAlerts {
			if a.Severity == SeverityCritical {
				row.Criticals++
			} else {
				row.Warnings++
			}
		}
		if ws.LastRun != nil {
			row.LastRunAgo = ago(now, ws.LastRun.StartedAt)
		}
		data.Counts[string(ws.State.Worse(""))]++
		data.Rows = append(data.Rows, row)
	}
	s.render(w, http.StatusOK, s.pages.overview, data)
}

// segmentLink is one entry of the watch page's segment switcher.
type segmentLink struct {
	SegmentSummary
	Href    string
	Current bool
}

// depView is a dependency as the page shows it.
type depView struct {
	diagnostics.Dependency
	Parts []depPart // near: involved columns with their proportions
}

type depPart struct {
	Column     string
	Proportion float64
}

// splitRow joins a coefficient with its variance split.
type splitRow struct {
	diagnostics.VarianceSplit
	Coef *diagnostics.Coefficient
}

type watchData struct {
	page
	Summary     WatchSummary
	Segment     *SegmentDetail
	Segments    []segmentLink
	Report      *diagnostics.Report
	CondChart   *lineChart
	VIFChart    *lineChart
	FactorChart *lineChart // GVIF^(1/(2·df)) of the categorical columns; nil without one
	Forecasts   []Forecast
	Bars        *barChart
	Heat        *heatMap
	Exact, Near []depView
	Split       *barChart
	SplitRows   []splitRow
	Cautions    []string // distinct cautions of the split, shown once
	Regression  *diagnostics.Regression
	Runs        []Run
	Alerts      []Alert
	OpenAlerts  []Alert        // of the segment shown, and blind alerts
	OtherAlerts []segmentCount // open alerts of the other segments
	CanAck      bool           // the View records acknowledgements
}

// segmentCount is a number of open alerts in one segment.
type segmentCount struct {
	Segment string
	Count   int
	Href    string
}

func (s *Server) watchPage(w http.ResponseWriter, r *http.Request) {
	ctx, cancel := context.WithTimeout(r.Context(), apiTimeout)
	defer cancel()
	name := r.PathValue("name")
	now := s.opt.Now()
	d, err := s.opt.View.Watch(ctx, name)
	if errors.Is(err, ErrNotFound) {
		s.render(w, http.StatusNotFound, s.pages.notFound, page{Title: "Not found", Generated: now,
			Error: fmt.Sprintf("There is no watch named %q.", name)})
		return
	}
	if err != nil {
		s.opt.Logger.Error("watch page: state store", "watch", name, "err", err)
		s.render(w, http.StatusServiceUnavailable, s.pages.notFound, page{Title: name, Generated: now,
			Error: "The state store could not be read: " + err.Error()})
		return
	}
	segName, explicit := r.URL.Query()["segment"]
	var seg *SegmentDetail
	if explicit {
		if key, err := connectors.KeyOfLabel(segName[0]); err == nil {
			seg = d.Segment(key)
		}
		if seg == nil {
			s.render(w, http.StatusNotFound, s.pages.notFound, page{Title: "Not found", Generated: now,
				Error: fmt.Sprintf("Watch %q has no segment %q.", name, segName[0])})
			return
		}
	} else if h := d.Summary.Headline(); h != nil {
		seg = d.Segment(h.Segment)
	}
	data := watchData{page: page{Title: d.Summary.Name, Generated: now}, Summary: d.Summary, Runs: d.Runs, Alerts: d.Alerts}
	_, data.CanAck = s.opt.View.(Acknowledger)
	cur := ""
	if seg != nil {
		cur = seg.Segment
	}
	others := map[string]int{}
	for _, a := range d.Alerts {
		switch {
		case !a.Open():
		case a.Segment == cur || a.Rule == "blind":
			data.OpenAlerts = append(data.OpenAlerts, a)
		default:
			others[a.Segment]++
		}
	}
	sortAlerts(data.OpenAlerts)
	for _, ss := range d.Summary.Segments {
		if n := others[ss.Segment]; n > 0 {
			data.OtherAlerts = append(data.OtherAlerts, segmentCount{Segment: ss.Segment, Count: n, Href: watchURL(d.Summary.Name, ss.Segment)})
		}
	}
	if seg != nil {
		data.Segment = seg
		data.Title = d.Summary.Name + " · " + segmentName(seg.Segment)
		for _, ss := range d.Segments {
			data.Segments = append(data.Segments, segmentLink{SegmentSummary: ss.SegmentSummary,
				Href: watchURL(d.Summary.Name, ss.Segment), Current: ss.Segment == seg.Segment})
		}
		l := d.Summary.Limits
		data.CondChart = timelineChart("tl-cond", MetricCondition, seg.Timeline, seg.Forecast(MetricCondition), l.CondWarn, l.CondCritical, l.CondBasis)
		data.VIFChart = timelineChart("tl-vif", MetricMaxVIF, seg.Timeline, seg.Forecast(MetricMaxVIF), l.VIFWarn, l.VIFCritical)
		data.FactorChart = factorChart("tl-factors", seg.Timeline, l.VIFWarn, l.VIFCritical)
		data.CondChart.markAlerts(d.Alerts, seg.Segment)
		data.VIFChart.markAlerts(d.Alerts, seg.Segment)
		data.Forecasts = seg.Forecasts
		if rep := seg.Report; rep != nil {
			data.Report = rep
			data.Bars = vifChart("vif", rep.Columns, l.VIFWarn, l.VIFCritical)
			names := make([]string, len(rep.Columns))
			constant := map[string]bool{}
			for i, c := range rep.Columns {
				names[i] = c.Name
				constant[c.Name] = c.Constant || c.NearConstant
			}
			if len(rep.Correlation) == len(names) && len(names) > 1 {
				data.Heat = correlationMap("corr", names, rep.Correlation, constant)
			}
			for _, dep := range rep.Dependencies {
				v := depView{Dependency: dep}
				for c, p := range dep.Proportions {
					v.Parts = append(v.Parts, depPart{Column: c, Proportion: p})
				}
				sort.Slice(v.Parts, func(i, j int) bool { return v.Parts[i].Proportion > v.Parts[j].Proportion })
				if dep.Kind == diagnostics.KindExact {
					data.Exact = append(data.Exact, v)
				} else {
					data.Near = append(data.Near, v)
				}
			}
			if reg := rep.Regression; reg != nil {
				data.Regression = reg
				if len(reg.Attribution) > 0 {
					data.Split = splitChart("split", reg.Attribution)
				}
				for _, vs := range reg.Attribution {
					row := splitRow{VarianceSplit: vs}
					for i := range reg.Coefficients {
						if reg.Coefficients[i].Name == vs.Name {
							row.Coef = &reg.Coefficients[i]
						}
					}
					data.SplitRows = append(data.SplitRows, row)
					if vs.Caution != "" && !slices.Contains(data.Cautions, vs.Caution) {
						data.Cautions = append(data.Cautions, vs.Caution)
					}
				}
			}
		}
	}
	s.render(w, http.StatusOK, s.pages.watch, data)
}

// watchURL is the watch page's address, with the segment's label when
// the key is not the whole table's.
func watchURL(name, segment string) string {
	u := "/watches/" + url.PathEscape(name)
	if segment != connectors.WholeTable {
		u += "?segment=" + url.QueryEscape(connectors.SegmentLabel(segment))
	}
	return u
}

// segmentName names a series key for a person: "whole table", NULL, or the
// value (quoted when it could be mistaken).
func segmentName(key string) string { return connectors.ParseSegmentKey(key).String() }

// stateIcon is a state's symbol, distinct in shape as well as colour.
func stateIcon(s State) string {
	switch s {
	case StateOK:
		return "●"
	case StateWarning:
		return "▲"
	case StateCritical:
		return "■"
	case StateBlind:
		return "◌"
	}
	return "?"
}

func ago(now, t time.Time) string {
	if t.IsZero() {
		return "never"
	}
	d := now.Sub(t)
	switch {
	case d < 0:
		return "just now"
	case d < time.Minute:
		return fmt.Sprintf("%ds ago", int(d.Seconds()))
	case d < time.Hour:
		return fmt.Sprintf("%d min ago", int(d.Minutes()))
	case d < 48*time.Hour:
		return fmt.Sprintf("%.0f h ago", d.Hours())
	}
	return fmt.Sprintf("%.0f days ago", d.Hours()/24)
}

func fmtDuration(d time.Duration) string {
	switch {
	case d <= 0:
		return "—"
	case d < 10*time.Millisecond:
		return fmt.Sprintf("%.1f ms", float64(d)/1e6)
	case d < time.Second:
		return fmt.Sprintf("%d ms", d.Milliseconds())
	case d < time.Minute:
		return fmt.Sprintf("%.1f s", d.Seconds())
	}
	return d.Round(time.Second).String()
}

// fmtCount writes an integer with thin-space thousands separators.
func fmtCount(n int64) string {
	s := fmt.Sprint(n)
	neg := strings.HasPrefix(s, "-")
	s = strings.TrimPrefix(s, "-")
	var parts []string
	for len(s) > 3 {
		parts = append(parts, s[len(s)-3:])
		s = s[:len(s)-3]
	}
	parts = append(parts, s)
	slices.Reverse(parts)
	out := strings.Join(parts, "\u202f")
	if neg {
		out = "−" + out
	}
	return out
}
