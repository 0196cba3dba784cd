package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"log/slog"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"sort"
	"strings"
	"text/tabwriter"
	"time"

	"github.com/spf13/cobra"

	"plumb/agent"
	"plumb/agent/config"
	"plumb/agent/demo"
	"plumb/agent/web"
	"plumb/agent/web/storeview"
	"plumb/connectors"
)

// demoConfigYAML is the configuration `plumb demo` writes: one watch per
// story, each on the columns the story is about, so that each is told once
// and nothing else in the table cries wolf. The reasons for the limits are
// in the YAML's comments, which the user reads.
const demoConfigYAML = `# Written by plumb demo. Edit freely; plumb config check --config %[3]s explains it.
#
# Every watch runs on plumb's default limits: VIF 5 and 10, and the centered
# condition number (the columns among themselves) 15 and 30.
store: sqlite:%[1]s
sources:
  districts: sqlite:%[2]s
notifiers:
  log: {log: true}
watches:
  # Consumption signals, all districts pooled: metered and billed volume
  # converge as smart meters roll out (one utility-wide rollout, so the
  # watch is not segmented: the story is told once).
  - name: district_volumes
    source: districts
    table: district_daily
    columns: [temperature_c, rainfall_mm, metered_volume_m3, billed_volume_m3]
    time_column: day
    bucket: day
    window: 14 buckets
    rescan: 3 buckets
    schedule: "15 6 * * *"
    notify: [log]
  # Connection counts, all districts pooled: an upstream change makes the
  # total the exact sum of its parts. An exact dependency shows once the
  # whole 28-day window lies after the change.
  - name: district_connections
    source: districts
    table: district_daily
    columns: [residential_connections, commercial_connections, total_connections]
    time_column: day
    bucket: day
    window: 28 buckets
    rescan: 3 buckets
    schedule: "15 6 * * *"
    notify: [log]
  # The demand regression the analysts fit per district, on the columns
  # that move within a district from day to day (population, connections
  # and pipe age barely do over four weeks: per district they would only
  # measure the intercept again). A stuck pressure sensor makes its column
  # constant in that district's segment once the whole 28-day window lies
  # after it.
  - name: district_daily
    source: districts
    table: district_daily
    columns: [temperature_c, rainfall_mm, pressure_bar, metered_volume_m3]
    target: demand_m3
    time_column: day
    bucket: day
    window: 28 buckets
    rescan: 3 buckets
    segment_by: district
    schedule: "15 6 * * *"
    notify: [log]
  # Water treatment, all districts pooled: supply_source is a text column,
  # so plumb uses it as a factor (treatment dummies, one generalized VIF).
  # The works come to set the chlorine dose by source alone, and the dose
  # becomes a function of the source: an exact dependency, said in words.
  # A new source that appears later is noted, not alerted.
  - name: district_treatment
    source: districts
    table: district_daily
    columns: [supply_source, chlorine_mg_l, temperature_c, rainfall_mm]
    time_column: day
    bucket: day
    window: 28 buckets
    rescan: 3 buckets
    schedule: "15 6 * * *"
    notify: [log]
`

// demoFiles are the files plumb demo owns in its folder.
var demoFiles = []string{"districts.db", "state.db", "plumb.yaml"}

