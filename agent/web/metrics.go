package web

import (
	"context"
	"math"
	"time"

	"github.com/prometheus/client_golang/prometheus"

	"plumb/connectors"
)

// Collector exposes what a View knows as Prometheus metrics. It reads the
// View at every scrape, so the numbers are those of the last run in the
// store. The families are documented in METRICS.md.
type Collector struct {
	view    View
	timeout time.Duration

	up, watchState, condition, centered, judged, maxVIF, rankDef, columnVIF, columnUndefined,
	rowsUsed, rowsDropped, dataTime, lastRun, lastRunDuration, lastRunOK,
	failures, consecutive, openAlerts,
	factorGVIF, factorAdjusted, factorDF, factorLevels *prometheus.Desc
}

var _ prometheus.Collector = (*Collector)(nil)

// NewCollector returns a collector over v; each scrape's View calls run
// under timeout.
func NewCollector(v View, timeout time.Duration) *Collector {
	ws := []string{"watch", "segment"}
	d := func(name, help string, labels ...string) *prometheus.Desc {
		return prometheus.NewDesc("plumb_"+name, help, labels, nil)
	}
	return &Collector{
		view:    v,
		timeout: timeout,
		up:      d("store_up", "1 when the state store could be read for this scrape, else 0."),
		watchState: d("watch_state", "1 for the current state of the watch segment (ok, warning, critical, blind), 0 for the others.",
			"watch", "segment", "state"),
		condition: d("condition_number", "Largest condition index of the column-scaled design [1 X] in the last run (+Inf when rank deficient).", ws...),
		centered:  d("centered_condition_number", "Condition number of the centered, column-scaled design in the last run (+Inf when rank deficient).", ws...),
		judged: d("judged_condition_number", "The condition number the watch's limits judge (its condition_basis), on the design without the columns that exact and constant alerts explain.",
			ws...),
		maxVIF:  d("max_vif", "Largest variance inflation factor among the columns whose VIF is defined, in the last run.", ws...),
		rankDef: d("rank_deficiency", "Number of exact linear dependencies among the columns (full rank minus numerical rank) in the last run.", ws...),
		columnVIF: d("column_vif", "Variance inflation factor of one column in the last run; +Inf when undefined (constant column or exact dependency).",
			"watch", "segment", "column"),
		columnUndefined: d("column_vif_undefined", "1 for a column whose VIF is undefined in the last run, with the reason (constant, near constant, exact dependency).",
			"watch", "segment", "column", "reason"),
		rowsUsed:        d("rows_used", "Rows used by the last run's diagnostics (after listwise deletion).", ws...),
		rowsDropped:     d("rows_dropped", "Rows dropped by the last run for NULL, NaN or infinite values in a used column.", ws...),
		dataTime:        d("data_timestamp_seconds", "End of the data window of the last point, as Unix time.", ws...),
		lastRun:         d("last_run_timestamp_seconds", "Start of the watch's last run, as Unix time.", "watch"),
		lastRunDuration: d("last_run_duration_seconds", "Duration of the watch's last run.", "watch"),
		lastRunOK:       d("last_run_success", "1 when the watch's last run succeeded, else 0.", "watch"),
		failures:        d("run_failures_total", "Failed runs of the watch since its history began.", "watch"),
		consecutive:     d("run_consecutive_failures", "Failed runs of the watch since its last successful run.", "watch"),
		openAlerts:      d("open_alerts", "Alerts of the watch not yet resolved, by severity.", "watch", "severity"),
		factorGVIF: d("factor_gvif", "Generalized VIF of a categorical column's treatment dummies in the last run (Fox & Monette 1992); +Inf when undefined (one level only, or a dummy in an exact dependency).",
			"watch", "segment", "factor"),
		factorAdjusted: d("factor_gvif_adjusted", "GVIF^(1/(2·df)) of a categorical column in the last run, comparable with the square root of a VIF; +Inf when undefined.",
			"watch", "segment", "factor"),
		factorDF: d("factor_df", "Degrees of freedom of a categorical column in the last run: its levels present minus 1.",
			"watch", "segment", "factor"),
		factorLevels: d("factor_levels", "Levels of a categorical column in the last run's window: present in its rows, or known to the watch but absent.",
			"watch", "segment", "factor", "state"),
	}
}

