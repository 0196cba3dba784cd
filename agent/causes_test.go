package agent_test

import (
	"context"
	"database/sql"
	"fmt"
	"math"
	"math/rand/v2"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"plumb/agent"
	"plumb/agent/config"
	"plumb/agent/notify"
	"plumb/agent/sqlstore"
)

// The scenarios below are generated data in the project's own setting (a
// water utility's district readings), from fixed seeds. Their expectations
// are the rules' design, not a published reference.

// table is a SQLite feature table a test fills day by day.
type table struct {
	db   *sql.DB
	url  string
	cols []string
}

func newTable(t *testing.T, dir string, cols []string) *table {
	t.Helper()
	path := filepath.Join(dir, "features.db")
	db, err := sql.Open("sqlite", "file:"+path+"?mode=rwc&_pragma=busy_timeout(5000)")
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { db.Close() })
	defs := make([]string, len(cols))
	for i, c := range cols {
		defs[i] = c + " REAL"
	}
	if _, err := db.Exec(`CREATE TABLE district_readings (day TEXT NOT NULL, district TEXT NOT NULL, ` + strings.Join(defs, ", ") + `)`); err != nil {
		t.Fatal(err)
	}
	return &table{db: db, url: "sqlite:" + path, cols: cols}
}

// add inserts one day's rows; a NaN value is stored as NULL.
func (tb *table) add(t *testing.T, d int, rows [][]float64) {
	t.Helper()
	tx, err := tb.db.Begin()
	if err != nil {
		t.Fatal(err)
	}
	marks := strings.TrimSuffix(strings.Repeat("?, ", len(tb.cols)+2), ", ")
	stmt, err := tx.Prepare(`INSERT INTO district_readings VALUES (` + marks + `)`)
	if err != nil {
		t.Fatal(err)
	}
	day := start.AddDate(0, 0, d).Format(time.DateOnly)
	for i, r := range rows {
		args := []any{day, fmt.Sprintf("d%02d", i%4)}
		for _, v := range r {
			if math.IsNaN(v) {
				args = append(args, nil)
			} else {
				args = append(args, v)
			}
		}
		if _, err := stmt.Exec(args...); err != nil {
			t.Fatal(err)
		}
	}
	if err := tx.Commit(); err != nil {
		t.Fatal(err)
	}
}

// watcher runs watches of a configuration on a table with an injected
// clock.
type watcher struct {
	cfg   *config.Config
	store *sqlstore.Store
	run   *agent.Runner
	clock *fakeClock
}

func newWatcher(t *testing.T, dir, url, watches string) *watcher {
	t.Helper()
	return newWatcherWith(t, dir, url, "", watches)
}

// newWatcherWith adds a notifiers section; secret_env PLUMB_TEST_SECRET
// resolves to "hook-secret".
func newWatcherWith(t *testing.T, dir, url, notifiers, watches string) *watcher {
	t.Helper()
	yaml := fmt.Sprintf("store: sqlite:%s\nsources: {features: %q}\n%swatches:\n%s", filepath.Join(dir, "state.db"), url, notifiers, watches)
	cfg, err := config.Parse([]byte(yaml))
	if err != nil {
		t.Fatal(err)
	}
	if err := cfg.Resolve(config.Resolver{Env: func(k string) (string, bool) { return "hook-secret", k == "PLUMB_TEST_SECRET" }}); err != nil {
		t.Fatal(err)
	}
	st := openTestStore(t, cfg)
	w := &watcher{cfg: cfg, store: st, clock: &fakeClock{t: start}}
	w.run = &agent.Runner{Store: st, Config: cfg, Clock: w.clock}
	return w
}

// live runs watch i the morning after day d.
func (w *watcher) live(t *testing.T, i, d int) *agent.Outcome {
	t.Helper()
	w.clock.Set(start.AddDate(0, 0, d+1).Add(6 * time.Hour))
	out, err := w.run.Run(context.Background(), w.cfg.Watches[i], agent.RunOptions{Kind: agent.RunLive})
	if err != nil {
		t.Fatal(err)
	}
	if out.Err != nil {
		t.Fatalf("day %d: %v", d, out.Err)
	}
	return out
}