func newDemoCmd() *cobra.Command {
	var (
		dir, listen, start string
		noServe            bool
	)
	cmd := &cobra.Command{
		Use:   "demo [--dir DIR] [--no-serve]",
		Short: "build the water-utility demo, backfill its history and serve the dashboard",
		Long: `demo tells plumb's story on invented data in one command. In --dir it writes
districts.db, a water utility's daily demand features for four supply districts
over 120 days (generated from a fixed seed, nothing is downloaded), a state
store state.db and plumb.yaml pointing at both. Then it backfills the history
of four watches as the agent would have recorded it day by day, prints what
plumb found and when it would have alerted, and serves the dashboard until
interrupted.

Three stories are in the data: metered and billed volume converge as smart
meters roll out (the volumes watch's VIF drifts up until the trend warning and
then the critical level); from day 70 an upstream change writes
total_connections as the exact sum of its parts (an exact dependency); from day
85 the pressure sensor of the hillside district sticks (a constant column in
that segment).

The data end yesterday unless --start moves them. Running demo again in the
same folder replaces the files it wrote there.`,
		Example: `  plumb demo --dir /tmp/plumb-demo
  plumb demo --dir /tmp/plumb-demo --no-serve
  plumb history district_volumes --config /tmp/plumb-demo/plumb.yaml`,
		Args: noArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			sc := demo.Default
			if start != "" {
				t, err := time.Parse(time.DateOnly, start)
				if err != nil {
					return usagef("--start %q: want a date like 2026-06-01", start)
				}
				sc.Start = t
			} else {
				today := time.Now().UTC().Truncate(24 * time.Hour)
				sc.Start = today.AddDate(0, 0, -sc.Days)
			}
			log, err := commandLogger(cmd, slog.LevelWarn)
			if err != nil {
				return err
			}
			return runDemo(cmd.Context(), cmd.OutOrStdout(), log, sc, dir, listen, !noServe)
		},
	}
	cmd.Flags().StringVar(&dir, "dir", "plumb-demo", "folder for the demo's database, state store and configuration")
	cmd.Flags().BoolVar(&noServe, "no-serve", false, "print the report and exit instead of serving the dashboard")
	cmd.Flags().StringVar(&listen, "listen", web.DefaultListen, "address of the dashboard")
	cmd.Flags().StringVar(&start, "start", "", "first day of the data (default: 120 days before today)")
	return cmd
}

func runDemo(ctx context.Context, stdout io.Writer, log *slog.Logger, sc demo.Scenario, dir, listen string, serve bool) error {
	began := time.Now()
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return fmt.Errorf("demo folder: %w", err)
	}
	abs, err := filepath.Abs(dir)
	if err != nil {
		return fmt.Errorf("demo folder: %w", err)
	}
	for _, f := range demoFiles {
		for _, suffix := range []string{"", "-wal", "-shm", "-journal"} {
			if err := os.Remove(filepath.Join(abs, f+suffix)); err != nil && !errors.Is(err, fs.ErrNotExist) {
				return fmt.Errorf("demo folder: %w", err)
			}
		}
	}
	dbPath := filepath.Join(abs, "districts.db")
	statePath := filepath.Join(abs, "state.db")
	cfgPath := filepath.Join(abs, "plumb.yaml")
	if err := sc.WriteSQLite(ctx, dbPath); err != nil {
		return err
	}
	if err := os.WriteFile(cfgPath, []byte(fmt.Sprintf(demoConfigYAML, demoConfigArgs(statePath, dbPath, cfgPath)...)), 0o644); err != nil {
		return fmt.Errorf("demo configuration: %w", err)
	}
	c, err := loadConfig(cfgPath, true)
	if err != nil {
		return err
	}
	st, err := openStore(ctx, c, true, log)
	if err != nil {
		return err
	}
	defer st.Close()
	release, err := lockStore(ctx, st, "plumb demo")
	if err != nil {
		return err
	}
	fmt.Fprintf(stdout, "plumb demo in %s\n  data:   %s (%s, %d districts × %d days from %s)\n  store:  %s\n  config: %s\n\n",
		abs, dbPath, demo.Table, len(sc.Districts), sc.Days, sc.Start.Format(time.DateOnly), statePath, cfgPath)
	run := &agent.Runner{Store: st, Config: c, Logger: log}
	for _, w := range c.Watches {
		out, err := run.Run(ctx, w, agent.RunOptions{Kind: agent.RunBackfill})
		if err == nil {
			err = out.Err
		}
		if err != nil {
			release()
			return fmt.Errorf("demo backfill of %s: %w", w.Name, err)
		}
	}
	if err := release(); err != nil {
		return err
	}
	if err := demoReport(ctx, stdout, st, c, sc); err != nil {
		return err
	}
	fmt.Fprintf(stdout, "\nbuilt and backfilled in %.1fs.\n", time.Since(began).Seconds())
	writeDemoHints(stdout, invokedAs(), cfgPath, sc, !serve)
	if !serve {
		return nil
	}
	return serveDashboard(ctx, stdout, st, c, listen, log)
}

