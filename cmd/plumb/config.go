package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"maps"
	"os"
	"slices"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"plumb/agent/config"
	"plumb/agent/sqlstore"
	"plumb/connectors"
	"plumb/migrations"
)

// defaultConfig is the file read when --config is not given.
const defaultConfig = "plumb.yaml"

// addConfigFlag gives a command the --config flag every agent command takes.
func addConfigFlag(cmd *cobra.Command, path *string) {
	cmd.Flags().StringVar(path, "config", defaultConfig, "configuration file (YAML)")
}

// loadConfig reads, validates and, when resolve is set, resolves the
// secrets of the configuration file.
func loadConfig(path string, resolve bool) (*config.Config, error) {
	c, err := config.Load(path)
	if err != nil {
		return nil, err
	}
	if resolve {
		if err := c.Resolve(config.Resolver{}); err != nil {
			return nil, fmt.Errorf("config %s: %w", path, err)
		}
	}
	return c, nil
}

func newConfigCmd() *cobra.Command {
	cmd := &cobra.Command{
		Use:         "config",
		Annotations: map[string]string{"group": "only"},
		Short:       "work with the agent's configuration file",
		Args:        cobra.ArbitraryArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			if len(args) > 0 {
				return unknownCommand(cmd, args[0])
			}
			return usagef("config needs a subcommand: check")
		},
	}
	cmd.AddCommand(newConfigCheckCmd())
	return cmd
}

func newConfigCheckCmd() *cobra.Command {
	var (
		path    string
		connect bool
	)
	cmd := &cobra.Command{
		Use:   "check [--config FILE] [--connect]",
		Short: "validate the configuration file and print what it would run",
		Long: `check reads the configuration file and reports every problem in it at once,
each with its line: unknown keys, values of the wrong type, inconsistent
settings, secrets (environment variables, secret files) that cannot be read.
For a usable file it prints the store, sources, notifiers and watches with
their next scheduled runs. Secrets are never printed; passwords in URLs are
shown as xxxxx.

With --connect it also opens the state store and every source (read-only, the
store without migrating it) and the table or query of every watch, and says
which of them answer.

The exit status is 0 for a usable file (whose connections all answer, with
--connect) and 2 otherwise.`,
		Example: `  plumb config check --config /etc/plumb/plumb.yaml
  plumb config check --config /etc/plumb/plumb.yaml --connect`,
		Args: noArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			return runConfigCheck(cmd.Context(), cmd.OutOrStdout(), path, connect, time.Now())
		},
	}
	addConfigFlag(cmd, &path)
	cmd.Flags().BoolVar(&connect, "connect", false, "also open the store, every source and every watch's table, and say which answer")
	return cmd
}

func runConfigCheck(ctx context.Context, stdout io.Writer, path string, connect bool, now time.Time) error {
	c, err := loadConfig(path, false)
	if err != nil {
		return err
	}
	var desc strings.Builder
	c.Describe(&desc, now, os.LookupEnv)
	io.WriteString(stdout, termSafeLines(desc.String()))
	if err := c.Resolve(config.Resolver{}); err != nil {
		return fmt.Errorf("config %s: %w", path, err)
	}
	if connect {
		if failed := checkConnections(ctx, stdout, c); failed > 0 {
			return fmt.Errorf("config %s: %d of its connections did not answer", path, failed)
		}
	}
	fmt.Fprintf(stdout, "%s: usable, %d watch(es)\n", path, len(c.Watches))
	return nil
}

// connectTimeout bounds each connection attempt of config check --connect.
const connectTimeout = 15 * time.Second

// checkConnections opens the store, each source and each watch's table or
// query, prints one line for each saying whether it answered, and returns
// how many did not.
func checkConnections(ctx context.Context, w io.Writer, c *config.Config) (failed int) {
	say := func(indent, what string, err error, ok string) {
		if err != nil {
			failed++
			fmt.Fprintf(w, "%s%s: no answer: %v\n", indent, what, err)
			return
		}
		fmt.Fprintf(w, "%s%s: %s\n", indent, what, ok)
	}
	fmt.Fprintln(w, "connections:")
	ok, err := checkStore(ctx, c)
	say("  ", "store "+connectors.Redact(c.Store), err, ok)
	for _, name := range slices.Sorted(maps.Keys(c.Sources)) {
		tctx, cancel := context.WithTimeout(ctx, connectTimeout)
		src, err := connectors.Open(tctx, c.SourceURL(name), connectors.Options{StatementTimeout: connectTimeout})
		say("  ", fmt.Sprintf("source %s %s", name, connectors.Redact(c.Sources[name])), err, "answers")
		if err == nil {
			for _, wa := range c.Watches {
				if wa.Source != name {
					continue
				}
				what := "table " + wa.Table
				if wa.Query != "" {
					what = "its query"
				}
				cols, err := src.Describe(tctx, connectors.Request{Table: wa.Table, Query: wa.Query, Location: wa.Location})
				say("    ", "watch "+wa.Name, err, fmt.Sprintf("%s answers with %d columns", what, len(cols)))
			}
			src.Close()
		}
		cancel()
	}
	return failed
}

// checkStore opens the state store without creating or migrating it and
// says what schema it has.
func checkStore(ctx context.Context, c *config.Config) (string, error) {
	url := c.StoreURL()
	if p, ok := strings.CutPrefix(url, "sqlite:"); ok {
		if _, err := os.Stat(strings.TrimPrefix(p, "//")); errors.Is(err, fs.ErrNotExist) {
			return "not created yet (plumb migrate, check or the agent creates it)", nil
		}
	}
	db, dialect, _, err := sqlstore.OpenDB(url)
	if err != nil {
		return "", err
	}
	defer db.Close()
	ctx, cancel := context.WithTimeout(ctx, connectTimeout)
	defer cancel()
	if err := db.PingContext(ctx); err != nil {
		return "", err
	}
	current, latest, err := migrations.Version(ctx, dialect, db)
	if err != nil {
		return "", err
	}
	switch {
	case current == latest:
		return fmt.Sprintf("answers, schema version %d (up to date)", current), nil
	case current < latest:
		return fmt.Sprintf("answers, schema version %d of %d (plumb migrate brings it up to date)", current, latest), nil
	}
	return "", fmt.Errorf("schema version %d is newer than this plumb's %d", current, latest)
}

// loadStoreConfig reads the configuration for a command that only needs
// the state store (history, alerts, migrate): notifier secrets need not
// be set.
func loadStoreConfig(path string) (*config.Config, error) {
	c, err := config.Load(path)
	if err != nil {
		return nil, err
	}
	if err := c.ResolveStore(config.Resolver{}); err != nil {
		return nil, fmt.Errorf("config %s: %w", path, err)
	}
	return c, nil
}
