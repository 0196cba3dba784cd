package main

import (
	"cmp"
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
	"plumb/agent/web"
)

// The states `plumb check` gives a watch, after a plumb line: a steady
// wall stands true, a leaning one has a warning open, a tilted one a
// critical alert; unread is a watch whose run failed.
const (
	stateSteady  = "steady"
	stateLeaning = "leaning"
	stateTilted  = "tilted"
	stateUnread  = "unread"
)

// Exit codes of plumb check (an outside contract).
const (
	checkPass   = 0 // no watch at or above the gate
	checkFail   = 1 // at least one watch at or above the gate
	checkUnread = 2 // at least one watch could not be run (exitError)
)

func stateOf(s agent.Severity) string {
	switch s {
	case agent.Critical:
		return stateTilted
	case agent.Warning:
		return stateLeaning
	}
	return stateSteady
}

// gate is the least severity that fails plumb check (--fail-on).
type gate agent.Severity

// reached reports whether an open alert of severity s is at or above g.
func (g gate) reached(s agent.Severity) bool {
	switch s {
	case agent.Critical:
		return true
	case agent.Warning:
		return g == gate(agent.Warning)
	}
	return false
}

// checkExit is the exit status of plumb check; its lines have been
// printed already.
type checkExit int

func (e checkExit) Error() string { return "" }
func (e checkExit) ExitCode() int { return int(e) }

func newCheckCmd() *cobra.Command {
	var (
		path, format, failOn string
		quiet                bool
	)
	cmd := &cobra.Command{
		Use:   "check [WATCH] [--config FILE] [--fail-on warning|critical]",
		Short: "run every watch (or one) once; exit 1 when one is at or above the gate",
		Long: `check runs one pass of every configured watch, or of the one named, exactly as the
agent's schedule would (incremental, recorded in the state store, alerts
evaluated and delivered), and prints one line per watch with its state:

  steady    no alert open
  leaning   a warning open
  tilted    a critical alert open
  unread    the run failed (the source or the store could not be read)

The exit status is 0 when no watch is at or above the gate, 1 when at least
one is, 2 when at least one watch could not be run (or the configuration or
store is unusable) and 64 for a wrong command line. The gate is --fail-on:
critical (the default) fails on tilted watches, warning on leaning ones too.
Use it in pipelines and CI gates. It takes the store's lock, so it cannot run
beside the agent.`,
		Example: `  plumb check --config plumb.yaml
  plumb check district_daily --config plumb.yaml --fail-on warning --format json`,
		Args: atMostOneArg("WATCH"),
		RunE: func(cmd *cobra.Command, args []string) error {
			if format != "text" && format != "json" {
				return usagef("--format %q: want text or json", format)
			}
			if failOn != string(agent.Warning) && failOn != string(agent.Critical) {
				return usagef("--fail-on %q: want warning or critical", failOn)
			}
			name := ""
			if len(args) == 1 {
				name = args[0]
			}
			level := slog.LevelInfo
			if quiet {
				level = slog.LevelWarn
			}
			log, err := commandLogger(cmd, level)
			if err != nil {
				return err
			}
			return runCheck(cmd.Context(), cmd.OutOrStdout(), path, name, format, gate(failOn), log)
		},
	}
	addConfigFlag(cmd, &path)
	cmd.Flags().StringVar(&format, "format", "text", "output format: text or json")
	cmd.Flags().StringVar(&failOn, "fail-on", string(agent.Critical), "least alert severity that fails the check: warning or critical")
	cmd.Flags().BoolVarP(&quiet, "quiet", "q", false, "log warnings only")
	return cmd
}