// demoReport prints each watch's latest state, what plumb noticed (one
// line per watch, segment and rule) and, per story of the scenario, when
// plumb noticed it against when it happened in the data. Days are the
// scenario's day numbers (day 0 is its first day); a window is dated by
// its last day.
func demoReport(ctx context.Context, w io.Writer, st agent.Store, c *config.Config, sc demo.Scenario) error {
	tw := tabwriter.NewWriter(w, 2, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "watch\twindows\tlast centered condition number\tlast max VIF\trank")
	points := map[string][]agent.Point{}
	for _, wt := range c.Watches {
		ps, err := st.Points(ctx, wt.Name, agent.PointQuery{AllSegs: true})
		if err != nil {
			return err
		}
		points[wt.Name] = ps
		var whole []agent.Point
		for _, p := range ps {
			if p.Segment == "" {
				whole = append(whole, p)
			}
		}
		if len(whole) == 0 {
			fmt.Fprintf(tw, "%s\t0\t\t\t\n", wt.Name)
			continue
		}
		last := whole[len(whole)-1]
		vif := fmtNum(last.MaxVIF)
		if last.MaxVIFColumn != "" {
			vif += " (" + last.MaxVIFColumn + ")"
		}
		// The number the limits judge: of the columns left once exact and
		// constant alerts have taken theirs.
		cond := fmtNum(last.CenteredCondition)
		if o, err := agent.ObservationFromPoint(last, wt.Limits.ConditionBasis); err == nil {
			cond = fmtNum(o.Cond)
			if len(o.LeftOut) > 0 {
				cond += " (without " + strings.Join(o.LeftOut, ", ") + ")"
			}
		}
		fmt.Fprintf(tw, "%s\t%d\t%s\t%s\t%d of %d\n", wt.Name, len(whole), cond, vif, last.Rank, last.Columns+1)
	}
	tw.Flush()
	alerts, err := st.Alerts(ctx, agent.AlertQuery{})
	if err != nil {
		return err
	}
	day := func(at time.Time) int { return int(at.Sub(sc.Start).Hours()/24) - 1 } // a window's last day
	date := func(d int) string { return sc.Start.AddDate(0, 0, d).Format(time.DateOnly) }
	// No alert comes from a window that is still filling (the rules'
	// warm-up), so every alert counts.
	settled := alerts
	groups := groupAlerts(settled)
	fmt.Fprintf(w, "\nWhat plumb noticed (%d alerts; day = the last data day of the window that raised it, day 0 = %s):\n",
		len(alerts), date(0))
	tw = tabwriter.NewWriter(w, 2, 4, 2, ' ', 0)
	for _, g := range groups {
		where := g.watch
		label := connectors.SegmentLabel(g.segment)
		if g.segment != connectors.WholeTable {
			where += "/" + label
		}
		state := "still open"
		if !g.open {
			state = fmt.Sprintf("resolved day %d", day(g.resolved))
		}
		times := ""
		if g.count > 1 {
			times = fmt.Sprintf(" (opened %d times)", g.count)
		}
		fmt.Fprintf(tw, "  %s\t%s\tday %d\t%s\t%s%s\t%s\n", where, g.rule, day(g.first.AsOf), g.severity, state, times,
			strings.TrimPrefix(strings.TrimSpace(g.first.Message), "segment "+label+": "))
	}
	tw.Flush()

	fmt.Fprintln(w, "\nThe stories in the data, and when plumb noticed them:")
	for _, line := range demoStories(c, sc, points, settled, day) {
		fmt.Fprintln(w, "  "+line)
	}
	fmt.Fprintf(w, "\n%s\n", caution)
	return nil
}

// alertGroup is the alerts of one watch, segment and rule.
type alertGroup struct {
	watch, segment string
	rule           agent.Rule
	first          agent.Alert // the earliest opened
	severity       agent.Severity
	count          int
	open           bool
	resolved       time.Time // data time of the last resolution, when none is open
}

// groupAlerts folds alerts into one group per watch, segment and rule, in
// the order of the data days they first opened.
func groupAlerts(alerts []agent.Alert) []alertGroup {
	sort.SliceStable(alerts, func(i, j int) bool { return alerts[i].AsOf.Before(alerts[j].AsOf) })
	var out []alertGroup
	index := map[string]int{}
	for _, a := range alerts {
		k := a.Watch + "\x00" + a.Segment + "\x00" + string(a.Rule)
		i, ok := index[k]
		if !ok {
			i = len(out)
			index[k] = i
			out = append(out, alertGroup{watch: a.Watch, segment: a.Segment, rule: a.Rule, first: a, severity: a.Severity})
		}
		g := &out[i]
		g.count++
		if a.Severity == agent.Critical {
			g.severity = agent.Critical
		}
		if a.Open() {
			g.open = true
		} else if a.ResolvedAsOf.After(g.resolved) {
			g.resolved = a.ResolvedAsOf
		}
	}
	return out
}

