package main

import (
	"bytes"
	"context"
	"errors"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"plumb/agent/config"
)

// TestDemoHintsRun: the commands the demo prints at the end run as shown
// (here through run, after the printed way of starting plumb), from a
// folder path that needs quoting.
func TestDemoHintsRun(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "plumb demo")
	code, out, errs := runCLI(t, "demo", "--dir", dir, "--no-serve", "--start", "2026-06-01")
	if code != 0 {
		t.Fatalf("demo: exit %d: %s", code, errs)
	}
	_, hints, ok := strings.Cut(out, "Next, from the folder you ran this in:\n")
	if !ok {
		t.Fatalf("no hints:\n%s", out)
	}
	// go test builds the binary as go run does ("go run ./cmd/plumb");
	// a test binary built with go test -c is named by its path.
	prefix := invokedAs() + " "
	n := 0
	for _, line := range strings.Split(strings.TrimSpace(hints), "\n") {
		line = strings.TrimSpace(line)
		cmdline, ok := strings.CutPrefix(line, prefix)
		if !ok {
			t.Fatalf("hint %q does not start with %q", line, prefix)
		}
		args := shellSplit(t, cmdline)
		var code int
		var errs string
		if args[0] == "serve" {
			// serve runs until interrupted: it is stopped as soon as it
			// says where it listens (on a port of its own).
			ctx, cancel := context.WithCancel(context.Background())
			var errb bytes.Buffer
			code = run(ctx, append(args, "--listen", "127.0.0.1:0"), cancelOnWrite{cancel}, &errb)
			cancel()
			errs = errb.String()
		} else {
			code, _, errs = plumbCLI(t, context.Background(), args...)
		}
		if code != 0 {
			t.Errorf("hint %q: exit %d: %s", line, code, errs)
		}
		n++
	}
	if n < 4 {
		t.Errorf("%d hints, want history, a segment's history, alerts and serve", n)
	}
}

// cancelOnWrite cancels a context at the first write to it.
type cancelOnWrite struct{ cancel context.CancelFunc }

func (c cancelOnWrite) Write(p []byte) (int, error) {
	c.cancel()
	return len(p), nil
}

// shellSplit splits a command line the way a POSIX shell does for the
// quoting shellQuote writes (plain words and single quotes).
func shellSplit(t *testing.T, s string) []string {
	t.Helper()
	var out []string
	var cur strings.Builder
	in, word := false, false
	for _, r := range s {
		switch {
		case r == '\'':
			in, word = !in, true
		case r == ' ' && !in:
			if word {
				out = append(out, cur.String())
				cur.Reset()
				word = false
			}
		default:
			cur.WriteRune(r)
			word = true
		}
	}
	if in {
		t.Fatalf("unbalanced quote in %q", s)
	}
	if word {
		out = append(out, cur.String())
	}
	return out
}

func TestInvocation(t *testing.T) {
	none := func(string) (string, error) { return "", errors.New("not found") }
	self := filepath.Join(t.TempDir(), "plumb")
	if err := os.WriteFile(self, []byte("#!/bin/sh\n"), 0o755); err != nil {
		t.Fatal(err)
	}
	onPath := func(string) (string, error) { return self, nil }
	for _, c := range []struct {
		exe, arg0 string
		look      func(string) (string, error)
		want      string
	}{
		{"/tmp/go-build1234/b001/exe/plumb", "/tmp/go-build1234/b001/exe/plumb", none, "go run ./cmd/plumb"},
		{self, "plumb", onPath, "plumb"},
		{"/opt/plumb/bin/plumb", "./bin/plumb", none, "./bin/plumb"},
		{"/opt/my tools/plumb", "/opt/my tools/plumb", none, "'/opt/my tools/plumb'"},
	} {
		if got := invocation(c.exe, c.arg0, c.look); got != c.want {
			t.Errorf("invocation(%q, %q) = %q, want %q", c.exe, c.arg0, got, c.want)
		}
	}
	if got := shellQuote("it's"); got != `'it'\''s'` {
		t.Errorf("shellQuote: %s", got)
	}
}

// TestDemoConfigCommentsMatch: the comments of the demo's plumb.yaml agree
// with its watches: every "N-day window" a watch's comment names is that
// watch's window, and the limits the header gives are every watch's.
func TestDemoConfigCommentsMatch(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "demo")
	start := time.Date(2026, 6, 1, 0, 0, 0, 0, time.UTC)
	if code, _, errs := runCLI(t, "demo", "--dir", dir, "--no-serve", "--start", start.Format(time.DateOnly)); code != 0 {
		t.Fatalf("demo: exit %d: %s", code, errs)
	}
	cfgPath := filepath.Join(dir, "plumb.yaml")
	text, err := os.ReadFile(cfgPath)
	if err != nil {
		t.Fatal(err)
	}
	c, err := config.Load(cfgPath)
	if err != nil {
		t.Fatal(err)
	}
	// The comment block above each watch.
	var comment []string
	for _, line := range strings.Split(string(text), "\n") {
		trimmed := strings.TrimSpace(line)
		switch {
		case strings.HasPrefix(trimmed, "#"):
			comment = append(comment, trimmed)
		case strings.HasPrefix(trimmed, "- name: "):
			w := c.Watch(strings.TrimPrefix(trimmed, "- name: "))
			for _, m := range regexp.MustCompile(`(\d+)-day window`).FindAllStringSubmatch(strings.Join(comment, " "), -1) {
				if n, _ := strconv.Atoi(m[1]); w.Bucket != "day" || n != w.Window.Buckets {
					t.Errorf("watch %s: comment names a %s-day window; its window is %v of %s", w.Name, m[1], w.Window, w.Bucket)
				}
			}
			comment = nil
		default:
			if trimmed != "" && !strings.HasPrefix(trimmed, "#") {
				comment = nil
			}
		}
	}

	// The header's limits are every watch's.
	header := strings.Join(strings.Fields(strings.ReplaceAll(string(text), "\n#", "\n")), " ")
	m := regexp.MustCompile(`default limits: VIF (\d+) and (\d+), and the centered condition number \(the columns among themselves\) (\d+) and (\d+)`).FindStringSubmatch(header)
	if m == nil {
		t.Fatalf("header does not give the limits:\n%s", text)
	}
	var want [4]float64
	for i := range want {
		want[i], _ = strconv.ParseFloat(m[i+1], 64)
	}
	for _, w := range c.Watches {
		l := w.Limits
		if got := [4]float64{l.VIF.Warn, l.VIF.Critical, l.Condition.Warn, l.Condition.Critical}; got != want || l.ConditionBasis != config.ConditionCentered {
			t.Errorf("watch %s: limits %v on the %s condition number; the header says %v on the centered one", w.Name, got, l.ConditionBasis, want)
		}
	}
}
