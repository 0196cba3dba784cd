package main

import (
	"fmt"
	"log/slog"
	"time"

	"github.com/spf13/cobra"

	"plumb/agent"
)

func newBackfillCmd() *cobra.Command {
	var (
		path, from string
		notifyAll  bool
	)
	cmd := &cobra.Command{
		Use:   "backfill WATCH [--from DATE] [--config FILE]",
		Short: "rebuild a watch's history from the source (all of it, or from a date)",
		Long: `backfill rescans the watch's buckets from --from (or the whole table), rewrites
them and every point after it, and replays the alert rules over the whole
history, so it records the same alerts, with the same ids and data times, as
living through those days would have. It delivers none of them unless given
--notify; alerts still open when it ends are delivered once by the next
live run (plumb check or the agent). It takes the store's lock.`,
		Example: `  plumb backfill district_daily
  plumb backfill district_daily --from 2026-07-01`,
		Args: oneArg("WATCH"),
		RunE: func(cmd *cobra.Command, args []string) error {
			var t time.Time
			if from != "" {
				var err error
				if t, err = parseDate(from); err != nil {
					return err
				}
			}
			log, err := commandLogger(cmd, slog.LevelWarn)
			if err != nil {
				return err
			}
			return runBackfill(cmd, path, args[0], t, notifyAll, log)
		},
	}
	addConfigFlag(cmd, &path)
	cmd.Flags().StringVar(&from, "from", "", "first day to rescan, YYYY-MM-DD or RFC 3339 (default: everything)")
	cmd.Flags().BoolVar(&notifyAll, "notify", false, "deliver the events the backfill records, as they happened")
	return cmd
}

func parseDate(s string) (time.Time, error) {
	for _, layout := range []string{time.DateOnly, time.RFC3339, "2006-01-02T15:04", "2006-01-02 15:04"} {
		if t, err := time.Parse(layout, s); err == nil {
			return t, nil
		}
	}
	return time.Time{}, usagef("--from %q: want a date such as 2026-07-01 or an RFC 3339 time", s)
}

func runBackfill(cmd *cobra.Command, path, name string, from time.Time, notifyAll bool, log *slog.Logger) error {
	ctx := cmd.Context()
	c, err := loadConfig(path, true)
	if err != nil {
		return err
	}
	ws, err := watchesToRun(c, name)
	if err != nil {
		return err
	}
	w := ws[0]
	if w.Bucket == "" && !from.IsZero() {
		return usagef("watch %q has no time buckets: --from does not apply (a backfill re-reads the whole table)", name)
	}
	st, err := openStore(ctx, c, true, nil)
	if err != nil {
		return err
	}
	defer st.Close()
	release, err := lockStore(ctx, st, "plumb backfill")
	if err != nil {
		return err
	}
	defer release()
	r := newRunner(st, c, log)
	out, err := r.Run(ctx, w, agent.RunOptions{Kind: agent.RunBackfill, From: from, Notify: notifyAll})
	if err != nil {
		return err
	}
	if out.Err != nil {
		return out.Err
	}
	if notifyAll {
		d := &agent.Deliverer{Store: st, Notifiers: buildNotifiers(c, log), Logger: log}
		if _, err := d.Once(ctx); err != nil {
			log.Warn("delivering notifications", "err", err)
		}
	}
	all, err := st.Alerts(ctx, agent.AlertQuery{Watch: name})
	if err != nil {
		return err
	}
	fmt.Fprintf(cmd.OutOrStdout(), "watch %s: read %d rows, %d buckets, %d points; %d alerts in its history, %d open\n",
		name, out.Run.RowsRead, out.Run.BucketsScanned, out.Run.Points, len(all), len(out.Open))
	return nil
}
