package main

import (
	"context"
	"database/sql"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
	"unicode/utf8"
)

func TestTermSafe(t *testing.T) {
	for in, want := range map[string]string{
		"pressure_bar":        "pressure_bar",
		"zone Süd · 北":        "zone Süd · 北",
		"a\x1b[2Jb":           `a\x1b[2Jb`,
		"a\rb":                `a\x0db`,
		"bell\a":              `bell\x07`,
		"del\x7f":             `del\x7f`,
		"csi\u009b31m":        `csi\u009b31m`,
		"rtl\u202eevil":       `rtl\u202eevil`,
		"bad\xffutf8":         `bad\xffutf8`,
		"tab\tnewline\n":      `tab\x09newline\x0a`,
		"\x1b]0;title\x07end": `\x1b]0;title\x07end`,
	} {
		if got := termSafe(in); got != want {
			t.Errorf("termSafe(%q) = %q, want %q", in, got, want)
		}
	}
	if got := termSafeLines("a\tb\nc\x1bd"); got != "a\tb\nc\\x1bd" {
		t.Errorf("termSafeLines kept %q", got)
	}
}

// hostile names for columns and segments: what a terminal would act on.
const (
	colESC = "pressure\x1b[2J"
	colCR  = "age\r"
	colC1  = "flow\u009b6n"
	segESC = "north\x1b]0;owned\x07"
)

// assertTerminalSafe fails when out holds a character a terminal acts on.
func assertTerminalSafe(t *testing.T, what, out string) {
	t.Helper()
	for i, r := range out {
		bad := r < 0x20 && r != '\n' && r != '\t' || r == 0x7f || r >= 0x80 && r < 0xa0 || r == utf8.RuneError
		if bad {
			t.Errorf("%s: raw %U at byte %d:\n%s", what, r, i, out)
			return
		}
	}
}

// Names with escape sequences in the data reach scan, check, history and
// alerts output escaped, never raw.
func TestTextOutputEscapesControls(t *testing.T) {
	dir := t.TempDir()
	src := filepath.Join(dir, "gauges.db")
	db, err := sql.Open("sqlite", "file:"+src+"?mode=rwc")
	if err != nil {
		t.Fatal(err)
	}
	q := func(s string) string { return `"` + strings.ReplaceAll(s, `"`, `""`) + `"` }
	if _, err := db.Exec(fmt.Sprintf(`CREATE TABLE gauges (day TEXT, zone TEXT, %s REAL, %s REAL, %s REAL)`, q(colESC), q(colCR), q(colC1))); err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(14, 1))
	day0 := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	tx, _ := db.Begin()
	for d := range 40 {
		for _, zone := range []string{segESC, "south"} {
			for range 6 {
				a, b := rng.NormFloat64(), rng.NormFloat64()
				if _, err := tx.Exec(`INSERT INTO gauges VALUES (?, ?, ?, ?, ?)`, day0.AddDate(0, 0, d).Format("2006-01-02"), zone, a, b, a+b); err != nil {
					t.Fatal(err)
				}
			}
		}
	}
	if err := tx.Commit(); err != nil {
		t.Fatal(err)
	}
	db.Close()

	code, out, errs := runCLI(t, "scan", "--db", "sqlite:"+src, "--table", "gauges", "--segment", "zone")
	if code == 70 || !strings.Contains(out, `pressure\x1b[2J`) {
		t.Fatalf("scan: exit %d\n%s\n%s", code, out, errs)
	}
	assertTerminalSafe(t, "scan", out)
	assertTerminalSafe(t, "scan stderr", errs)

	cfg := filepath.Join(dir, "plumb.yaml")
	text := fmt.Sprintf(`store: sqlite:%s
sources:
  gauges: sqlite:%s
watches:
  - name: zone_gauges
    source: gauges
    table: gauges
    time_column: day
    window: 14d
    segment_by: zone
`, filepath.Join(dir, "state.db"), src)
	if err := os.WriteFile(cfg, []byte(text), 0o600); err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	for _, args := range [][]string{
		{"check", "--config", cfg, "-q"},
		{"history", "zone_gauges", "--config", cfg},
		{"alerts", "--config", cfg, "--since", "all"},
	} {
		code, out, errs := plumbCLI(t, ctx, args...)
		if code == exitInternal || code == exitUsage {
			t.Fatalf("%s: exit %d\n%s\n%s", args[0], code, out, errs)
		}
		assertTerminalSafe(t, args[0], out)
		assertTerminalSafe(t, args[0]+" stderr", errs)
		if args[0] != "history" && !strings.Contains(out, `\x1b`) {
			t.Errorf("%s: the escaped names are missing:\n%s", args[0], out)
		}
	}
}
