package main

import (
	"fmt"
	"io"
	"os"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"plumb/agent/config"
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
		Use:   "config",
		Short: "work with the agent's configuration file",
		Args:  cobra.ArbitraryArgs,
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
	var path string
	cmd := &cobra.Command{
		Use:   "check [--config FILE]",
		Short: "validate the configuration file and print what it would run",
		Long: `check reads the configuration file, rejects unknown keys, values of the wrong
type and inconsistent settings (each with its line), makes sure every secret it
names (environment variables, secret files) can be read, and prints the store,
sources, notifiers and watches with their next scheduled runs. Secrets are
never printed; passwords in URLs are shown as xxxxx.

The exit status is 0 for a usable file and 3 otherwise.`,
		Example: `  plumb config check --config /etc/plumb/plumb.yaml`,
		Args:    noArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			return runConfigCheck(cmd.OutOrStdout(), path, time.Now())
		},
	}
	addConfigFlag(cmd, &path)
	return cmd
}

func runConfigCheck(stdout io.Writer, path string, now time.Time) error {
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
	fmt.Fprintf(stdout, "%s: OK, %d watch(es)\n", path, len(c.Watches))
	return nil
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
