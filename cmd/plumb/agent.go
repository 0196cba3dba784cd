package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"os"
	"time"

	"github.com/spf13/cobra"

	"plumb/agent"
	"plumb/agent/config"
	"plumb/agent/notify"
	"plumb/agent/sqlstore"
	"plumb/agent/web"
	"plumb/connectors"
)

// Shared by the agent's commands: opening the store, building notifiers,
// the runner and the deliverer from the configuration.

// openStore opens the configured state store, migrating it when migrate
// is set.
func openStore(ctx context.Context, c *config.Config, migrate bool, log *slog.Logger) (*sqlstore.Store, error) {
	opt := sqlstore.Options{Migrate: migrate}
	if log != nil {
		opt.Logger = log.With("component", "migrations")
		opt.LockLogger = log.With("component", "store lock")
	}
	return sqlstore.Open(ctx, c.StoreURL(), opt)
}

// newRunner builds the runner of check, backfill and the agent.
func newRunner(st agent.Store, c *config.Config, log *slog.Logger) *agent.Runner {
	r := &agent.Runner{Store: st, Config: c, Logger: log}
	if testOpenSource != nil {
		r.OpenSource = testOpenSource
	}
	return r
}

// testOpenSource, set by tests only, opens the runners' sources.
var testOpenSource func(ctx context.Context, url string) (connectors.Source, error)

// lockStore makes this process the store's writer or explains who is.
func lockStore(ctx context.Context, s agent.Store, holder string) (func() error, error) {
	release, err := s.Lock(ctx, holder)
	if errors.Is(err, agent.ErrLocked) {
		return nil, fmt.Errorf("%w (one agent per store; plumb check and backfill need it too)", err)
	}
	return release, err
}

// buildNotifiers turns the configured notifiers into delivery channels.
func buildNotifiers(c *config.Config, log *slog.Logger) map[string]agent.NotifierConfig {
	out := map[string]agent.NotifierConfig{}
	for name, n := range c.Notifiers {
		nc := agent.NotifierConfig{Timeout: n.Timeout.D(), MaxAge: n.MaxAge.D()}
		switch n.Kind() {
		case "webhook":
			nc.Notifier = &notify.Webhook{URL: n.Webhook, Secrets: n.Secrets()}
		case "log":
			nc.Notifier = &notify.Log{W: os.Stderr}
		case "smtp":
			s := n.SMTP
			nc.Notifier = &notify.SMTP{Addr: s.Addr, From: s.From, To: s.To, Username: s.Username,
				Password: s.Password.Reveal(), StartTLS: s.StartTLS == nil || *s.StartTLS}
		}
		out[name] = nc
	}
	return out
}

// newLogger returns the agent's logger: JSON or text on w.
func newLogger(w io.Writer, format string, level slog.Level) (*slog.Logger, error) {
	opts := &slog.HandlerOptions{Level: level}
	switch format {
	case "json":
		return slog.New(slog.NewJSONHandler(w, opts)), nil
	case "text":
		return slog.New(slog.NewTextHandler(w, opts)), nil
	}
	return nil, usagef("--log-format %q: want json or text", format)
}

func newAgentCmd() *cobra.Command {
	var (
		path    string
		listen  string
		grace   time.Duration
		jitter  time.Duration
		verbose bool
	)
	cmd := &cobra.Command{
		Use:   "agent [--config FILE]",
		Short: "run every watch on its schedule and deliver the alerts (daemon)",
		Long: `agent migrates the state store, takes its lock (one agent per store), and runs
each watch on its cron schedule: incremental runs that read the newest buckets again
(rescan) and the new ones, trend, jump and level rules with hysteresis, and notifications
through the configured webhooks, log and email, retried from the outbox until
they are acknowledged.

A watch that never ran, or whose last run is older than its previous tick,
runs at once. Runs of one watch never overlap; each starts up to --jitter after
its tick. On SIGTERM or SIGINT no new run starts; runs in flight get --grace to
finish and are then abandoned without writing anything.`,
		Example: `  PLUMB_WEBHOOK_SECRET=... plumb agent --config /etc/plumb/plumb.yaml`,
		Args:    noArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			level := slog.LevelInfo
			if verbose {
				level = slog.LevelDebug
			}
			log, err := commandLogger(cmd, level)
			if err != nil {
				return err
			}
			return runAgent(cmd.Context(), path, log, grace, jitter, listen)
		},
	}
	addConfigFlag(cmd, &path)
	cmd.Flags().DurationVar(&grace, "grace", 30*time.Second, "time runs in flight get to finish at shutdown")
	cmd.Flags().DurationVar(&jitter, "jitter", 10*time.Second, "most a run starts after its tick (0 for none)")
	cmd.Flags().BoolVarP(&verbose, "verbose", "v", false, "debug logging")
	cmd.Flags().StringVar(&listen, "listen", web.DefaultListen, `address of the dashboard and /metrics ("off" for none); not loopback needs $`+web.TokenEnv)
	return cmd
}

func runAgent(ctx context.Context, path string, log *slog.Logger, grace, jitter time.Duration, listen string) error {
	c, err := loadConfig(path, true)
	if err != nil {
		return err
	}
	// Open and lock with a context of their own: a signal during start-up
	// should still leave the store consistent.
	st, err := openStore(context.WithoutCancel(ctx), c, true, log)
	if err != nil {
		return err
	}
	defer st.Close()
	host, _ := os.Hostname()
	release, err := lockStore(ctx, st, fmt.Sprintf("plumb agent (%s)", host))
	if err != nil {
		return err
	}
	defer release()
	// A lock lost for good (another plumb holds the store now) stops the
	// agent: it may not write, and the other one runs the watches.
	ctx, stop := context.WithCancelCause(ctx)
	defer stop(nil)
	go func() {
		select {
		case <-st.LockLost():
			stop(st.LockErr())
		case <-ctx.Done():
		}
	}()
	if jitter == 0 {
		jitter = -1
	}
	d := &agent.Daemon{
		Runner:    newRunner(st, c, log.With("component", "runner")),
		Deliverer: &agent.Deliverer{Store: st, Notifiers: buildNotifiers(c, log), Logger: log.With("component", "delivery")},
		Watches:   c.Watches,
		Logger:    log.With("component", "scheduler"),
		Grace:     grace,
		Jitter:    jitter,
	}
	var waitHTTP func() error
	if listen != "off" {
		hctx, stopHTTP := context.WithCancel(ctx)
		defer stopHTTP()
		if waitHTTP, _, err = startDashboard(hctx, st, c, listen, log); err != nil {
			return err
		}
		defer func() { stopHTTP(); waitHTTP() }()
	}
	log.Info("agent started", "watches", len(c.Watches), "pid", os.Getpid())
	err = d.Run(ctx)
	if cause := context.Cause(ctx); err == nil && errors.Is(cause, agent.ErrLockLost) {
		log.Error("agent stopped: the state store's lock was lost", "err", cause)
		return cause
	}
	log.Info("agent stopped")
	return err
}
