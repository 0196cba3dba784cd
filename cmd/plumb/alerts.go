package main

import (
	"encoding/json"
	"fmt"
	"io"
	"time"

	"github.com/spf13/cobra"

	"plumb/agent"
	"plumb/agent/config"
)

// alertOutput is one alert in `plumb alerts --format json` (an outside
// contract: keep the names).
type alertOutput struct {
	ID         string     `json:"id"`
	Watch      string     `json:"watch"`
	Segment    string     `json:"segment,omitempty"`
	Rule       string     `json:"rule"`
	Subject    string     `json:"subject,omitempty"`
	Severity   string     `json:"severity"`
	AsOf       time.Time  `json:"as_of"`
	OpenedAt   time.Time  `json:"opened_at"`
	ResolvedAt *time.Time `json:"resolved_at"`
	Message    string     `json:"message"`
}

func toAlertOutput(a agent.Alert) alertOutput {
	o := alertOutput{ID: a.ID, Watch: a.Watch, Segment: a.Segment, Rule: string(a.Rule), Subject: a.Subject,
		Severity: string(a.Severity), AsOf: a.AsOf.UTC(), OpenedAt: a.OpenedAt.UTC(), Message: a.Message}
	if !a.Open() {
		t := a.ResolvedAt.UTC()
		o.ResolvedAt = &t
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
		Short: "List open and recent alerts",
		Long: `alerts lists the alerts in the state store, ordered by the data time that
opened them (as_of): the open ones and those resolved within --since (default
30 days; "all" for every alert). rule is one of level, trend, exact, constant,
jump, blind; severity is warning or critical.`,
		Args: cobra.NoArgs,
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
		state := "OPEN"
		if a.ResolvedAt != nil {
			state = "resolved " + a.ResolvedAt.Format("2006-01-02 15:04")
		}
		seg := ""
		if a.Segment != "" {
			seg = "/" + a.Segment
		}
		fmt.Fprintf(stdout, "%s  %-8s %-8s %s%s  as of %s  %s\n    %s\n", a.ID, a.Severity, a.Rule, a.Watch, seg,
			a.AsOf.Format("2006-01-02 15:04"), state, a.Message)
	}
	return nil
}