// Describe sends every family's description.
func (c *Collector) Describe(ch chan<- *prometheus.Desc) {
	for _, d := range []*prometheus.Desc{c.up, c.watchState, c.condition, c.centered, c.judged, c.maxVIF, c.rankDef, c.columnVIF,
		c.columnUndefined, c.rowsUsed, c.rowsDropped, c.dataTime, c.lastRun, c.lastRunDuration, c.lastRunOK,
		c.failures, c.consecutive, c.openAlerts, c.factorGVIF, c.factorAdjusted, c.factorDF, c.factorLevels} {
		ch <- d
	}
}

// Collect reads the View and sends the metrics. When the store cannot be
// read, only plumb_store_up 0 is sent.
func (c *Collector) Collect(ch chan<- prometheus.Metric) {
	ctx, cancel := context.WithTimeout(context.Background(), c.timeout)
	defer cancel()
	ws, err := c.view.Watches(ctx)
	if err != nil {
		ch <- prometheus.MustNewConstMetric(c.up, prometheus.GaugeValue, 0)
		return
	}
	var details []*WatchDetail
	for _, w := range ws {
		d, err := c.view.Watch(ctx, w.Name)
		if err != nil {
			ch <- prometheus.MustNewConstMetric(c.up, prometheus.GaugeValue, 0)
			return
		}
		details = append(details, d)
	}
	ch <- prometheus.MustNewConstMetric(c.up, prometheus.GaugeValue, 1)
	gauge := func(d *prometheus.Desc, v float64, labels ...string) {
		ch <- prometheus.MustNewConstMetric(d, prometheus.GaugeValue, v, labels...)
	}
	for _, d := range details {
		s := &d.Summary
		name := s.Name
		for _, seg := range d.Segments {
			label := connectors.SegmentLabel(seg.Segment)
			state := seg.State
			if s.State == StateBlind {
				state = StateBlind
			}
			for _, st := range []State{StateOK, StateWarning, StateCritical, StateBlind} {
				gauge(c.watchState, b2f(st == state), name, label, string(st))
			}
			if p := seg.Latest; p != nil {
				gauge(c.condition, p.ConditionNumber, name, label)
				gauge(c.centered, p.CenteredCondition, name, label)
				gauge(c.judged, p.Judged, name, label)
				gauge(c.maxVIF, p.MaxVIF, name, label)
				gauge(c.rankDef, float64(p.RankDeficiency()), name, label)
				gauge(c.rowsUsed, float64(p.Rows), name, label)
				gauge(c.rowsDropped, float64(p.RowsDropped), name, label)
				gauge(c.dataTime, unix(p.At), name, label)
			}
			for _, f := range seg.Factors {
				gauge(c.factorGVIF, orInf(f.GVIF), name, label, f.Name)
				gauge(c.factorAdjusted, orInf(f.GVIFAdjusted), name, label, f.Name)
				gauge(c.factorDF, float64(f.DF), name, label, f.Name)
				gauge(c.factorLevels, float64(len(f.Levels)), name, label, f.Name, "present")
				gauge(c.factorLevels, float64(len(f.Absent)), name, label, f.Name, "absent")
			}
			if rep := seg.Report; rep != nil {
				for _, col := range rep.Columns {
					v := math.Inf(1)
					if col.VIF != nil {
						v = *col.VIF
					}
					gauge(c.columnVIF, v, name, label, col.Name)
					if col.VIF == nil {
						reason := col.Undefined
						if reason == "" {
							reason = "undefined"
						}
						gauge(c.columnUndefined, 1, name, label, col.Name, reason)
					}
				}
			}
		}
		if r := s.LastRun; r != nil {
			gauge(c.lastRun, unix(r.StartedAt), name)
			gauge(c.lastRunDuration, r.Duration.Seconds(), name)
			gauge(c.lastRunOK, b2f(r.Status == RunOK), name)
		}
		ch <- prometheus.MustNewConstMetric(c.failures, prometheus.CounterValue, float64(s.RunFailures), name)
		gauge(c.consecutive, float64(s.ConsecutiveFailures), name)
		var warn, crit int
		for _, a := range s.OpenAlerts {
			if a.Severity == SeverityCritical {
				crit++
			} else {
				warn++
			}
		}
		gauge(c.openAlerts, float64(warn), name, SeverityWarning)
		gauge(c.openAlerts, float64(crit), name, SeverityCritical)
	}
}

func b2f(b bool) float64 {
	if b {
		return 1
	}
	return 0
}

func unix(t time.Time) float64 { return float64(t.UnixNano()) / 1e9 }

// orInf is *v, or +Inf when v is nil (undefined).
func orInf(v *float64) float64 {
	if v == nil {
		return math.Inf(1)
	}
	return *v
}
