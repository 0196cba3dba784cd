package web

import (
	"fmt"
	"math"
	"slices"
	"sort"
	"testing"
	"time"

	"plumb/agent/demo"
	"plumb/connectors"
	"plumb/diagnostics"
	"plumb/stream"
)

// The tests' View is built from real computations: the demo scenario's
// rows are accumulated per district and day (stream), merged into
// trailing windows and analysed (diagnostics.Analyze), as the agent's
// backfill does. The forecasts are TrendForecast's; the alerts below are
// simple stand-ins for the agent's rules (level crossings, new exact
// dependencies and constant columns): they give the pages something real
// to draw, not the agent's verdicts.

var demoRegressors = []string{
	"temperature_c", "rainfall_mm", "population_served",
	"residential_connections", "commercial_connections", "total_connections",
	"pipe_age_years", "pressure_bar", "metered_volume_m3", "billed_volume_m3",
}

func demoValues(r demo.Row) map[string]float64 {
	return map[string]float64{
		"chlorine_mg_l": r.ChlorineMgL,
		stream.IndicatorName("supply_source", r.SupplySource): 1,
		"temperature_c":           r.TemperatureC,
		"rainfall_mm":             r.RainfallMM,
		"population_served":       float64(r.PopulationServed),
		"residential_connections": float64(r.ResidentialConnections),
		"commercial_connections":  float64(r.CommercialConnections),
		"total_connections":       float64(r.TotalConnections),
		"pipe_age_years":          r.PipeAgeYears,
		"pressure_bar":            r.PressureBar,
		"metered_volume_m3":       r.MeteredVolumeM3,
		"billed_volume_m3":        r.BilledVolumeM3,
		demo.Target:               r.DemandM3,
	}
}

// fixtureWatch describes one watch of the fixture.
type fixtureWatch struct {
	name, target string
	columns      []string
	segmented    bool
	window       int // days
	limits       Limits
	// factor names the categorical column among columns, "" for none.
	factor string
}

// bucketAcc is one day's accumulators of one segment.
type bucketAcc struct {
	m *stream.Moments
	q *stream.QR
}

// demoFixture is the fixture and what the tests check it against.
type demoFixture struct {
	view *Memory
	now  time.Time
	// exactFrom is the first window end with an exact dependency in the
	// whole table of district_daily.
	exactFrom time.Time
	equation  string
}

func buildDemoFixture(t testing.TB) *demoFixture {
	t.Helper()
	sc := demo.Default
	rows := sc.Rows()
	f := &demoFixture{view: &Memory{}}
	watches := []fixtureWatch{
		{name: "district_daily", target: demo.Target, columns: demoRegressors, segmented: true, window: 28,
			limits: Limits{VIFWarn: 5, VIFCritical: 10, CondWarn: 15, CondCritical: 30, CondBasis: "intercept", Horizon: 14 * 24 * time.Hour}},
		{name: "district_volumes", columns: []string{"temperature_c", "rainfall_mm", "metered_volume_m3", "billed_volume_m3"}, window: 14,
			limits: Limits{VIFWarn: 5, VIFCritical: 10, CondWarn: 15, CondCritical: 30, CondBasis: "intercept", Horizon: 14 * 24 * time.Hour}},
	}
	lastDay := sc.Start.AddDate(0, 0, sc.Days-1)
	f.now = lastDay.Add(27 * time.Hour) // the day after the last day, after its run
	for _, w := range watches {
		d := buildWatch(t, sc, rows, w)
		if w.name == "district_daily" {
			seg := d.Segment("")
			for _, p := range seg.Timeline {
				if p.RankDeficiency() > 0 {
					f.exactFrom = p.At
					break
				}
			}
			for _, dep := range seg.Report.Dependencies {
				if dep.Kind == diagnostics.KindExact {
					f.equation = dep.Equation
				}
			}
		}
		f.view.Put(*d)
	}
	// A watch whose source went away: every recent run failed.
	blind := WatchDetail{Summary: WatchSummary{Name: "zone_pressure", Source: "telemetry", Table: "zone_pressure_hourly",
		Schedule: "0 * * * *", Limits: watches[0].limits, RunFailures: 4, ConsecutiveFailures: 4}}
	blind.Segments = []SegmentDetail{{SegmentSummary: SegmentSummary{Segment: ""}}}
	for i := range 4 {
		at := f.now.Add(-time.Duration(i) * time.Hour)
		blind.Runs = append(blind.Runs, Run{ID: int64(400 - i), Watch: "zone_pressure", StartedAt: at, Duration: 30 * time.Second,
			Status: RunFailed, Error: "source telemetry: connect: connection refused (is the server running?)"})
	}
	opened := f.now.Add(-2 * time.Hour)
	blind.Alerts = []Alert{{ID: "zone_pressure/blind", Watch: "zone_pressure", Rule: "blind", Severity: SeverityCritical,
		AsOf: opened, OpenedAt: opened, Message: "3 runs in a row failed: the watch is blind"}}
	Summarize(&blind, 30)
	f.view.Put(blind)
	// The supply source, a categorical column, comes to fix the chlorine
	// dose on DoseDay; a new source appears in one district on
	// NewSourceDay.
	supply := fixtureWatch{name: "district_supply", columns: []string{"supply_source", "chlorine_mg_l", "temperature_c", "rainfall_mm"},
		window: 28, factor: "supply_source", segmented: true, limits: watches[0].limits}
	f.view.Put(*buildWatch(t, sc, rows, supply))
	return f
}

