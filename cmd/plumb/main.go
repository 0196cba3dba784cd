// Command plumb watches the numeric feature columns of PostgreSQL and SQLite
// tables for multicollinearity and for drift toward it.
package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/signal"
	"syscall"

	"github.com/spf13/cobra"

	_ "plumb/connectors/postgres"
	_ "plumb/connectors/sqlite"
)

// Exit codes. 0, 1 and 2 are reserved for verdicts (ok, warning,
// critical) of the commands that judge; errors use the codes below.
const (
	exitError    = 3  // the job could not be done: bad data, unreachable source, …
	exitUsage    = 64 // the command line is wrong
	exitInternal = 70 // a bug in plumb
)

// usageError marks errors in the command line itself.
type usageError struct{ err error }

func (e usageError) Error() string { return e.err.Error() }
func (e usageError) Unwrap() error { return e.err }

func usagef(format string, args ...any) error {
	return usageError{fmt.Errorf(format, args...)}
}

// exitCoder lets a command choose its exit status (verdict commands).
type exitCoder interface{ ExitCode() int }

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	os.Exit(run(ctx, os.Args[1:], os.Stdout, os.Stderr))
}

// run executes the command line args and returns the exit status; errors
// are printed to stderr as one line.
func run(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	return execute(ctx, newRoot(), args, stdout, stderr)
}

// execute runs root with args. A panic that reaches it (a run's panics are
// failed runs before this) is a bug in plumb: the operator gets one line
// and exit 70, never a stack trace.
func execute(ctx context.Context, root *cobra.Command, args []string, stdout, stderr io.Writer) (code int) {
	defer func() {
		// A panic is a bug in plumb; the operator gets one line, the
		// developer the stack with PLUMB_DEBUG=1.
		if p := recover(); p != nil {
			if os.Getenv("PLUMB_DEBUG") != "" {
				panic(p)
			}
			fmt.Fprintf(stderr, "plumb: internal error: %v (run with PLUMB_DEBUG=1 for details and report it)\n", p)
			code = exitInternal
		}
	}()
	root.SetArgs(args)
	root.SetOut(stdout)
	root.SetErr(stderr)
	err := root.ExecuteContext(ctx)
	if err == nil {
		return 0
	}
	var ec exitCoder
	if errors.As(err, &ec) {
		if msg := err.Error(); msg != "" {
			fmt.Fprintln(stderr, "plumb:", termSafeLines(msg))
		}
		return ec.ExitCode()
	}
	fmt.Fprintln(stderr, "plumb:", termSafeLines(err.Error()))
	var ue usageError
	if errors.As(err, &ue) {
		fmt.Fprintln(stderr, "Run 'plumb --help' for usage.")
		return exitUsage
	}
	return exitError
}

func newRoot() *cobra.Command {
	root := &cobra.Command{
		Use:   "plumb",
		Short: "Watch feature tables for multicollinearity and drift toward it",
		Long: `plumb reads the numeric feature columns of PostgreSQL and SQLite tables without
loading them into memory and reports how redundant they are: variance inflation
factors (VIF), condition indices with variance-decomposition proportions, exact
linear dependencies written as equations, and, with a target, how much each
coefficient's variance is inflated and why.

It only reads: every statement runs in a read-only transaction.

Diagnostics describe the data, not causality. Dropping a relevant column trades
variance for omitted-variable bias; where results feed decisions about people,
defer to the model's governance.`,
		SilenceUsage:  true,
		SilenceErrors: true,
	}
	root.SetFlagErrorFunc(func(c *cobra.Command, err error) error {
		return usageError{err}
	})
	root.AddCommand(newScanCmd())
	root.AddCommand(newConfigCmd())
	root.AddCommand(newMigrateCmd())
	root.AddCommand(newCheckCmd())
	root.AddCommand(newHistoryCmd())
	root.AddCommand(newAlertsCmd())
	root.AddCommand(newBackfillCmd())
	root.AddCommand(newAgentCmd())
	root.AddCommand(newServeCmd())
	root.AddCommand(newDemoCmd())
	return root
}
