package main

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"math"
	"strings"

	"github.com/spf13/cobra"

	"plumb/agent"
	"plumb/agent/config"
)

// verdict is the exit status of a judging command: 0 ok, 1 warning,
// 2 critical. Its message has been printed already.
type verdict int

func (v verdict) Error() string { return "" }
func (v verdict) ExitCode() int { return int(v) }

func verdictOf(s agent.Severity) verdict {
	switch s {
	case agent.Critical:
		return 2
	case agent.Warning:
		return 1
	}
	return 0
}

// failedRuns is returned when a run could not read its source.
type failedRuns struct{ msg string }

func (e failedRuns) Error() string { return e.msg }
func (e failedRuns) ExitCode() int { return exitError }

func newCheckCmd() *cobra.Command {
	var (
		path, format string
		quiet        bool
	)
	cmd := &cobra.Command{
		Use:   "check [WATCH] [--config FILE]",
		Short: "Run every watch (or one) once and exit 0 ok, 1 warning, 2 critical",
		Long: `check runs one pass of every configured watch, or of the one named, exactly as the
agent's schedule would (incremental, recorded in the state store, alerts
evaluated and delivered), then exits with the worst verdict among the watches'
open alerts: 0 when none is open, 1 for a warning, 2 for a critical alert, and
3 when a watch could not be read or the store is unusable. Use it in pipelines
and CI gates. It takes the store's lock, so it cannot run beside the agent.`,
		Example: `  plumb check --config plumb.yaml
  plumb check district_daily --format json`,
		Args: cobra.MaximumNArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			if format != "text" && format != "json" {
				return usagef("--format %q: want text or json", format)
			}
			name := ""
			if len(args) == 1 {
				name = args[0]
			}
			log, _ := newLogger(cmd.ErrOrStderr(), "text", slog.LevelWarn)
			if !quiet {
				log, _ = newLogger(cmd.ErrOrStderr(), "text", slog.LevelInfo)
			}
			return runCheck(cmd.Context(), cmd.OutOrStdout(), path, name, format, log)
		},
	}
	addConfigFlag(cmd, &path)
	cmd.Flags().StringVar(&format, "format", "text", "output format: text or json")
	cmd.Flags().BoolVarP(&quiet, "quiet", "q", false, "log warnings only")
	return cmd
}

// checkResult is one watch in `plumb check --format json`.
type checkResult struct {
	Watch    string        `json:"watch"`
	Status   string        `json:"status"` // ok, warning, critical, failed
	Error    string        `json:"error,omitempty"`
	Run      agent.Run     `json:"run"`
	Open     []alertOutput `json:"open_alerts"`
	Verdict  int           `json:"exit_code"`
	Cond     *float64      `json:"condition_number"`
	MaxVIF   *float64      `json:"max_vif"`
	MaxVIFOn string        `json:"max_vif_column,omitempty"`
}

func watchesToRun(c *config.Config, name string) ([]*config.Watch, error) {
	if name == "" {
		return c.Watches, nil
	}
	w := c.Watch(name)
	if w == nil {
		names := make([]string, len(c.Watches))
		for i, w := range c.Watches {
			names[i] = w.Name
		}
		return nil, usagef("no watch %q in the configuration (watches: %s)", name, strings.Join(names, ", "))
	}
	return []*config.Watch{w}, nil
}

func runCheck(ctx context.Context, stdout io.Writer, path, name, format string, log *slog.Logger) error {
	c, err := loadConfig(path, true)
	if err != nil {
		return err
	}
	watches, err := watchesToRun(c, name)
	if err != nil {
		return err
	}
	st, err := openStore(ctx, c, true, nil)
	if err != nil {
		return err
	}
	defer st.Close()
	release, err := lockStore(ctx, st, "plumb check")
	if err != nil {
		return err
	}
	defer release()
	runner := newRunner(st, c, log)
	var (
		results []checkResult
		worst   verdict
		failed  []string
	)
	for _, w := range watches {
		out, err := runner.Run(ctx, w, agent.RunOptions{Kind: agent.RunCheck})
		if err != nil {
			return err
		}
		r := checkResult{Watch: w.Name, Run: out.Run, Open: []alertOutput{}}
		for _, a := range out.Open {
			r.Open = append(r.Open, toAlertOutput(a))
		}
		switch {
		case out.Err != nil:
			r.Status, r.Error, r.Verdict = "failed", out.Err.Error(), exitError
			failed = append(failed, fmt.Sprintf("watch %s: %v", w.Name, out.Err))
		default:
			v := verdictOf(out.Verdict)
			r.Verdict = int(v)
			r.Status = map[verdict]string{0: "ok", 1: "warning", 2: "critical"}[v]
			worst = max(worst, v)
		}
		if ps, err := st.Points(ctx, w.Name, agent.PointQuery{Limit: 1}); err == nil && len(ps) == 1 {
			r.Cond, r.MaxVIF, r.MaxVIFOn = finite(ps[0].ConditionNumber), finite(ps[0].MaxVIF), ps[0].MaxVIFColumn
		}
		results = append(results, r)
	}
	d := &agent.Deliverer{Store: st, Notifiers: buildNotifiers(c, log), Logger: log}
	if _, err := d.Once(ctx); err != nil {
		log.Warn("delivering notifications", "err", err)
	}
	if format == "json" {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		if err := enc.Encode(results); err != nil {
			return err
		}
	} else {
		for _, r := range results {
			line := fmt.Sprintf("%-24s %-8s", termSafe(r.Watch), strings.ToUpper(r.Status))
			if r.Cond != nil {
				line += fmt.Sprintf(" condition %s", fmtNum(*r.Cond))
			}
			if r.MaxVIF != nil {
				line += fmt.Sprintf(", max VIF %s", fmtNum(*r.MaxVIF))
				if r.MaxVIFOn != "" {
					line += " (" + termSafe(r.MaxVIFOn) + ")"
				}
			}
			line += fmt.Sprintf("; read %d rows", r.Run.RowsRead)
			fmt.Fprintln(stdout, line)
			if r.Error != "" {
				fmt.Fprintf(stdout, "    error: %s\n", termSafe(r.Error))
			}
			for _, a := range r.Open {
				fmt.Fprintf(stdout, "    %-8s %-8s %s\n", a.Severity, a.Rule, termSafe(a.Message))
			}
		}
	}
	if len(failed) > 0 {
		return failedRuns{msg: strings.Join(failed, "; ")}
	}
	if worst > 0 {
		return worst
	}
	return nil
}

// finite returns a pointer to v, or nil when v is not finite (JSON null).
func finite(v float64) *float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	return &v
}

func fmtNum(v float64) string {
	switch {
	case math.Abs(v) >= 1e6:
		return fmt.Sprintf("%.3g", v)
	case math.Abs(v) >= 100:
		return fmt.Sprintf("%.0f", v)
	}
	return fmt.Sprintf("%.3g", v)
}