func buildWatch(t testing.TB, sc demo.Scenario, rows []demo.Row, w fixtureWatch) *WatchDetail {
	t.Helper()
	// A factor is accumulated as one indicator column per level, every
	// level of the scenario in byte order: a level without rows in a
	// window has an all-zero column there and is reported absent.
	var levels []string
	for _, r := range rows {
		levels = append(levels, r.SupplySource)
	}
	slices.Sort(levels)
	levels = slices.Compact(levels)
	var names []string
	for _, c := range w.columns {
		if c != w.factor {
			names = append(names, c)
			continue
		}
		for _, l := range levels {
			names = append(names, stream.IndicatorName(c, l))
		}
	}
	if w.target != "" {
		names = append(names, demo.Target)
	}
	var factors []diagnostics.Factor
	if w.factor != "" {
		factors = []diagnostics.Factor{{Name: w.factor, Levels: levels}}
	}
	segs := []string{connectors.WholeTable}
	if w.segmented {
		for _, d := range sc.Districts {
			segs = append(segs, connectors.SegmentKey(d))
		}
	}
	// One accumulator per segment and day.
	buckets := map[string][]bucketAcc{}
	for _, s := range segs {
		bs := make([]bucketAcc, sc.Days)
		for d := range bs {
			bs[d] = bucketAcc{m: stream.NewMoments(names), q: stream.NewQR(names)}
		}
		buckets[s] = bs
	}
	for _, r := range rows {
		day := int(r.Day.Sub(sc.Start).Hours() / 24)
		vals := demoValues(r)
		for _, s := range []string{connectors.WholeTable, connectors.SegmentKey(r.District)} {
			bs, ok := buckets[s]
			if !ok {
				continue
			}
			b := stream.NewBlock(len(names), 1, false)
			row, _ := b.AppendRow()
			for j, n := range names {
				row[j] = vals[n]
			}
			bs[day].m.Add(b)
			bs[day].q.Add(b)
		}
	}
	d := &WatchDetail{Summary: WatchSummary{Name: w.name, Source: "districts", Table: demo.Table, Target: w.target,
		Schedule: "15 2 * * *", Limits: w.limits}}
	if w.segmented {
		d.Summary.SegmentBy = "district"
	}
	var runID int64 = 100
	backfillEnd := sc.Days - 6
	var backfillRows int64
	for _, s := range segs {
		seg := SegmentDetail{SegmentSummary: SegmentSummary{Segment: s}}
		exactOpen, constOpen := false, map[string]bool{}
		levels := map[string]string{}
		for end := w.window - 1; end < sc.Days; end++ {
			m := buckets[s][end-w.window+1].m.Clone()
			q := buckets[s][end-w.window+1].q.Clone()
			for day := end - w.window + 2; day <= end; day++ {
				m.Merge(buckets[s][day].m)
				q.Merge(buckets[s][day].q)
			}
			start := time.Now()
			rep, err := diagnostics.Analyze(m, q, diagnostics.Options{Target: w.target, Columns: w.columns, VIFLimit: w.limits.VIFCritical, Factors: factors})
			if err != nil {
				t.Fatalf("fixture %s/%s day %d: %v", w.name, s, end, err)
			}
			took := time.Since(start)
			at := sc.Start.AddDate(0, 0, end+1) // window end: midnight after its last day
			p := pointOf(at, rep)
			seg.Timeline = append(seg.Timeline, p)
			seg.Report = rep
			if s == "" {
				if end < backfillEnd {
					backfillRows += rep.RowsUsed
				} else {
					runID++
					d.Runs = append(d.Runs, Run{ID: runID, Watch: w.name, StartedAt: at.Add(2*time.Hour + 15*time.Minute),
						Duration: took, Status: RunOK, AsOf: at, RowsRead: rep.RowsUsed + rep.RowsDropped, RowsDropped: rep.RowsDropped})
				}
			}
			d.Alerts = append(d.Alerts, fixtureAlerts(w, s, at, p, rep, &exactOpen, constOpen, levels)...)
		}
		seg.Forecasts = fixtureForecasts(seg.Timeline, w.limits)
		d.Segments = append(d.Segments, seg)
	}
	backfillAt := sc.Start.AddDate(0, 0, backfillEnd+1)
	d.Runs = append(d.Runs, Run{ID: 100, Watch: w.name, StartedAt: backfillAt.Add(2 * time.Hour), Duration: 3 * time.Second,
		Status: RunOK, AsOf: backfillAt, Backfill: true, RowsRead: backfillRows})
	sort.Slice(d.Runs, func(i, j int) bool { return d.Runs[i].ID > d.Runs[j].ID })
	sortNewest(d.Alerts)
	Summarize(d, 30)
	return d
}

