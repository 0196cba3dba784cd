package webtest

import (
	"strings"
)

// OverviewRow is one watch as the overview shows it.
type OverviewRow struct {
	Name       string `json:"name"`
	State      string `json:"state"`
	Href       string `json:"href"`
	Sparklines int    `json:"sparklines"` // trend lines drawn for it
}

// Overview reads the rows of the overview page loaded in b.
func Overview(b *Browser) []OverviewRow {
	return Eval[[]OverviewRow](b, `[...document.querySelectorAll("tr[data-watch]")].map(r => ({
		name: r.dataset.watch, state: r.dataset.state,
		href: (r.querySelector("a.watch") || {getAttribute: () => ""}).getAttribute("href"),
		sparklines: r.querySelectorAll("svg[data-chart=sparkline] path[data-series=condition_number]").length}))`)
}

// Page is what a watch page loaded in b carries.
type Page struct {
	// Series counts the drawn series of each timeline, by metric:
	// "condition_number" and "max_vif" (the observed line), "forecast"
	// and "forecast-range" (the cone).
	Series map[string]int `json:"series"`
	// Vertices counts the points of each metric's observed line.
	Vertices map[string]int `json:"vertices"`
	// Levels counts the level lines of the timelines ("warn", "critical").
	Levels map[string]int `json:"levels"`
	// Charts counts the inline SVG charts; Legends their legends.
	Charts  int `json:"charts"`
	Legends int `json:"legends"`
	// Bars are the columns of the VIF bar chart; Undefined those drawn
	// as undefined (constant, exact dependency).
	Bars      []string `json:"bars"`
	Undefined []string `json:"undefined"`
	// HeatCells counts the cells of the correlation heat map.
	HeatCells int `json:"heatCells"`
	// Equations are the exact dependencies spelled out on the page.
	Equations []string `json:"equations"`
	// Coefficients counts the rows of the variance split.
	Coefficients int `json:"coefficients"`
	// Runs and FailedRuns count the run log's rows.
	Runs       int `json:"runs"`
	FailedRuns int `json:"failedRuns"`
	// Foreign counts img, script, object and iframe elements: the
	// dashboard has none.
	Foreign int `json:"foreign"`
}

// WatchPage reads the watch page loaded in b.
func WatchPage(b *Browser) Page {
	return Eval[Page](b, `(() => {
		const all = s => [...document.querySelectorAll(s)];
		const series = {}, vertices = {}, levels = {};
		for (const p of all("svg[data-chart=timeline] [data-series]")) {
			series[p.dataset.series] = (series[p.dataset.series] || 0) + 1;
		}
		for (const svg of all("svg[data-chart=timeline]")) {
			const m = svg.dataset.metric, p = svg.querySelector("path[data-series=" + m + "]");
			vertices[m] = p ? (p.getAttribute("d").match(/[ML]/g) || []).length : 0;
		}
		for (const l of all("svg[data-chart=timeline] line[data-level]")) {
			levels[l.dataset.level] = (levels[l.dataset.level] || 0) + 1;
		}
		return {
			series, vertices, levels,
			charts: all("figure.chart > svg").length,
			legends: all("svg[data-chart] g[data-legend]").length,
			bars: all("svg[data-chart=bars] g[data-bar]:not([data-row])").map(g => g.dataset.bar),
			undefined: all("svg[data-chart=bars] g[data-category=undefined]").map(g => g.dataset.bar),
			heatCells: all("svg[data-chart=heatmap] g[data-cells] rect").length,
			equations: all("[data-equation] code").map(e => e.textContent),
			coefficients: all("tbody[data-coefficient]").length,
			runs: all("tr[data-run]").length,
			failedRuns: all("tr.run-row-failed").length,
			foreign: all("img, script, object, iframe").length,
		};
	})()`)
}

// HasEquation reports whether eq is among the page's equations, ignoring
// space differences.
func (p Page) HasEquation(eq string) bool {
	norm := func(s string) string { return strings.Join(strings.Fields(s), " ") }
	for _, e := range p.Equations {
		if norm(e) == norm(eq) {
			return true
		}
	}
	return false
}

// FactorRow is one categorical column in a watch page's panel, as text.
type FactorRow struct {
	Factor       string `json:"factor"`
	Present      string `json:"present"`
	Absent       string `json:"absent"`
	Base         string `json:"base"`
	DF           string `json:"df"`
	GVIF         string `json:"gvif"`
	GVIFAdjusted string `json:"gvifAdjusted"`
}

// Factors is the categorical-columns panel of a watch page.
type Factors struct {
	Shown bool        `json:"shown"`
	Rows  []FactorRow `json:"rows"`
	// Notes are the new-level lines.
	Notes []string `json:"notes"`
	// Vertices counts the points of each factor's line in the panel's
	// chart of GVIF^(1/(2·df)), by factor.
	Vertices map[string]int `json:"vertices"`
}

// FactorPanel reads the categorical-columns panel of the watch page
// loaded in b.
func FactorPanel(b *Browser) Factors {
	return Eval[Factors](b, `(() => {
		const sec = document.querySelector("section[data-panel=factors]");
		if (!sec) return {shown: false, rows: [], notes: [], vertices: {}};
		const vertices = {};
		for (const p of sec.querySelectorAll("svg[data-chart=timeline] path[data-series^='factor:']")) {
			vertices[p.dataset.series.slice(7)] = (p.getAttribute("d").match(/[ML]/g) || []).length;
		}
		const txt = e => e ? e.textContent.trim() : "";
		return {
			shown: true,
			rows: [...sec.querySelectorAll("tr[data-factor]")].map(r => ({
				factor: r.dataset.factor,
				present: txt(r.querySelector("[data-levels=present]")),
				absent: txt(r.querySelector("[data-levels=absent]")),
				base: txt(r.cells[3]),
				df: txt(r.cells[4]),
				gvif: txt(r.querySelector("[data-value=gvif]")),
				gvifAdjusted: txt(r.querySelector("[data-value=gvif_adjusted]")),
			})),
			notes: [...sec.querySelectorAll("li[data-new-level]")].map(txt),
			vertices,
		};
	})()`)
}