func (w *watcher) alerts(t *testing.T, watch string) []agent.Alert {
	t.Helper()
	as, err := w.store.Alerts(context.Background(), agent.AlertQuery{Watch: watch})
	if err != nil {
		t.Fatal(err)
	}
	return as
}

// dayOf is the index of the day a data time falls on.
func dayOf(at time.Time) int { return int(math.Floor(at.Sub(start).Hours() / 24)) }

// healthyDay returns one day of a stable district table: 48 half-hourly
// readings over four districts with large means (population about 5e4,
// metered volume about 1e6), a weekly rhythm, moderate correlations that do
// not change (metered volume follows temperature and the weekday; pressure
// drops a little when demand is high) and about one value in 200 NULL.
func healthyDay(rng *rand.Rand, d int) [][]float64 {
	weekday := math.Sin(2 * math.Pi * float64(d%7) / 7)
	rows := make([][]float64, 48)
	for i := range rows {
		temp := 15 + 6*math.Sin(2*math.Pi*float64(d)/365) + 2*weekday + 3*rng.NormFloat64()
		rain := math.Max(0, 2+3*rng.NormFloat64())
		pop := 50000 + 30*float64(d)/180 + 40*rng.NormFloat64()
		metered := 1.0e6 + 8000*(temp-15) + 6000*weekday - 2000*rain + 40000*rng.NormFloat64()
		pressure := 4.2 - 0.1*(metered-1e6)/40000 + 0.1*rng.NormFloat64()
		r := []float64{temp, rain, pop, pressure, metered}
		for j := range r {
			if rng.IntN(200) == 0 {
				r[j] = math.NaN()
			}
		}
		rows[i] = r
	}
	return rows
}

const healthyWatches = `
  - name: week
    source: features
    table: district_readings
    time_column: day
    window: 7 buckets
  - name: month
    source: features
    table: district_readings
    time_column: day
    window: 28 buckets
`

// TestHealthyTableIsQuiet checks the false-alarm budget: on a stable table
// watched with the default limits, no alert at all over 180 days, with
// windows of 7 and 28 buckets, in a backfill and day by day.
func TestHealthyTableIsQuiet(t *testing.T) {
	dir := t.TempDir()
	tb := newTable(t, dir, []string{"temperature_c", "rainfall_mm", "population_served", "pressure_bar", "metered_volume_m3"})
	rng := rand.New(rand.NewPCG(2026, 12))
	const days = 180
	live := newWatcher(t, t.TempDir(), tb.url, healthyWatches)
	for d := 0; d < days; d++ {
		tb.add(t, d, healthyDay(rng, d))
		for i := range live.cfg.Watches {
			live.live(t, i, d)
		}
	}
	back := newWatcher(t, t.TempDir(), tb.url, healthyWatches)
	back.clock.Set(start.AddDate(0, 0, days).Add(6 * time.Hour))
	for _, w := range back.cfg.Watches {
		if out, err := back.run.Run(context.Background(), w, agent.RunOptions{Kind: agent.RunBackfill}); err != nil || out.Err != nil {
			t.Fatal(err, out.Err)
		}
	}
	for _, w := range []*watcher{live, back} {
		for _, wt := range w.cfg.Watches {
			for _, a := range w.alerts(t, wt.Name) {
				t.Errorf("watch %s: %s alert on day %d: %s", wt.Name, a.Rule, dayOf(a.AsOf), a.Message)
			}
		}
	}
	// The table is what it claims: large means, and the intercept-included
	// condition number far above the centered one that the limits judge.
	ps, err := back.store.Points(context.Background(), "month", agent.PointQuery{})
	if err != nil || len(ps) != days {
		t.Fatalf("%d points, %v", len(ps), err)
	}
	last := ps[len(ps)-1]
	if !(last.ConditionNumber > 100) || !(last.CenteredCondition < 5) || !(last.MaxVIF < 4) {
		t.Errorf("last point: condition %v, centered %v, max VIF %v; want a healthy table whose intercept-included number is large",
			last.ConditionNumber, last.CenteredCondition, last.MaxVIF)
	}
}

