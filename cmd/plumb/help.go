package main

import (
	"fmt"
	"io"
	"strings"

	"github.com/spf13/cobra"
	"github.com/spf13/pflag"
)

// plumb's help is its own: setHelp replaces the CLI library's help and
// usage text on every command with writeHelp.
func setHelp(root *cobra.Command) {
	root.SetHelpFunc(func(c *cobra.Command, _ []string) {
		writeHelp(c.OutOrStdout(), c)
	})
	root.SetUsageFunc(func(c *cobra.Command) error {
		writeHelp(c.OutOrStderr(), c)
		return nil
	})
	// The help and version flags in plumb's words.
	var walk func(c *cobra.Command)
	walk = func(c *cobra.Command) {
		c.InitDefaultHelpFlag()
		c.Flags().Lookup("help").Usage = "explain " + c.CommandPath()
		for _, sub := range c.Commands() {
			walk(sub)
		}
	}
	walk(root)
	root.InitDefaultVersionFlag()
	root.Flags().Lookup("version").Usage = "print plumb's version, commit and Go version"
	// `plumb help COMMAND` works like plumb COMMAND --help; the list does
	// not show it.
	root.SetHelpCommand(&cobra.Command{
		Use:    "help [COMMAND]",
		Short:  "explain a command (same as plumb COMMAND --help)",
		Hidden: true,
		Args:   cobra.ArbitraryArgs,
		RunE: func(c *cobra.Command, args []string) error {
			target, rest, err := root.Find(args)
			if err != nil || len(rest) > 0 {
				parent := target
				if parent == nil {
					parent = root
				}
				name := args[len(args)-1]
				if len(rest) > 0 {
					name = rest[0]
				}
				return unknownCommand(parent, name)
			}
			writeHelp(c.OutOrStdout(), target)
			return nil
		},
	})
}

// The three positional-argument rules plumb's commands use, as usage
// errors in plumb's words.
func noArgs(c *cobra.Command, args []string) error {
	if len(args) > 0 {
		return usagef("%s takes no arguments; got %q", c.CommandPath(), args[0])
	}
	return nil
}

func oneArg(what string) cobra.PositionalArgs {
	return func(c *cobra.Command, args []string) error {
		if len(args) != 1 {
			return usagef("%s needs one %s; got %d arguments", c.CommandPath(), what, len(args))
		}
		return nil
	}
}

func atMostOneArg(what string) cobra.PositionalArgs {
	return func(c *cobra.Command, args []string) error {
		if len(args) > 1 {
			return usagef("%s takes at most one %s; got %d arguments", c.CommandPath(), what, len(args))
		}
		return nil
	}
}

// writeHelp prints a command's help:
//
//	plumb scan: read a table once and report …
//
//	usage: plumb scan [--db URL] …
//
//	<long description>
//
//	commands, by what you are doing     (plumb itself)
//	examples
//	flags
//	flags of every command
func writeHelp(w io.Writer, c *cobra.Command) {
	var b strings.Builder
	if c.HasParent() {
		fmt.Fprintf(&b, "%s: %s\n\n", c.CommandPath(), c.Short)
	} else {
		fmt.Fprintf(&b, "plumb: %s\n\n", c.Short)
	}
	fmt.Fprintf(&b, "usage: %s\n", usageLine(c))
	if c.Long != "" {
		fmt.Fprintf(&b, "\n%s\n", strings.TrimRight(c.Long, "\n"))
	}
	if !c.HasParent() {
		for _, g := range c.Groups() {
			b.WriteString("\n" + g.Title + "\n")
			for _, sub := range c.Commands() {
				if sub.GroupID == g.ID && sub.IsAvailableCommand() {
					writeCommand(&b, sub, "")
				}
			}
		}
	} else if c.HasAvailableSubCommands() {
		b.WriteString("\ncommands\n")
		for _, sub := range c.Commands() {
			if sub.IsAvailableCommand() {
				writeCommand(&b, sub, "")
			}
		}
	}
	if c.Example != "" {
		fmt.Fprintf(&b, "\nexamples\n%s\n", strings.TrimRight(c.Example, "\n"))
	}
	if fs := c.LocalNonPersistentFlags(); fs.HasAvailableFlags() {
		b.WriteString("\nflags\n")
		writeFlags(&b, fs)
	}
	if fs := c.InheritedFlags(); c.HasParent() && fs.HasAvailableFlags() {
		b.WriteString("\nflags of every command\n")
		writeFlags(&b, fs)
	} else if !c.HasParent() {
		b.WriteString("\nflags of every command\n")
		writeFlags(&b, c.PersistentFlags())
	}
	if !c.HasParent() {
		b.WriteString(`
plumb COMMAND --help explains a command. Every command exits 0 when it did its
job, 2 when it could not (an unreadable source, an unusable configuration or
store), 64 for a wrong command line and 70 for a fault in plumb; plumb check
exits 1 when a watch is at or above its gate.
`)
	}
	io.WriteString(w, b.String())
}

