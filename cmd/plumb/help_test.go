package main

import (
	"context"
	"encoding/json"
	"flag"
	"os"
	"path/filepath"
	"runtime"
	"strings"
	"testing"

	"github.com/spf13/cobra"
)

var update = flag.Bool("update", false, "rewrite the golden files of cmd/plumb")

// TestHelpGolden pins plumb --help: plumb's own layout, commands grouped
// by what the user is doing, completion not listed.
func TestHelpGolden(t *testing.T) {
	code, out, errs := plumbCLI(t, context.Background(), "--help")
	if code != 0 || errs != "" {
		t.Fatalf("exit %d: %s", code, errs)
	}
	golden := filepath.Join("testdata", "help.golden")
	if *update {
		if err := os.WriteFile(golden, []byte(out), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(golden)
	if err != nil {
		t.Fatal(err)
	}
	if out != string(want) {
		t.Fatalf("plumb --help differs from %s (go test ./cmd/plumb -run TestHelpGolden -update rewrites it):\n%s", golden, out)
	}
	for _, s := range []string{"Available Commands", "Flags:", "Use \"plumb", "completion", "Global Flags"} {
		if strings.Contains(out, s) {
			t.Errorf("plumb --help says %q", s)
		}
	}
	for _, g := range []string{"\nlook once\n", "\nwatch\n", "\nread the record\n", "\nupkeep\n"} {
		if !strings.Contains(out, g) {
			t.Errorf("plumb --help lacks the group %q", strings.TrimSpace(g))
		}
	}
	// Bare plumb prints the same.
	if code, bare, _ := plumbCLI(t, context.Background()); code != 0 || bare != out {
		t.Errorf("plumb without arguments: exit %d\n%s", code, bare)
	}
}

// TestCommandHelpIsPlumbs checks that every command's help is written in
// plumb's layout, with no line of the library's template.
func TestCommandHelpIsPlumbs(t *testing.T) {
	for _, args := range [][]string{
		{"scan", "--help"}, {"check", "--help"}, {"config", "--help"}, {"config", "check", "--help"},
		{"help", "history"}, {"version", "--help"},
	} {
		code, out, errs := plumbCLI(t, context.Background(), args...)
		if code != 0 || errs != "" {
			t.Fatalf("%v: exit %d: %s", args, code, errs)
		}
		if !strings.HasPrefix(out, "plumb ") || !strings.Contains(out, "\nusage: plumb ") {
			t.Errorf("%v:\n%s", args, out)
		}
		for _, s := range []string{"Usage:", "Flags:", "Global Flags:", "help for ", "Available Commands"} {
			if strings.Contains(out, s) {
				t.Errorf("%v: help says %q:\n%s", args, s, out)
			}
		}
	}
}

func TestVersion(t *testing.T) {
	for _, args := range [][]string{{"version"}, {"--version"}} {
		code, out, errs := plumbCLI(t, context.Background(), args...)
		if code != 0 || errs != "" {
			t.Fatalf("%v: exit %d: %s", args, code, errs)
		}
		// A test binary records no commit (and go test stamps no module
		// version): the line says so rather than inventing one.
		want := "plumb (devel), commit not recorded, " + runtime.Version() + "\n"
		if b := readBuildInfo(); b.Version != "(devel)" || b.Commit != "" {
			want = versionLine() + "\n"
		}
		if out != want {
			t.Errorf("%v: %q, want %q", args, out, want)
		}
	}
}

// TestUnknownCommand: an unknown command is a wrong command line (64),
// like an unknown flag, and the nearest command is named.
func TestUnknownCommand(t *testing.T) {
	for _, c := range []struct {
		args    []string
		nearest string
	}{
		{[]string{"chek"}, "the nearest is check"},
		{[]string{"histroy", "district_daily"}, "the nearest is history"},
		{[]string{"config", "chekc"}, "the nearest is check"},
		{[]string{"scna", "--db", "sqlite:x.db"}, "the nearest is scan"},
		{[]string{"help", "histroy"}, "the nearest is history"},
		{[]string{"help", "config", "chekc"}, "the nearest is check"},
	} {
		code, out, errs := plumbCLI(t, context.Background(), c.args...)
		if code != exitUsage || out != "" || !strings.Contains(errs, c.nearest) {
			t.Errorf("%v: exit %d, stdout %q, stderr %q", c.args, code, out, errs)
		}
	}
	if code, _, _ := plumbCLI(t, context.Background(), "scan", "--no-such-flag"); code != exitUsage {
		t.Errorf("unknown flag: exit %d", code)
	}
	if code, _, _ := plumbCLI(t, context.Background(), "history"); code != exitUsage {
		t.Errorf("history without WATCH: exit %d", code)
	}
}

func TestEditDistance(t *testing.T) {
	for _, c := range []struct {
		a, b string
		want int
	}{
		{"", "", 0}, {"check", "check", 0}, {"chek", "check", 1}, {"histroy", "history", 2},
		{"metred", "metered", 1}, {"volumes", "columns", 2}, // counted by hand: one insertion; two substitutions
		{"SCAN", "scan", 0},
	} {
		if got := editDistance(c.a, c.b); got != c.want {
			t.Errorf("editDistance(%q, %q) = %d, want %d", c.a, c.b, got, c.want)
		}
	}
}

// TestLogFormatSameEverywhere: every command logs JSON lines on stderr by
// default and text with --log-format text; the flag is the same on all.
func TestLogFormatSameEverywhere(t *testing.T) {
	ctx := context.Background()
	cfg, _ := demoConfig(t, "")
	code, _, errs := plumbCLI(t, ctx, "check", "--config", cfg)
	if code != checkFail || errs == "" {
		t.Fatalf("check: exit %d, stderr %q", code, errs)
	}
	for _, line := range strings.Split(strings.TrimSpace(errs), "\n") {
		var v map[string]any
		if err := json.Unmarshal([]byte(line), &v); err != nil || v["level"] == nil || v["msg"] == nil {
			t.Errorf("check logs a line that is not a JSON object with level and msg: %q", line)
		}
	}
	code, _, errs = plumbCLI(t, ctx, "check", "--config", cfg, "--log-format", "text")
	if code != checkFail || !strings.Contains(errs, "level=INFO msg=run") {
		t.Errorf("check --log-format text: exit %d, stderr %q", code, errs)
	}
	// Every command that logs takes the one flag with the one default.
	root := newRoot()
	f := root.PersistentFlags().Lookup("log-format")
	if f == nil || f.DefValue != "json" {
		t.Fatalf("--log-format: %+v", f)
	}
	for _, c := range root.Commands() {
		if local := c.LocalNonPersistentFlags().Lookup("log-format"); local != nil {
			t.Errorf("plumb %s has a --log-format of its own (default %s)", c.Name(), local.DefValue)
		}
	}
	if code, _, _ := plumbCLI(t, ctx, "check", "--config", cfg, "--log-format", "xml"); code != exitUsage {
		t.Errorf("--log-format xml: exit %d", code)
	}
}

// TestReadmeAgreesWithHelp: the README gives every command's usage line as
// its help does, says which commands take --config, and the exit codes the
// help gives.
func TestReadmeAgreesWithHelp(t *testing.T) {
	b, err := os.ReadFile(filepath.Join("..", "..", "README.md"))
	if err != nil {
		t.Fatal(err)
	}
	readme := strings.ReplaceAll(string(b), `\|`, "|") // pipes escaped in tables
	root := newRoot()
	var withConfig, without []string
	var walk func(c *cobra.Command)
	walk = func(c *cobra.Command) {
		for _, sub := range c.Commands() {
			if !sub.IsAvailableCommand() {
				continue
			}
			if sub.HasAvailableSubCommands() {
				walk(sub)
				if groupOnly(sub) {
					continue
				}
			}
			usage := "plumb " + strings.TrimPrefix(usageLine(sub), "plumb ")
			if sub.Name() != "scan" && sub.Name() != "demo" && !strings.Contains(readme, "`"+usage+"`") {
				t.Errorf("README lacks the usage line `%s`", usage)
			}
			name := strings.TrimPrefix(sub.CommandPath(), "plumb ")
			if sub.Flags().Lookup("config") != nil {
				withConfig = append(withConfig, name)
				if !strings.Contains(sub.Use, "[--config FILE]") {
					t.Errorf("plumb %s takes --config but its usage line does not say so: %s", name, sub.Use)
				}
			} else {
				without = append(without, name)
			}
		}
	}
	walk(root)
	// scan's and demo's usage lines are in the tour and the scan section.
	for _, u := range []string{"plumb scan --db sqlite:districts.db --table district_daily --target demand_m3 \\\n    --group ", "plumb demo --dir"} {
		if !strings.Contains(readme, u) {
			t.Errorf("README lacks %q", u)
		}
	}
	_, configPara, _ := strings.Cut(readme, "The commands that read the configuration")
	configPara, _, _ = strings.Cut(configPara, "\n\n")
	for _, name := range withConfig {
		if !strings.Contains(configPara, "`"+name+"`") {
			t.Errorf("README's paragraph on --config does not list %s: %q", name, configPara)
		}
	}
	takers, others, _ := strings.Cut(configPara, "(default `plumb.yaml`)")
	for _, name := range without {
		if strings.Contains(takers, "`"+name+"`") || !strings.Contains(others, "`"+name+"`") || !strings.Contains(others, "do not") {
			t.Errorf("README's paragraph on --config does not say %s takes none: %q", name, configPara)
		}
	}
	_, codes, _ := strings.Cut(readme, "## Exit codes\n")
	codes, _, _ = strings.Cut(codes, "\n## ")
	for _, c := range []string{"0 it did its job", "2 it could not", "64 a wrong command line", "70 a fault in plumb", "adds 1"} {
		if !strings.Contains(codes, c) {
			t.Errorf("README's exit codes lack %q", c)
		}
	}
	code, out, _ := plumbCLI(t, context.Background(), "--help")
	if code != 0 || !strings.Contains(out, "Every command exits 0 when it did its\njob, 2 when it could not") || !strings.Contains(out, "64 for a wrong command line and 70 for a fault in plumb") {
		t.Errorf("plumb --help's exit codes differ from the README's")
	}
}