// driftDay returns one day of the drifting table: 40 readings where
//   - metered_volume_m3 converges on residential + commercial demand: its
//     own noise shrinks from sd 20 by 8.5 %/day, so its VIF, 1 + 200/sd²,
//     crosses 10 about day 17 (sd 4.7), down to a floor of sd 0.5;
//   - estimated_volume_m3 is 2·residential − commercial + 4 plus noise
//     until day exactChange, exactly so from then on;
//   - pressure_bar sticks at 4.2 from day stuckDay.
func driftDay(rng *rand.Rand, d int) [][]float64 {
	sd := math.Max(20*math.Exp(-0.0851*float64(d)), 0.5)
	rows := make([][]float64, 40)
	for i := range rows {
		a := 100 + 10*rng.NormFloat64()
		b := 50 + 10*rng.NormFloat64()
		c := a + b + sd*rng.NormFloat64()
		est := 2*a - b + 4
		if d < exactChange {
			est += 30 * rng.NormFloat64()
		}
		p := 4.2
		if d < stuckDay {
			p += 0.1 * rng.NormFloat64()
		}
		rows[i] = []float64{a, b, c, est, p}
	}
	return rows
}

const (
	exactChange = 40
	stuckDay    = 60
)

const driftWatch = `
  - name: mains
    source: features
    table: district_readings
    time_column: day
    window: 7 buckets
`

// TestDriftingTableOneAlertPerCause runs the drifting table day by day and
// checks what an owner would be told: nothing while the first window
// fills; a trend warning at least 5 days before the critical level; one
// alert per cause (the near dependency, the exact equation, the stuck
// column) and none that restates them (no "singular", no infinite VIF);
// the onsets of the exact and constant alerts within one bucket of the
// true day; every resolved alert dated in data time; singular points
// without a condition number.
func TestDriftingTableOneAlertPerCause(t *testing.T) {
	dir := t.TempDir()
	tb := newTable(t, dir, []string{"residential_demand_m3", "commercial_demand_m3", "metered_volume_m3", "estimated_volume_m3", "pressure_bar"})
	rng := rand.New(rand.NewPCG(7, 2026))
	w := newWatcher(t, dir, tb.url, driftWatch)
	const days = 90
	firstAlert, trendDay, critDay := -1, -1, -1
	for d := 0; d < days; d++ {
		tb.add(t, d, driftDay(rng, d))
		out := w.live(t, 0, d)
		for _, a := range out.Open {
			if firstAlert < 0 {
				firstAlert = d
			}
			if a.Rule == agent.RuleTrend && trendDay < 0 {
				trendDay = d
			}
			if a.Rule == agent.RuleLevel && a.Severity == agent.Critical && a.Detail.Metric == agent.MetricMaxVIF && critDay < 0 {
				critDay = d
			}
		}
	}
	t.Logf("first alert day %d, trend warning day %d, critical level day %d", firstAlert, trendDay, critDay)
	// The first full 7-day window ends on day 6.
	if firstAlert < 6 {
		t.Errorf("an alert on day %d, while the first window was filling", firstAlert)
	}
	if trendDay < 0 || critDay < 0 || critDay-trendDay < 5 {
		t.Errorf("trend warning on day %d, critical level on day %d: want the warning 5 or more days ahead", trendDay, critDay)
	}
	as := w.alerts(t, "mains")
	causes := map[string]int{}
	for _, a := range as {
		t.Logf("%s %s %s day %d onset day %d resolved %v: %s", a.Rule, a.Subject, a.Severity, dayOf(a.AsOf), dayOf(a.Onset), !a.Open(), a.Message)
		if !a.Open() && a.ResolvedAsOf.IsZero() {
			t.Errorf("resolved alert %s without resolved_as_of", a.ID)
		}
		if len(a.Columns) == 0 {
			t.Errorf("alert %s names no columns", a.ID)
		}
		if strings.Contains(a.Message, "singular") || strings.Contains(a.Message, "∞") || strings.Contains(a.Message, "infinite") {
			t.Errorf("alert restates the singularity: %s", a.Message)
		}
		if !a.Open() {
			continue
		}
		causes[a.Key()]++
		switch a.Rule {
		case agent.RuleExact:
			if d := dayOf(a.Onset); d < exactChange-1 || d > exactChange+1 {
				t.Errorf("exact dependency onset day %d, want %d±1: %s", d, exactChange, a.Message)
			}
			if !strings.Contains(a.Detail.Equation, "estimated_volume_m3 = 2·residential_demand_m3 - 1·commercial_demand_m3 + 4") {
				t.Errorf("equation %q", a.Detail.Equation)
			}
		case agent.RuleConstant:
			if d := dayOf(a.Onset); d < stuckDay-1 || d > stuckDay+1 || a.Subject != "pressure_bar" {
				t.Errorf("constant %s onset day %d, want pressure_bar on day %d±1", a.Subject, d, stuckDay)
			}
		}
	}
	for k, n := range causes {
		if n > 1 {
			t.Errorf("%d open alerts for %s", n, k)
		}
	}
	open := map[agent.Rule]int{}
	for _, a := range as {
		if a.Open() {
			open[a.Rule]++
		}
	}
	if open[agent.RuleExact] != 1 || open[agent.RuleConstant] != 1 || open[agent.RuleLevel]+open[agent.RuleTrend]+open[agent.RuleJump] > 1 || len(causes) > 3 {
		t.Errorf("open alerts at the end %v: want one exact, one constant and at most one near dependency", open)
	}
	// Once the whole window lies after the change, the design is singular:
	// its condition numbers are undefined, the level judges the rest.
	ps, err := w.store.Points(context.Background(), "mains", agent.PointQuery{})
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range ps {
		if d := dayOf(p.At) - 1; d >= exactChange+7 && (p.Rank >= p.Columns+1 || !math.IsInf(p.ConditionNumber, 1) || math.IsInf(p.MaxVIF, 0)) {
			t.Errorf("day %d: rank %d of %d, condition number %v, max VIF %v: want singular, undefined, and a finite max VIF of the rest",
				d, p.Rank, p.Columns+1, p.ConditionNumber, p.MaxVIF)
		}
	}
}