// usageLine is the command's Use with its path in front.
func usageLine(c *cobra.Command) string {
	use := c.Use
	if c.HasParent() {
		use = c.Parent().CommandPath() + " " + use
	}
	return use
}

// writeCommand writes the lines of a command list for c: its name and
// summary (unless it only groups subcommands), then each subcommand's,
// named with c's name in front.
func writeCommand(b *strings.Builder, c *cobra.Command, prefix string) {
	name := strings.TrimSpace(prefix + " " + c.Name())
	if !groupOnly(c) {
		fmt.Fprintf(b, "  %-14s %s\n", name, c.Short)
	}
	for _, sub := range c.Commands() {
		if sub.IsAvailableCommand() {
			writeCommand(b, sub, name)
		}
	}
}

// groupOnly reports whether c only groups subcommands (plumb config).
func groupOnly(c *cobra.Command) bool {
	return c.HasAvailableSubCommands() && c.Annotations["group"] == "only"
}

// writeFlags lists flags one per line: the flag with the kind of value it
// takes, then what it does and its default when that says something.
func writeFlags(b *strings.Builder, fs *pflag.FlagSet) {
	type row struct{ left, right string }
	var rows []row
	width := 0
	fs.VisitAll(func(f *pflag.Flag) {
		if f.Hidden {
			return
		}
		left := "    --" + f.Name
		if f.Shorthand != "" {
			left = "-" + f.Shorthand + ", --" + f.Name
		}
		if v := valueName(f); v != "" {
			left += " " + v
		}
		right := f.Usage
		if d := f.DefValue; d != "" && d != "false" && d != "0" && d != "[]" && !strings.Contains(f.Usage, "(default") {
			right += " (default " + d + ")"
		}
		rows = append(rows, row{left, right})
		width = max(width, len(left))
	})
	for _, r := range rows {
		fmt.Fprintf(b, "  %-*s  %s\n", width, r.left, r.right)
	}
}

// valueName is the placeholder written after a flag for its value.
func valueName(f *pflag.Flag) string {
	switch f.Value.Type() {
	case "bool":
		return ""
	case "int", "int64":
		return "N"
	case "float64":
		return "NUMBER"
	case "duration":
		return "DURATION"
	case "stringSlice":
		return "A,B,…"
	}
	switch f.Name {
	case "config", "plot":
		return "FILE"
	case "db":
		return "URL"
	case "listen":
		return "ADDR"
	case "dir":
		return "DIR"
	case "format":
		return "text|json"
	case "log-format":
		return "json|text"
	case "table":
		return "NAME"
	case "query", "where":
		return "SQL"
	case "target", "weight", "time-column", "segment":
		return "COLUMN"
	case "group":
		return "NAME=A,B,…"
	case "base":
		return "COLUMN=LEVEL"
	case "precision":
		return "auto|fast|exact|precise"
	case "bucket":
		return "hour|day|week|month"
	case "time-zone":
		return "ZONE"
	case "watch":
		return "NAME"
	case "for":
		return "DURATION"
	case "since":
		return "AGE"
	case "from", "start":
		return "DATE"
	case "fail-on":
		return "warning|critical"
	}
	return "TEXT"
}