// demoStories says, per story of the scenario, when it happened in the
// data and when plumb noticed it.
func demoStories(c *config.Config, sc demo.Scenario, points map[string][]agent.Point, alerts []agent.Alert, day func(time.Time) int) []string {
	firstAlert := func(watch, segment string, rule agent.Rule, subject string) (agent.Alert, bool) {
		var best agent.Alert
		found := false
		for _, a := range alerts {
			if a.Watch == watch && a.Segment == segment && a.Rule == rule && (subject == "" || a.Subject == subject) &&
				(!found || a.AsOf.Before(best.AsOf)) {
				best, found = a, true
			}
		}
		return best, found
	}
	firstAbove := func(watch, segment string, level float64) (int, bool) {
		full := 0
		if wt := c.Watch(watch); wt != nil {
			full = wt.Window.Buckets - 1
		}
		for _, p := range points[watch] {
			if p.Segment == segment && day(p.At) >= full && p.MaxVIF >= level {
				return day(p.At), true
			}
		}
		return 0, false
	}
	window := func(watch string) int {
		if wt := c.Watch(watch); wt != nil {
			return wt.Window.Buckets
		}
		return 0
	}
	var out []string

	// Smart meters: the trend warning, then the levels.
	s := fmt.Sprintf("smart meters: half of the accounts billed on a reading by day %d; district_volumes", sc.RolloutDay)
	var parts []string
	var near []agent.Alert
	for _, r := range []agent.Rule{agent.RuleTrend, agent.RuleLevel, agent.RuleJump} {
		if a, ok := firstAlert("district_volumes", "", r, ""); ok {
			near = append(near, a)
		}
	}
	if len(near) > 0 {
		// Level, trend and jump are one alert about one near dependency:
		// it opened as a trend warning when no window was at the warn
		// level yet.
		a := near[0]
		for _, b := range near[1:] {
			if b.AsOf.Before(a.AsOf) {
				a = b
			}
		}
		wt := c.Watch("district_volumes")
		if d, ok := firstAbove(wt.Name, "", wt.Limits.VIF.Warn); !ok || day(a.AsOf) < d {
			parts = append(parts, fmt.Sprintf("trend warning on day %d", day(a.AsOf)))
		} else {
			parts = append(parts, fmt.Sprintf("alert opened on day %d", day(a.AsOf)))
		}
	}
	if wt := c.Watch("district_volumes"); wt != nil {
		if d, ok := firstAbove(wt.Name, "", wt.Limits.VIF.Warn); ok {
			parts = append(parts, fmt.Sprintf("max VIF at the warn level %s on day %d", fmtNum(wt.Limits.VIF.Warn), d))
		}
		if d, ok := firstAbove(wt.Name, "", wt.Limits.VIF.Critical); ok {
			parts = append(parts, fmt.Sprintf("critical level %s crossed on day %d", fmtNum(wt.Limits.VIF.Critical), d))
		}
	}
	if len(parts) == 0 {
		parts = append(parts, "nothing noticed")
	}
	out = append(out, s+": "+strings.Join(parts, ", ")+".")

	// The exact total.
	s = fmt.Sprintf("exact total: from day %d total_connections is the sum of its parts; district_connections", sc.ChangeDay)
	if a, ok := firstAlert("district_connections", "", agent.RuleExact, ""); ok {
		s += fmt.Sprintf(" reports the exact dependency on day %d, once the last week of the window holds it, dated to day %d (its onset, from the daily buckets)",
			day(a.AsOf), day(a.Onset)+1)
		if eq := a.Detail.Equation; eq != "" {
			s += ": " + eq
		}
		s += "."
	} else {
		s += ": not noticed."
	}
	out = append(out, s)

	// The stuck sensor.
	s = fmt.Sprintf("stuck sensor: %s's pressure reads 3.415 from day %d; district_daily/%s", sc.StuckDistrict, sc.StuckDay, sc.StuckDistrict)
	if a, ok := firstAlert("district_daily", connectors.SegmentKey(sc.StuckDistrict), agent.RuleConstant, "pressure_bar"); ok {
		s += fmt.Sprintf(" reports pressure_bar constant on day %d", day(a.AsOf))
		if n := window("district_daily"); n > 0 {
			s += fmt.Sprintf(", the first %d-day window wholly after it (day %d+%d)", n, sc.StuckDay, n-1)
		}
		s += fmt.Sprintf(", dated to day %d (its onset)", day(a.Onset)+1)
		if l, ok := firstAlert("district_daily", connectors.SegmentKey(sc.StuckDistrict), agent.RuleLevel, ""); ok && l.AsOf.Before(a.AsOf) && day(l.AsOf) >= sc.StuckDay {
			s += fmt.Sprintf("; its condition number passed the levels from day %d, as the last varying readings left the window", day(l.AsOf))
		}
		s += "."
	} else {
		s += ": not noticed."
	}
	out = append(out, s)

	// The dose fixed by the source.
	s = fmt.Sprintf("chlorine by source: from day %d the dose is set by supply_source alone; district_treatment", sc.DoseDay)
	if a, ok := firstAlert("district_treatment", "", agent.RuleExact, ""); ok {
		s += fmt.Sprintf(" reports it on day %d, once the last week of the window holds it, dated to day %d", day(a.AsOf), day(a.Onset)+1)
		if wd := a.Detail.Words; wd != "" {
			s += ": " + wd
		}
		s += "."
	} else {
		s += ": not noticed."
	}
	out = append(out, s)
	first := -1
	for _, r := range sc.Rows() {
		if r.SupplySource == sc.NewSource {
			first = day(r.Day) + 1 // day() counts window ends; a row's day is its bucket's start
			break
		}
	}
	s = fmt.Sprintf("new source: %s first receives %s water on day %d; district_treatment", sc.NewSourceIn, sc.NewSource, first)
	if d, ok := firstLevel(points["district_treatment"], "supply_source", sc.NewSource, day); ok {
		s += fmt.Sprintf(" counts it as a level of supply_source from day %d, with no alert.", d)
	} else {
		s += ": not seen."
	}
	return append(out, s)
}

