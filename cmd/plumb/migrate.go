package main

import (
	"fmt"
	"io"

	"github.com/spf13/cobra"

	"plumb/agent/sqlstore"
	"plumb/connectors"
	"plumb/migrations"
)

func newMigrateCmd() *cobra.Command {
	var path string
	cmd := &cobra.Command{
		Use:   "migrate [--config FILE]",
		Short: "create or upgrade the state store's schema",
		Long: `migrate applies the state store's pending schema migrations (the agent, check and
backfill also do this at start). A store migrated by a newer plumb is refused
and left untouched. On SQLite, migrate from one process at a time.`,
		Args: noArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			return runMigrate(cmd, path, cmd.OutOrStdout())
		},
	}
	addConfigFlag(cmd, &path)
	return cmd
}

func runMigrate(cmd *cobra.Command, path string, stdout io.Writer) error {
	c, err := loadStoreConfig(path)
	if err != nil {
		return err
	}
	db, dialect, _, err := sqlstore.OpenDB(c.StoreURL())
	if err != nil {
		return err
	}
	defer db.Close()
	applied, err := migrations.Up(cmd.Context(), dialect, db, nil)
	if err != nil {
		return fmt.Errorf("state store %s: %w", connectors.Redact(c.Store), err)
	}
	if len(applied) == 0 {
		fmt.Fprintf(stdout, "state store %s is up to date (schema version %d)\n", connectors.Redact(c.Store), migrations.Latest(dialect))
		return nil
	}
	fmt.Fprintf(stdout, "state store %s: applied schema version(s) %v; now at %d\n", connectors.Redact(c.Store), applied, applied[len(applied)-1])
	return nil
}