// checkResult is one watch in `plumb check --format json`.
type checkResult struct {
	Watch    string        `json:"watch"`
	State    string        `json:"state"`              // steady, leaning, tilted, unread
	Severity string        `json:"severity,omitempty"` // worst open alert: warning or critical
	AtGate   bool          `json:"at_gate"`            // counts against --fail-on
	Error    string        `json:"error,omitempty"`
	Run      agent.Run     `json:"run"`
	Open     []alertOutput `json:"open_alerts"`
	Cond     *float64      `json:"condition_number"`
	// Judged is the condition number the watch's limits apply to (its
	// condition_basis, on the design without the columns that exact and
	// constant alerts explain); Basis names it.
	Judged   *float64 `json:"judged_condition_number"`
	Basis    string   `json:"condition_basis"`
	MaxVIF   *float64 `json:"max_vif"`
	MaxVIFOn string   `json:"max_vif_column,omitempty"`

	rank, full int // of the latest point: rank of [1 X] and its columns
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

func runCheck(ctx context.Context, stdout io.Writer, path, name, format string, g gate, log *slog.Logger) error {
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
	var results []checkResult
	for _, w := range watches {
		out, err := runner.Run(ctx, w, agent.RunOptions{Kind: agent.RunCheck})
		if err != nil {
			return err
		}
		r := checkResult{Watch: w.Name, Run: out.Run, Open: []alertOutput{}}
		for _, a := range out.Open {
			r.Open = append(r.Open, toAlertOutput(a))
		}
		if out.Err != nil {
			r.State, r.Error = stateUnread, out.Err.Error()
		} else {
			r.State, r.Severity, r.AtGate = stateOf(out.Verdict), string(out.Verdict), g.reached(out.Verdict)
		}
		if ps, err := st.Points(ctx, w.Name, agent.PointQuery{Limit: 1}); err == nil && len(ps) == 1 {
			r.Cond, r.MaxVIF, r.MaxVIFOn = finite(ps[0].ConditionNumber), finite(ps[0].MaxVIF), ps[0].MaxVIFColumn
			r.rank, r.full = ps[0].Rank, ps[0].Columns+1
			r.Basis = cmp.Or(w.Limits.ConditionBasis, config.DefaultConditionBasis)
			if o, err := agent.ObservationFromPoint(ps[0], r.Basis); err == nil {
				r.Judged = finite(o.Cond)
			}
		}
		results = append(results, r)
	}
	d := &agent.Deliverer{Store: st, Notifiers: buildNotifiers(c, log), Logger: log}
	if _, err := d.Once(ctx); err != nil {
		log.Warn("delivering notifications", "err", err)
	}
	code := checkCode(results)
	if format == "json" {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		if err := enc.Encode(results); err != nil {
			return err
		}
	} else {
		writeCheckText(stdout, results, g, code)
	}
	if code == checkPass {
		return nil
	}
	return checkExit(code)
}

// checkCode is the exit status for results: unread beats the gate.
func checkCode(results []checkResult) int {
	code := checkPass
	for _, r := range results {
		switch {
		case r.State == stateUnread:
			return checkUnread
		case r.AtGate:
			code = checkFail
		}
	}
	return code
}

// writeCheckText prints one line per watch, state first, then its open
// alerts indented under it, and a closing tally that says why the exit
// status is what it is:
//
//	leaning  district_volumes · max VIF 7.2 (billed_volume_m3) · condition 41 · 56 rows read
//	         warning, trend: max VIF is rising …
//	1 of 3 watches at or above the gate (critical): exit 1
func writeCheckText(w io.Writer, results []checkResult, g gate, code int) {
	tally := map[string]int{}
	for _, r := range results {
		tally[r.State]++
		parts := []string{termSafe(r.Watch)}
		if r.MaxVIF != nil || r.MaxVIFOn != "" {
			s := "max VIF ∞" // undefined: a constant column or an exact dependency
			if r.MaxVIF != nil {
				s = "max VIF " + fmtNum(*r.MaxVIF)
			}
			if r.MaxVIFOn != "" {
				s += " (" + termSafe(r.MaxVIFOn) + ")"
			}
			parts = append(parts, s)
		}
		name := "centered condition"
		if r.Basis == config.ConditionIntercept {
			name = "condition with the intercept"
		}
		switch {
		case r.rank > 0 && r.rank < r.full && r.Judged != nil:
			parts = append(parts, fmt.Sprintf("singular (rank %d of %d); %s of the rest %s", r.rank, r.full, name, fmtNum(*r.Judged)))
		case r.rank > 0 && r.rank < r.full:
			parts = append(parts, fmt.Sprintf("singular (rank %d of %d)", r.rank, r.full))
		case r.Judged != nil:
			parts = append(parts, name+" "+fmtNum(*r.Judged))
		}
		parts = append(parts, fmt.Sprintf("%d rows read", r.Run.RowsRead))
		fmt.Fprintf(w, "%-8s %s\n", r.State, strings.Join(parts, " · "))
		if r.Error != "" {
			fmt.Fprintf(w, "%8s %s\n", "", termSafe(r.Error))
		}
		for _, a := range r.Open {
			fmt.Fprintf(w, "%8s %s, %s: %s\n", "", a.Severity, a.Rule, termSafe(a.Message))
		}
	}
	var counts []string
	for _, s := range []string{stateSteady, stateLeaning, stateTilted, stateUnread} {
		if tally[s] > 0 {
			counts = append(counts, fmt.Sprintf("%d %s", tally[s], s))
		}
	}
	verdict := "none at or above the gate"
	switch code {
	case checkFail:
		verdict = "at or above the gate"
	case checkUnread:
		verdict = "not every watch could be run"
	}
	fmt.Fprintf(w, "%d watch(es): %s; gate %s: %s, exit %d\n", len(results), strings.Join(counts, ", "), string(g), verdict, code)
}

// finite returns a pointer to v, or nil when v is not finite (JSON null).
func finite(v float64) *float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	return &v
}

// fmtNum writes a number for people, as the dashboard does: 645,
// 43 210, 13.1 million, never 1.31e+07.
func fmtNum(v float64) string { return web.FormatNumber(v) }
