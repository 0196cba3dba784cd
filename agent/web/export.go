package web

import (
	"fmt"
	"html/template"
	"io"
	"time"
)

// WriteTimelineSVG writes the watch page's timeline charts (condition
// number and max VIF with their levels and forecasts) as one standalone
// SVG document, for `plumb history WATCH --plot FILE.svg`. title heads the
// drawing, e.g. the watch and segment.
func WriteTimelineSVG(w io.Writer, title string, tl []Point, forecasts []Forecast, l Limits) error {
	const head = 40.0
	cond, vif := timelineCharts(tl, forecasts, l)
	cond.Fixed, cond.OffsetY = true, head
	vif.Fixed, vif.OffsetY = true, head+cond.H
	data := struct {
		Title, Note string
		W, H        float64
		Cond, VIF   *lineChart
	}{Title: title, W: cond.W, H: head + cond.H + vif.H + 10, Cond: cond, VIF: vif}
	if len(tl) > 0 {
		data.Note = fmt.Sprintf("%d windows, %s to %s", len(tl), tl[0].At.UTC().Format(time.DateOnly), tl[len(tl)-1].At.UTC().Format(time.DateOnly))
	}
	t, err := template.New("file").Funcs(funcs).ParseFS(templateFS, "templates/charts.tmpl", "templates/timeline-file.tmpl")
	if err != nil {
		return fmt.Errorf("timeline chart: %w", err)
	}
	// The declaration is written here: html/template would escape it.
	if _, err := io.WriteString(w, `<?xml version="1.0" encoding="UTF-8"?>`+"\n"); err != nil {
		return fmt.Errorf("timeline chart: %w", err)
	}
	if err := t.ExecuteTemplate(w, "timeline-file", data); err != nil {
		return fmt.Errorf("timeline chart: %w", err)
	}
	return nil
}

// timelineCharts lays out the two timeline charts of a chart file: the
// condition number and the max VIF, each with its levels and forecast.
func timelineCharts(tl []Point, forecasts []Forecast, l Limits) (cond, vif *lineChart) {
	cond = timelineChart("cond", MetricCondition, tl, forecastOf(forecasts, MetricCondition), l.CondWarn, l.CondCritical, l.CondBasis)
	vif = timelineChart("vif", MetricMaxVIF, tl, forecastOf(forecasts, MetricMaxVIF), l.VIFWarn, l.VIFCritical)
	return cond, vif
}
