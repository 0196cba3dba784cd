package main

import (
	"fmt"
	"os"
	"os/user"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"plumb/agent"
	"plumb/agent/config"
)

func newAlertsAckCmd() *cobra.Command {
	var path, forDur, note string
	cmd := &cobra.Command{
		Use:   "ack ID [--config FILE] [--for DURATION] [--note TEXT]",
		Short: "acknowledge an open alert, optionally for a while",
		Long: `ack records that you know about an open alert: who (your user name), when,
for how long (--for, e.g. 12h, 3d; without it, until the alert resolves or
escalates) and why (--note). While acknowledged the alert is not notified
again; it is when it escalates past the severity you acknowledged, and the
first run after the snooze ends notifies once more if it is still open. Its
resolution is notified as always. ID is the id plumb alerts prints, or a
unique beginning of it. A running agent keeps the acknowledgement: ack does
not need the store to itself.`,
		Example: `  plumb alerts ack 3f9c2a71d0 --config plumb.yaml --for 3d --note "meter rollout in the harbour district"`,
		Args:    oneArg("ID"),
		RunE: func(cmd *cobra.Command, args []string) error {
			ack := agent.Ack{By: osUser(), At: time.Now(), Note: strings.TrimSpace(note)}
			if forDur != "" {
				d, err := config.ParseDuration(forDur)
				if err != nil || d <= 0 {
					return usagef("--for %q: want a positive duration such as 12h or 3d", forDur)
				}
				ack.Until = ack.At.Add(d)
			}
			if len(ack.Note) > 1000 {
				return usagef("--note is %d characters; keep it under 1000", len(ack.Note))
			}
			c, err := loadStoreConfig(path)
			if err != nil {
				return err
			}
			st, err := openStore(cmd.Context(), c, false, nil)
			if err != nil {
				return err
			}
			defer st.Close()
			id, err := alertByPrefix(cmd, st, args[0])
			if err != nil {
				return err
			}
			a, err := st.Acknowledge(cmd.Context(), id, ack)
			if err != nil {
				return err
			}
			fmt.Fprintf(cmd.OutOrStdout(), "%s  %s (%s, %s)\n    %s\n", a.ID, agent.Headline(&a, ""), a.Severity, a.Rule,
				ackLine(a.Ack, ack.At))
			return nil
		},
	}
	addConfigFlag(cmd, &path)
	cmd.Flags().StringVar(&forDur, "for", "", "snooze for this long (e.g. 12h, 3d); default: until it resolves or escalates")
	cmd.Flags().StringVar(&note, "note", "", "why, for whoever reads the alert next")
	return cmd
}

// alertByPrefix returns the id of the one alert whose id starts with p.
func alertByPrefix(cmd *cobra.Command, st agent.Store, p string) (string, error) {
	as, err := st.Alerts(cmd.Context(), agent.AlertQuery{})
	if err != nil {
		return "", err
	}
	var ids []string
	for _, a := range as {
		if a.ID == p {
			return p, nil
		}
		if strings.HasPrefix(a.ID, p) {
			ids = append(ids, a.ID)
		}
	}
	switch {
	case len(ids) == 1:
		return ids[0], nil
	case len(ids) > 1:
		return "", usagef("alert id %q is ambiguous: %s", p, strings.Join(ids, ", "))
	}
	return "", fmt.Errorf("alert %s: %w; plumb alerts --open lists the open ones", p, agent.ErrNoAlert)
}

// osUser names who runs the command.
func osUser() string {
	if u, err := user.Current(); err == nil && u.Username != "" {
		return u.Username
	}
	if u := os.Getenv("USER"); u != "" {
		return u
	}
	return "unknown user"
}

// ackLine says who acknowledged an alert, when, until when and why.
func ackLine(a *agent.Ack, now time.Time) string {
	if a == nil {
		return ""
	}
	s := fmt.Sprintf("acknowledged by %s on %s (at %s)", a.By, a.At.UTC().Format("2006-01-02 15:04 UTC"), a.Severity)
	switch {
	case a.Until.IsZero():
		s += ", until it resolves or escalates"
	case !a.EndedAt.IsZero() || !now.Before(a.Until):
		s += ", snooze ended " + a.Until.UTC().Format("2006-01-02 15:04 UTC")
	default:
		s += ", snoozed until " + a.Until.UTC().Format("2006-01-02 15:04 UTC")
	}
	if a.Note != "" {
		s += ": " + a.Note
	}
	return s
}