// TestOneEquationOneNotification checks that an equation that starts to
// hold in every district at once opens one alert per segment (and one for
// the whole table) but one notification, listing the segments.
func TestOneEquationOneNotification(t *testing.T) {
	dir := t.TempDir()
	tb := newTable(t, dir, []string{"residential_connections", "commercial_connections", "total_connections", "temperature_c"})
	recv := newReceiver(t, "hook-secret")
	w := newWatcherWith(t, dir, tb.url, fmt.Sprintf("notifiers:\n  oncall: {webhook: %q, secret_env: PLUMB_TEST_SECRET}\n", recv.srv.URL), `
  - name: connections
    source: features
    table: district_readings
    time_column: day
    window: 7 buckets
    segment_by: district
    notify: [oncall]
`)
	del := &agent.Deliverer{Store: w.store, Clock: w.clock, Notifiers: map[string]agent.NotifierConfig{
		"oncall": {Notifier: &notify.Webhook{URL: recv.srv.URL, Secrets: []string{"hook-secret"}, Now: w.clock.Now}, Timeout: 5 * time.Second, MaxAge: 7 * 24 * time.Hour},
	}}
	rng := rand.New(rand.NewPCG(3, 4))
	for d := 0; d < 30; d++ {
		rows := make([][]float64, 48)
		for i := range rows {
			res := 8000 + 300*rng.NormFloat64()
			com := 600 + 40*rng.NormFloat64()
			tot := res + com
			if d < 10 {
				tot += 50 * rng.NormFloat64()
			}
			rows[i] = []float64{res, com, tot, 15 + 4*rng.NormFloat64()}
		}
		tb.add(t, d, rows)
		w.live(t, 0, d)
		if _, err := del.Once(context.Background()); err != nil {
			t.Fatal(err)
		}
	}
	var exact []agent.Alert
	for _, a := range w.alerts(t, "connections") {
		if a.Rule == agent.RuleExact {
			exact = append(exact, a)
		}
	}
	if len(exact) != 5 {
		t.Fatalf("%d exact alerts, want one per district and one for the whole table", len(exact))
	}
	var opened []agent.Notification
	for _, n := range recv.notifications() {
		if n.Rule == agent.RuleExact && n.Event == agent.EventOpened {
			opened = append(opened, n)
		}
	}
	if len(opened) != 1 || len(opened[0].Segments) != 5 || !strings.Contains(opened[0].Message, "in 5 segments") {
		t.Fatalf("exact openings notified: %+v; want one listing the 5 segments", opened)
	}
}
