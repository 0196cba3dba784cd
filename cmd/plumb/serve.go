package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"os"

	"github.com/spf13/cobra"

	"plumb/agent"
	"plumb/agent/config"
	"plumb/agent/web"
	"plumb/agent/web/storeview"
)

func newServeCmd() *cobra.Command {
	var path, listen string
	cmd := &cobra.Command{
		Use:   "serve [--config FILE] [--listen ADDR]",
		Short: "serve the dashboard, JSON API and /metrics for a state store (no schedules)",
		Long: `serve reads the state store named by the configuration and serves, until
interrupted: the dashboard (an overview of every watch and a page per watch with
its timelines, VIF bars, correlation heat map, dependencies and run log), the
JSON API under /api/, /healthz and /metrics in the Prometheus text format.
It runs no watch; its one write is an owner's acknowledgement of an alert, from
the form on the watch page.

The server listens on ` + web.DefaultListen + ` unless told otherwise. Any address that
is not loopback needs a bearer token in $` + web.TokenEnv + `: requests must send
"Authorization: Bearer TOKEN" (browsers log in once at /login).`,
		Example: `  plumb serve --config plumb.yaml
  PLUMB_HTTP_TOKEN=$(cat /etc/plumb/token) plumb serve --config plumb.yaml --listen 0.0.0.0:7586`,
		Args: noArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			log, err := commandLogger(cmd, slog.LevelInfo)
			if err != nil {
				return err
			}
			c, err := loadStoreConfig(path)
			if err != nil {
				return err
			}
			st, err := openStore(cmd.Context(), c, false, log)
			if err != nil {
				return err
			}
			defer st.Close()
			return serveDashboard(cmd.Context(), cmd.OutOrStdout(), st, c, listen, log)
		},
	}
	addConfigFlag(cmd, &path)
	cmd.Flags().StringVar(&listen, "listen", web.DefaultListen, "address to listen on (host:port)")
	return cmd
}

// serveDashboard serves the dashboard of st until ctx is done, printing
// the address it listens on.
func serveDashboard(ctx context.Context, stdout io.Writer, st agent.Store, c *config.Config, listen string, log *slog.Logger) error {
	wait, addr, err := startDashboard(ctx, st, c, listen, log)
	if err != nil {
		return err
	}
	fmt.Fprintf(stdout, "dashboard on http://%s/ (metrics at /metrics); interrupt to stop\n", addr)
	return wait()
}

// startDashboard listens at once (so that a taken port fails the start)
// and serves in the background until ctx is done; wait returns the
// server's error.
func startDashboard(ctx context.Context, st agent.Store, c *config.Config, listen string, log *slog.Logger) (wait func() error, addr string, err error) {
	srv, err := web.New(web.Options{
		View:   storeview.New(st, c),
		Listen: listen,
		Token:  os.Getenv(web.TokenEnv),
		Logger: log.With("component", "http"),
	})
	if errors.Is(err, web.ErrTokenRequired) || errors.Is(err, web.ErrWeakToken) {
		return nil, "", usageError{err}
	}
	if err != nil {
		return nil, "", err
	}
	ln, err := net.Listen("tcp", listen)
	if err != nil {
		return nil, "", fmt.Errorf("dashboard: cannot listen on %s: %w", listen, err)
	}
	log.Info("dashboard listening", "addr", ln.Addr().String())
	done := make(chan error, 1)
	go func() { done <- srv.Serve(ctx, ln) }()
	return func() error { return <-done }, ln.Addr().String(), nil
}