// firstLevel returns the day of the first whole-table point whose report
// lists level among factor's levels present.
func firstLevel(points []agent.Point, factor, level string, day func(time.Time) int) (int, bool) {
	for _, p := range points {
		if p.Segment != "" || len(p.Report) == 0 {
			continue
		}
		fs, err := storeview.PointFactors(p)
		if err != nil {
			continue
		}
		for _, f := range fs {
			if f.Name == factor && slices.Contains(f.Levels, level) {
				return day(p.At), true
			}
		}
	}
	return 0, false
}

func demoConfigArgs(statePath, dbPath, cfgPath string) []any {
	return []any{statePath, dbPath, cfgPath}
}

// writeDemoHints prints commands to try next, each runnable as shown: plumb
// as the user started it, the configuration by its absolute path.
func writeDemoHints(w io.Writer, plumb, cfgPath string, sc demo.Scenario, withServe bool) {
	cfg := "--config " + shellQuote(cfgPath)
	fmt.Fprintln(w, "Next, from the folder you ran this in:")
	hints := []string{
		"history district_volumes " + cfg,
		"history district_daily --segment " + shellQuote(sc.StuckDistrict) + " " + cfg,
		"alerts --open " + cfg,
	}
	if withServe {
		hints = append(hints, "serve "+cfg)
	}
	for _, h := range hints {
		fmt.Fprintf(w, "  %s %s\n", plumb, h)
	}
}

// invokedAs is how to start this plumb again from a shell: "go run
// ./cmd/plumb" for a binary go run built, "plumb" when that name on the
// PATH is this binary, else the path it was started by.
func invokedAs() string {
	exe, _ := os.Executable()
	return invocation(exe, os.Args[0], exec.LookPath)
}

func invocation(exe, arg0 string, lookPath func(string) (string, error)) string {
	if strings.Contains(filepath.ToSlash(exe), "/go-build") {
		return "go run ./cmd/plumb"
	}
	if p, err := lookPath("plumb"); err == nil && sameFile(p, exe) {
		return "plumb"
	}
	if arg0 == "" {
		return shellQuote(exe)
	}
	return shellQuote(arg0)
}

func sameFile(a, b string) bool {
	fa, err := os.Stat(a)
	if err != nil {
		return false
	}
	fb, err := os.Stat(b)
	return err == nil && os.SameFile(fa, fb)
}

// shellQuote quotes s for a POSIX shell when it needs it.
func shellQuote(s string) string {
	if s != "" && strings.Trim(s, "abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789-_./:=+,@%") == "" {
		return s
	}
	return "'" + strings.ReplaceAll(s, "'", `'\''`) + "'"
}
