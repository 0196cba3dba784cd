// Command plumb watches the numeric feature columns of PostgreSQL and SQLite
// tables for multicollinearity and for drift toward it.
package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"os"
	"os/signal"
	"strings"
	"syscall"

	"github.com/spf13/cobra"

	_ "plumb/connectors/postgres"
	_ "plumb/connectors/sqlite"
)

// Exit codes, the same for every command. plumb check adds 1 for a watch
// at or above its gate (see check.go).
const (
	exitError    = 2  // the job could not be done: bad data, unreachable source, …
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
		fmt.Fprintln(stderr, "plumb --help lists the commands; plumb COMMAND --help explains one.")
		return exitUsage
	}
	return exitError
}

// Command groups of plumb --help, by what the user is doing.
var commandGroups = []*cobra.Group{
	{ID: "once", Title: "look once"},
	{ID: "watch", Title: "watch"},
	{ID: "record", Title: "read the record"},
	{ID: "upkeep", Title: "upkeep"},
}

func newRoot() *cobra.Command {
	var logFormat string
	root := &cobra.Command{
		Use:   "plumb COMMAND [flags]",
		Short: "watch feature tables for multicollinearity and drift toward it",
		Long: `plumb reads the numeric and categorical feature columns of PostgreSQL and
SQLite tables without loading them into memory and reports how redundant they
are: variance inflation factors (VIF, and generalized VIFs for categorical
columns), condition indices with variance-decomposition proportions, exact
linear dependencies written as equations and in words, and, with a target, how
much each coefficient's variance is inflated and why.

It only reads: every statement runs in a read-only transaction.

Diagnostics describe the data, not causality. Dropping a relevant column trades
variance for omitted-variable bias; where results feed decisions about people,
defer to the model's governance.`,
		Version:       versionLine(),
		Args:          cobra.ArbitraryArgs,
		SilenceUsage:  true,
		SilenceErrors: true,
		RunE: func(cmd *cobra.Command, args []string) error {
			if len(args) == 0 {
				return cmd.Help()
			}
			return unknownCommand(cmd, args[0])
		},
	}
	root.SetVersionTemplate("{{.Version}}\n")
	root.CompletionOptions.HiddenDefaultCmd = true
	root.SetFlagErrorFunc(func(c *cobra.Command, err error) error {
		// "plumb scna --db …": the flag belongs to the misspelt command.
		if !c.HasParent() && c.Flags().NArg() > 0 {
			return unknownCommand(c, c.Flags().Arg(0))
		}
		return usageError{err}
	})
	root.PersistentFlags().StringVar(&logFormat, "log-format", "json", "log lines on stderr as json or text")
	root.AddGroup(commandGroups...)
	for _, c := range []struct {
		group string
		cmd   *cobra.Command
	}{
		{"once", newScanCmd()},
		{"once", newDemoCmd()},
		{"watch", newCheckCmd()},
		{"watch", newAgentCmd()},
		{"watch", newBackfillCmd()},
		{"record", newHistoryCmd()},
		{"record", newAlertsCmd()},
		{"record", newServeCmd()},
		{"upkeep", newConfigCmd()},
		{"upkeep", newMigrateCmd()},
		{"upkeep", newVersionCmd()},
	} {
		c.cmd.GroupID = c.group
		root.AddCommand(c.cmd)
	}
	setHelp(root)
	return root
}

// unknownCommand is the usage error for a command name plumb does not
// know, naming the nearest ones it does (by edit distance).
func unknownCommand(parent *cobra.Command, name string) error {
	var names []string
	best := -1
	for _, c := range parent.Commands() {
		if !c.IsAvailableCommand() {
			continue
		}
		switch d := editDistance(name, c.Name()); {
		case best < 0 || d < best:
			best, names = d, []string{c.Name()}
		case d == best:
			names = append(names, c.Name())
		}
	}
	msg := fmt.Sprintf("%q is not a command of %s", name, parent.CommandPath())
	if len(names) > 0 {
		msg += fmt.Sprintf("; the nearest is %s", strings.Join(names, " or "))
	}
	return usageError{errors.New(msg)}
}

// editDistance is the Levenshtein distance between a and b, case folded.
func editDistance(a, b string) int {
	ra, rb := []rune(strings.ToLower(a)), []rune(strings.ToLower(b))
	prev := make([]int, len(rb)+1)
	cur := make([]int, len(rb)+1)
	for j := range prev {
		prev[j] = j
	}
	for i := 1; i <= len(ra); i++ {
		cur[0] = i
		for j := 1; j <= len(rb); j++ {
			cost := 1
			if ra[i-1] == rb[j-1] {
				cost = 0
			}
			cur[j] = min(prev[j]+1, cur[j-1]+1, prev[j-1]+cost)
		}
		prev, cur = cur, prev
	}
	return prev[len(rb)]
}

// commandLogger is the logger of a command: --log-format on stderr.
func commandLogger(cmd *cobra.Command, level slog.Level) (*slog.Logger, error) {
	format, err := cmd.Flags().GetString("log-format")
	if err != nil {
		format = "json"
	}
	return newLogger(cmd.ErrOrStderr(), format, level)
}