// pointOf turns a report into a timeline point; an undefined VIF makes
// the max VIF +Inf, as the agent stores it.
func pointOf(at time.Time, rep *diagnostics.Report) Point {
	p := Point{At: at, ConditionNumber: rep.ConditionNumber, Rank: rep.Rank, Rows: rep.RowsUsed,
		RowsDropped: rep.RowsDropped, Columns: len(rep.Columns), Factors: FactorsOf(rep.GVIF)}
	for _, c := range rep.Columns {
		v := math.Inf(1)
		if c.VIF != nil {
			v = *c.VIF
		}
		p.MaxVIF = math.Max(p.MaxVIF, v)
	}
	if p.RankDeficiency() > 0 {
		p.ConditionNumber = math.Inf(1)
	}
	// The fixture's watches judge the condition number with the intercept.
	p.Judged = p.ConditionNumber
	return p
}

// fixtureAlerts opens level alerts at the first crossing of a level (and
// resolves them when back under warn), and critical alerts for a new
// exact dependency or a column gone constant.
func fixtureAlerts(w fixtureWatch, seg string, at time.Time, p Point, rep *diagnostics.Report,
	exactOpen *bool, constOpen map[string]bool, levels map[string]string) []Alert {
	var out []Alert
	id := func(rule, subject string) string {
		return fmt.Sprintf("%s/%s/%s/%s/%s", w.name, seg, rule, subject, at.Format("0102"))
	}
	if p.RankDeficiency() > 0 && !*exactOpen {
		*exactOpen = true
		for _, dep := range rep.Dependencies {
			if dep.Kind == diagnostics.KindExact {
				out = append(out, Alert{ID: id("exact", dep.Dependent), Watch: w.name, Segment: seg, Rule: "exact", Severity: SeverityCritical,
					AsOf: at, OpenedAt: at.Add(2 * time.Hour), Message: "new exact dependency: " + dep.Equation,
					Columns: dep.Columns, Equation: dep.Equation, Remedy: "drop " + dep.Dependent + " or the columns it is made of"})
			}
		}
	}
	for _, c := range rep.Columns {
		if c.Constant && !constOpen[c.Name] {
			constOpen[c.Name] = true
			out = append(out, Alert{ID: id("constant", c.Name), Watch: w.name, Segment: seg, Rule: "constant", Severity: SeverityCritical,
				AsOf: at, OpenedAt: at.Add(2 * time.Hour), Message: c.Name + " is constant in " + segmentName(seg),
				Columns: []string{c.Name}, Remedy: "check the sensor or feed behind " + c.Name})
		}
	}
	if p.RankDeficiency() == 0 && !math.IsInf(p.MaxVIF, 0) {
		sev := ""
		switch {
		case p.MaxVIF >= w.limits.VIFCritical:
			sev = SeverityCritical
		case p.MaxVIF >= w.limits.VIFWarn:
			sev = SeverityWarning
		}
		if sev != "" && levels["vif"] != sev && !(levels["vif"] == SeverityCritical) {
			levels["vif"] = sev
			out = append(out, Alert{ID: id("level", "max_vif"), Watch: w.name, Segment: seg, Rule: "level", Severity: sev,
				AsOf: at, OpenedAt: at.Add(2 * time.Hour), Metric: MetricMaxVIF, Message: fmt.Sprintf("max VIF %s at or above the %s level", fmtNum(p.MaxVIF), sev)})
		}
	}
	return out
}

// fixtureForecasts projects both metrics over the last 14 points.
func fixtureForecasts(tl []Point, l Limits) []Forecast {
	var out []Forecast
	if fc, ok := TrendForecast(tl, MetricCondition, 14, l.Horizon, l.CondCritical); ok {
		out = append(out, fc)
	}
	if fc, ok := TrendForecast(tl, MetricMaxVIF, 14, l.Horizon, l.VIFCritical); ok {
		out = append(out, fc)
	}
	return out
}
