package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"log/slog"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"text/tabwriter"
	"time"

	"github.com/spf13/cobra"

	"plumb/agent"
	"plumb/agent/config"
	"plumb/agent/demo"
	"plumb/agent/web"
)

// demoConfigYAML is the configuration `plumb demo` writes: three watches over
// the scenario's table. The condition limits are set for this table: with
// the intercept included and columns whose means are far from zero (a
// district's population, its connections), the uncentered condition
// number starts in the hundreds, so the rule-of-thumb 15/30 would mark
// every day critical. VIF limits are the common-practice 5 and 10.
const demoConfigYAML = `# Written by plumb demo. Edit freely; plumb config check --config %[3]s explains it.
store: sqlite:%[1]s
sources:
  districts: sqlite:%[2]s
notifiers:
  log: {log: true}
watches:
  # The whole feature table, with the regression the analysts fit.
  - name: district_daily
    source: districts
    table: district_daily
    target: demand_m3
    time_column: day
    bucket: day
    window: 28 buckets
    lookback: 3 buckets
    segment_by: district
    schedule: "15 6 * * *"
    limits:
      vif: {warn: 5, critical: 10}
      condition: {warn: 3000, critical: 10000}
      horizon: 14d
    notify: [log]
  # Consumption signals: metered and billed volume converge as smart
  # meters roll out.
  - name: district_volumes
    source: districts
    table: district_daily
    columns: [temperature_c, rainfall_mm, population_served, metered_volume_m3, billed_volume_m3]
    time_column: day
    bucket: day
    window: 28 buckets
    lookback: 3 buckets
    segment_by: district
    schedule: "15 6 * * *"
    limits:
      vif: {warn: 5, critical: 10}
      condition: {warn: 1000, critical: 3000}
      horizon: 14d
    notify: [log]
  # Connection counts: an upstream change makes the total an exact sum.
  - name: district_connections
    source: districts
    table: district_daily
    columns: [residential_connections, commercial_connections, total_connections, pipe_age_years, pressure_bar]
    time_column: day
    bucket: day
    window: 28 buckets
    lookback: 3 buckets
    segment_by: district
    schedule: "15 6 * * *"
    limits:
      vif: {warn: 5, critical: 10}
      condition: {warn: 3000, critical: 10000}
      horizon: 14d
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
		Short: "Build the water-utility demo, backfill its history and serve the dashboard",
		Long: `demo tells plumb's story on invented data in one command. In --dir it writes
districts.db, a water utility's daily demand features for four supply districts
over 120 days (generated from a fixed seed, nothing is downloaded), a state
store state.db and plumb.yaml pointing at both. Then it backfills the history
of three watches as the agent would have recorded it day by day, prints what
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
		Args: cobra.NoArgs,
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
			return runDemo(cmd.Context(), cmd.OutOrStdout(), cmd.ErrOrStderr(), sc, dir, listen, !noServe)
		},
	}
	cmd.Flags().StringVar(&dir, "dir", "plumb-demo", "folder for the demo's database, state store and configuration")
	cmd.Flags().BoolVar(&noServe, "no-serve", false, "print the report and exit instead of serving the dashboard")
	cmd.Flags().StringVar(&listen, "listen", web.DefaultListen, "address of the dashboard")
	cmd.Flags().StringVar(&start, "start", "", "first day of the data (default: 120 days before today)")
	return cmd
}

func runDemo(ctx context.Context, stdout, stderr io.Writer, sc demo.Scenario, dir, listen string, serve bool) error {
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
	if err := os.WriteFile(cfgPath, []byte(fmt.Sprintf(demoConfigYAML, statePath, dbPath, cfgPath)), 0o644); err != nil {
		return fmt.Errorf("demo configuration: %w", err)
	}
	c, err := loadConfig(cfgPath, true)
	if err != nil {
		return err
	}
	log := slog.New(slog.NewTextHandler(stderr, &slog.HandlerOptions{Level: slog.LevelWarn}))
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
	fmt.Fprintf(stdout, "\nbuilt and backfilled in %.1fs. Next: plumb history district_volumes --config %s\n", time.Since(began).Seconds(), cfgPath)
	if !serve {
		return nil
	}
	return serveDashboard(ctx, stdout, st, c, listen, log)
}

// demoReport prints each watch's latest state and the alerts the backfill
// recorded, in the order of the data days that raised them.
func demoReport(ctx context.Context, w io.Writer, st agent.Store, c *config.Config, sc demo.Scenario) error {
	tw := tabwriter.NewWriter(w, 2, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "watch\twindows\tlast condition number\tlast max VIF\trank")
	for _, wt := range c.Watches {
		ps, err := st.Points(ctx, wt.Name, agent.PointQuery{})
		if err != nil {
			return err
		}
		if len(ps) == 0 {
			fmt.Fprintf(tw, "%s\t0\t\t\t\n", wt.Name)
			continue
		}
		last := ps[len(ps)-1]
		vif := fmtNum(last.MaxVIF)
		if last.MaxVIFColumn != "" {
			vif += " (" + last.MaxVIFColumn + ")"
		}
		fmt.Fprintf(tw, "%s\t%d\t%s\t%s\t%d of %d\n", wt.Name, len(ps), fmtNum(last.ConditionNumber), vif, last.Rank, last.Columns+1)
	}
	tw.Flush()
	alerts, err := st.Alerts(ctx, agent.AlertQuery{})
	if err != nil {
		return err
	}
	sort.SliceStable(alerts, func(i, j int) bool { return alerts[i].AsOf.Before(alerts[j].AsOf) })
	fmt.Fprintf(w, "\nWhen plumb would have alerted (%d alerts; day = the data day that raised it):\n", len(alerts))
	for _, a := range alerts {
		where := a.Watch
		if a.Segment != "" {
			where += "/" + a.Segment
		}
		state := "still open"
		if !a.Open() {
			state = "resolved " + a.ResolvedAt.UTC().Format(time.DateOnly)
		}
		day := int(a.AsOf.Sub(sc.Start).Hours()/24) + 1
		fmt.Fprintf(w, "  day %3d %s  %-8s %-8s %s: %s (%s)\n", day, a.AsOf.UTC().Format(time.DateOnly), a.Severity, a.Rule, where,
			strings.TrimSpace(a.Message), state)
	}
	fmt.Fprintf(w, "\n%s\n", caution)
	return nil
}
