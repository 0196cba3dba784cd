package main

import (
	"encoding/json"
	"fmt"
	"io"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"plumb/agent"
	"plumb/agent/config"
	"plumb/connectors"
	"plumb/diagnostics"
)

// alertOutput is one alert in `plumb alerts --format json` (an outside
// contract: keep the names).
//
// Data times: onset (since when the cause holds), as_of (the window end
// that opened the alert), resolved_as_of (the window end that resolved it,
// null while open). Wall-clock times: opened_at and resolved_at, when
// plumb recorded them.
type alertOutput struct {
	ID    string `json:"id"`
	Watch string `json:"watch"`
	// The series: "whole_table": true, or "segment" with the value (the
	// empty string included) or null for NULL.
	connectors.SegmentJSON
	Rule     string    `json:"rule"`
	Subject  string    `json:"subject,omitempty"`
	Severity string    `json:"severity"`
	Onset    time.Time `json:"onset"`
	AsOf     time.Time `json:"as_of"`
	// UpdatedAsOf is the last data day of the latest window that changed
	// the alert (still found, escalated, clearing or resolved).
	UpdatedAsOf  time.Time            `json:"updated_as_of"`
	ResolvedAsOf *time.Time           `json:"resolved_as_of"`
	OpenedAt     time.Time            `json:"opened_at"`
	ResolvedAt   *time.Time           `json:"resolved_at"`
	Columns      []string             `json:"columns"`
	Equation     string               `json:"equation,omitempty"`
	Drivers      []diagnostics.Driver `json:"drivers,omitempty"`
	Message      string               `json:"message"`
	Remedy       string               `json:"remedy,omitempty"`
	// Acknowledged is the owner's acknowledgement: by, at, until (the
	// snooze's end), note, severity, snooze_ended_at.
	Acknowledged *agent.Ack `json:"acknowledged,omitempty"`

	segment string // the key
}

func toAlertOutput(a agent.Alert) alertOutput {
	o := alertOutput{ID: a.ID, Watch: a.Watch, SegmentJSON: connectors.SegmentJSONOf(a.Segment), segment: a.Segment,
		Rule: string(a.Rule), Subject: a.Subject,
		Severity: string(a.Severity), Onset: a.Onset.UTC(), AsOf: a.AsOf.UTC(), UpdatedAsOf: a.UpdatedAsOf.UTC(), OpenedAt: a.OpenedAt.UTC(),
		Columns: a.Columns, Equation: a.Detail.Equation, Message: a.Message, Remedy: a.Detail.Remedy,
		Acknowledged: a.Ack}
	if o.Columns == nil {
		o.Columns = []string{}
	}
	if a.Detail.Metric == agent.MetricMaxVIF {
		o.Drivers = a.Drivers
	}
	if o.Onset.IsZero() {
		o.Onset = o.AsOf
	}
	if !a.Open() {
		t, d := a.ResolvedAt.UTC(), a.ResolvedAsOf.UTC()
		o.ResolvedAt, o.ResolvedAsOf = &t, &d
	}
	return o
}

func newAlertsCmd() *cobra.Command {
	var (
		path, format, watch, since string
		open                       bool
	)
	cmd := &cobra.Command{
		Use:   "alerts [--config FILE] [--watch NAME] [--open]",
		Short: "list open and recent alerts",
		Long: `alerts lists the alerts in the state store, ordered by the data time that
opened them (as_of): the open ones and those resolved within --since (default
30 days; "all" for every alert). rule is one of level, trend, jump (the three
faces of one near dependency: one alert), exact, constant, broken (an expected
dependency that stopped holding), blind; severity is warning or critical.
Times are data times: onset is since when the cause holds, as_of the window
end that opened the alert, resolved_as_of the one that resolved it.`,
		Args: noArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			if format != "text" && format != "json" {
				return usagef("--format %q: want text or json", format)
			}
			var from time.Time
			if since != "all" {
				d, err := config.ParseDuration(since)
				if err != nil {
					return usagef("--since: %v", err)
				}
				from = time.Now().Add(-d)
			}
			return runAlerts(cmd, cmd.OutOrStdout(), path, agent.AlertQuery{Watch: watch, OpenOnly: open, Since: from}, format)
		},
	}
	addConfigFlag(cmd, &path)
	cmd.Flags().StringVar(&format, "format", "text", "output format: text or json")
	cmd.Flags().StringVar(&watch, "watch", "", "only this watch")
	cmd.Flags().BoolVar(&open, "open", false, "only alerts that are not resolved")
	cmd.Flags().StringVar(&since, "since", "30d", `resolved alerts this recent (e.g. 7d, 12h), or "all"`)
	cmd.AddCommand(newAlertsAckCmd())
	return cmd
}

func runAlerts(cmd *cobra.Command, stdout io.Writer, path string, q agent.AlertQuery, format string) error {
	c, err := loadStoreConfig(path)
	if err != nil {
		return err
	}
	if q.Watch != "" && c.Watch(q.Watch) == nil {
		return usagef("no watch %q in the configuration", q.Watch)
	}
	st, err := openStore(cmd.Context(), c, false, nil)
	if err != nil {
		return err
	}
	defer st.Close()
	as, err := st.Alerts(cmd.Context(), q)
	if err != nil {
		return err
	}
	out := make([]alertOutput, 0, len(as))
	for _, a := range as {
		out = append(out, toAlertOutput(a))
	}
	if format == "json" {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(out)
	}
	if len(out) == 0 {
		fmt.Fprintln(stdout, "no alerts")
		return nil
	}
	for _, a := range out {
		state := "open"
		if a.UpdatedAsOf.After(a.AsOf) {
			// The message speaks of the latest window, not of the one
			// that raised the alert.
			state = "open, updated on data through " + connectors.DataThrough(a.UpdatedAsOf)
		}
		if a.ResolvedAsOf != nil {
			state = "resolved, data through " + connectors.DataThrough(*a.ResolvedAsOf)
		}
		seg := ""
		if a.segment != connectors.WholeTable {
			seg = "/" + connectors.SegmentLabel(a.segment)
		}
		fmt.Fprintf(stdout, "%s  %-8s %-8s %s%s  since %s, data through %s  %s\n    %s\n", a.ID, a.Severity, a.Rule, termSafe(a.Watch), termSafe(seg),
			dataDay(a.Onset), connectors.DataThrough(a.AsOf), state, termSafe(a.Message))
		if len(a.Columns) > 0 {
			fmt.Fprintf(stdout, "    columns: %s\n", termSafe(strings.Join(a.Columns, ", ")))
		}
		if a.Remedy != "" {
			fmt.Fprintf(stdout, "    what to do: %s\n", termSafe(a.Remedy))
		}
		if a.Acknowledged != nil {
			fmt.Fprintf(stdout, "    %s\n", ackLine(a.Acknowledged, time.Now()))
		}
	}
	return nil
}

// dataDay writes a bucket's start (an alert's onset) as the day it is, or
// to the minute when it is not a midnight: the same day the window whose
// data run through it is dated by.
func dataDay(t time.Time) string {
	t = t.UTC()
	if t.Equal(t.Truncate(24 * time.Hour)) {
		return t.Format(time.DateOnly)
	}
	return t.Format("2006-01-02 15:04 UTC")
}
