package main

import (
	"bytes"
	"context"
	"database/sql"
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"strings"
	"testing"
	"time"

	"plumb/agent"
	"plumb/agent/demo"
	"plumb/agent/sqlstore"
	"plumb/migrations"
)

// plumbCLI runs plumb with args and returns its exit code, stdout and stderr.
func plumbCLI(t *testing.T, ctx context.Context, args ...string) (int, string, string) {
	t.Helper()
	var out, errb bytes.Buffer
	code := run(ctx, args, &out, &errb)
	return code, out.String(), errb.String()
}

// demoConfig writes the demo table and a configuration watching it.
func demoConfig(t *testing.T, extra string) (cfgPath, statePath string) {
	t.Helper()
	dir := t.TempDir()
	src := filepath.Join(dir, "districts.db")
	if err := demo.Default.WriteSQLite(context.Background(), src); err != nil {
		t.Fatal(err)
	}
	statePath = filepath.Join(dir, "state.db")
	cfgPath = filepath.Join(dir, "plumb.yaml")
	text := fmt.Sprintf(`store: sqlite:%s
sources:
  districts: sqlite:%s
watches:
  - name: district_daily
    source: districts
    table: %s
    target: %s
    time_column: day
    window: 28d
%s`, statePath, src, demo.Table, demo.Target, extra)
	if err := os.WriteFile(cfgPath, []byte(text), 0o600); err != nil {
		t.Fatal(err)
	}
	return cfgPath, statePath
}

func TestConfigCheckCommand(t *testing.T) {
	ctx := context.Background()
	cfg, _ := demoConfig(t, "")
	code, out, errs := plumbCLI(t, ctx, "config", "check", "--config", cfg)
	if code != 0 || !strings.Contains(out, "usable, 1 watch(es)") || !strings.Contains(out, "daily by column day (UTC); window 4w") ||
		strings.Contains(out, "of day") {
		t.Fatalf("exit %d\n%s\n%s", code, out, errs)
	}
	bad := filepath.Join(t.TempDir(), "bad.yaml")
	os.WriteFile(bad, []byte("sources: {d: \"sqlite:x.db\"}\nwatches:\n  - {name: w, source: d, table: t, colums: [a]}\n"), 0o600)
	code, _, errs = plumbCLI(t, ctx, "config", "check", "--config", bad)
	if code != exitError || !strings.Contains(errs, `line 3: unknown key "colums"`) {
		t.Fatalf("bad config: exit %d: %s", code, errs)
	}
	hook := filepath.Join(t.TempDir(), "hook.yaml")
	os.WriteFile(hook, []byte("sources: {d: \"sqlite:x.db\"}\nnotifiers: {h: {webhook: \"https://hooks.example.org/p\", secret_env: PLUMB_TEST_UNSET_SECRET}}\nwatches:\n  - {name: w, source: d, table: t, notify: [h]}\n"), 0o600)
	code, out, errs = plumbCLI(t, ctx, "config", "check", "--config", hook)
	if code != exitError || !strings.Contains(errs, "PLUMB_TEST_UNSET_SECRET is not set") || !strings.Contains(out, "(NOT SET)") {
		t.Fatalf("missing secret: exit %d\n%s\n%s", code, out, errs)
	}
	// Every problem of the file at once, the renamed key explained.
	many := filepath.Join(t.TempDir(), "many.yaml")
	os.WriteFile(many, []byte("sources: {d: \"sqlite:x.db\"}\nwatches:\n  - {name: w, source: e, table: t, colums: [a], time_column: day, lookback: 2 buckets}\n"), 0o600)
	code, _, errs = plumbCLI(t, ctx, "config", "check", "--config", many)
	for _, want := range []string{"3 problems", `unknown key "colums"`, "lookback is now called rescan", `unknown source "e"`} {
		if code != exitError || !strings.Contains(errs, want) {
			t.Errorf("many problems: exit %d, stderr lacks %q: %s", code, want, errs)
		}
	}
	code, _, errs = plumbCLI(t, ctx, "config", "check", "--config", filepath.Join(t.TempDir(), "none.yaml"))
	if code != exitError || !strings.Contains(errs, "no such file") {
		t.Fatalf("missing file: exit %d: %s", code, errs)
	}
}

// TestConfigCheckConnect: with --connect, config check opens the store and
// every source and watch and says which answer.
func TestConfigCheckConnect(t *testing.T) {
	ctx := context.Background()
	cfg, _ := demoConfig(t, "")
	code, out, errs := plumbCLI(t, ctx, "config", "check", "--config", cfg, "--connect")
	if code != 0 || !strings.Contains(out, "not created yet") || !strings.Contains(out, "source districts sqlite:") ||
		!strings.Contains(out, "watch district_daily: table district_daily answers with 15 columns") {
		t.Fatalf("exit %d\n%s\n%s", code, out, errs)
	}
	if code, _, errs := plumbCLI(t, ctx, "migrate", "--config", cfg); code != 0 {
		t.Fatalf("migrate: %s", errs)
	}
	code, out, _ = plumbCLI(t, ctx, "config", "check", "--config", cfg, "--connect")
	if code != 0 || !strings.Contains(out, "(up to date)") {
		t.Fatalf("after migrate: exit %d\n%s", code, out)
	}
	// A source file that is not there, and a watch's table that is not.
	text, _ := os.ReadFile(cfg)
	broken := strings.Replace(string(text), "table: "+demo.Table, "table: no_such_table", 1)
	broken = strings.Replace(broken, "watches:", "  gone: sqlite:"+filepath.Join(t.TempDir(), "gone.db")+"\nwatches:", 1)
	os.WriteFile(cfg, []byte(broken), 0o600)
	code, out, errs = plumbCLI(t, ctx, "config", "check", "--config", cfg, "--connect")
	if code != exitError || !strings.Contains(out, "source gone sqlite:") || !strings.Contains(out, "watch district_daily: no answer") ||
		!strings.Contains(errs, "2 of its connections did not answer") {
		t.Fatalf("broken: exit %d\n%s\n%s", code, out, errs)
	}
}

func TestCheckHistoryAlertsBackfill(t *testing.T) {
	ctx := context.Background()
	cfg, _ := demoConfig(t, "")
	// The demo's connections total becomes an exact sum: critical.
	code, out, errs := plumbCLI(t, ctx, "check", "--config", cfg, "-q")
	if code != checkFail || !strings.Contains(out, "tilted   district_daily · ") ||
		!strings.Contains(out, "total_connections = 1·residential_connections + 1·commercial_connections + 0") {
		t.Fatalf("check: exit %d\n%s\n%s", code, out, errs)
	}
	// Numbers for people: a singular design is said so, not 4.5e+15, with
	// the number the limits judge on the rest, named.
	if !regexp.MustCompile(`tilted   district_daily · max VIF [0-9.]+ \(\w+\) · singular \(rank \d+ of 12\); centered condition of the rest [0-9.]+ · \d+ rows read\n`).MatchString(out) || strings.Contains(out, "e+") {
		t.Errorf("check line:\n%s", out)
	}

	code, out, errs = plumbCLI(t, ctx, "history", "district_daily", "--config", cfg, "--format", "json")
	if code != 0 {
		t.Fatalf("history: exit %d: %s", code, errs)
	}
	var hist []map[string]any
	if err := json.Unmarshal([]byte(out), &hist); err != nil || len(hist) < 100 {
		t.Fatalf("history JSON (%d points): %v\n%s", len(hist), err, out[:min(len(out), 400)])
	}
	var prev time.Time
	for _, p := range hist {
		for _, k := range []string{"at", "condition_number", "max_vif", "rank", "rows"} {
			if _, ok := p[k]; !ok {
				t.Fatalf("point lacks %q: %v", k, p)
			}
		}
		at, err := time.Parse(time.RFC3339, p["at"].(string))
		if err != nil || !at.After(prev) {
			t.Fatalf("at %v (after %v): %v", p["at"], prev, err)
		}
		prev = at
	}
	// The last window ends after the demo's last day.
	if want := demo.Default.Start.AddDate(0, 0, demo.Default.Days); !prev.Equal(want) {
		t.Errorf("last point at %v, want %v", prev, want)
	}

	alertsJSON := func() []map[string]any {
		t.Helper()
		code, out, errs := plumbCLI(t, ctx, "alerts", "--config", cfg, "--format", "json", "--since", "all")
		if code != 0 {
			t.Fatalf("alerts: exit %d: %s", code, errs)
		}
		var as []map[string]any
		if err := json.Unmarshal([]byte(out), &as); err != nil {
			t.Fatal(err)
		}
		return as
	}
	as := alertsJSON()
	if len(as) == 0 {
		t.Fatal("no alerts")
	}
	rules := []string{"level", "trend", "exact", "constant", "jump", "blind"}
	var exact bool
	for _, a := range as {
		for _, k := range []string{"id", "watch", "rule", "severity", "as_of", "opened_at", "resolved_at", "message"} {
			if _, ok := a[k]; !ok {
				t.Fatalf("alert lacks %q: %v", k, a)
			}
		}
		if !slices.Contains(rules, a["rule"].(string)) || (a["severity"] != "warning" && a["severity"] != "critical") {
			t.Fatalf("alert %v", a)
		}
		if u, ok := a["updated_as_of"].(string); !ok || u < a["as_of"].(string) {
			t.Errorf("alert updated as of %v, before it was raised (as of %v)", a["updated_as_of"], a["as_of"])
		}
		if a["rule"] == "exact" && a["resolved_at"] == nil {
			exact = true
			// The change day of the demo starts the exact sum.
			if want := demo.Default.Start.AddDate(0, 0, demo.Default.ChangeDay).Format(time.RFC3339); a["as_of"].(string) < want {
				t.Errorf("exact dependency as of %v, before the change day %s", a["as_of"], want)
			}
		}
	}
	if !exact {
		t.Fatal("no open exact-dependency alert")
	}
	code, out, errs = plumbCLI(t, ctx, "alerts", "--config", cfg, "--open")
	if code != 0 || !regexp.MustCompile(`  open(, updated on data through \d{4}-\d{2}-\d{2})?\n`).MatchString(out) ||
		!strings.Contains(out, "what to do: ") || strings.Contains(out, "OPEN") {
		t.Fatalf("alerts text: exit %d\n%s\n%s", code, out, errs)
	}

	// A backfill from a date gives the same alerts, in the same order.
	code, out, errs = plumbCLI(t, ctx, "backfill", "district_daily", "--config", cfg, "--from", "2026-08-15")
	if code != 0 || !strings.Contains(out, "watch district_daily: read") {
		t.Fatalf("backfill: exit %d\n%s\n%s", code, out, errs)
	}
	again := alertsJSON()
	ids := func(as []map[string]any) string {
		var s []string
		for _, a := range as {
			s = append(s, fmt.Sprint(a["id"], a["as_of"], a["resolved_at"] == nil))
		}
		return strings.Join(s, "\n")
	}
	if ids(as) != ids(again) {
		t.Fatalf("alerts before the backfill\n%s\nafter\n%s", ids(as), ids(again))
	}
	if code, _, _ := plumbCLI(t, ctx, "check", "district_daily", "--config", cfg, "-q"); code != checkFail {
		t.Fatalf("second check: exit %d", code)
	}
	if code, _, errs := plumbCLI(t, ctx, "check", "nope", "--config", cfg); code != exitUsage || !strings.Contains(errs, `no watch "nope"`) {
		t.Fatalf("unknown watch: exit %d: %s", code, errs)
	}
	if code, _, errs := plumbCLI(t, ctx, "backfill", "district_daily", "--config", cfg, "--from", "June"); code != exitUsage || !strings.Contains(errs, "--from") {
		t.Fatalf("bad date: exit %d: %s", code, errs)
	}
}

// collinearTable writes n rows of independent a and b and c = a + noise
// with var(noise) = var(a)/k: the R² of c on a and b is about k/(k+1), so
// its VIF (and a's) is about k+1.
func collinearTable(t *testing.T, n int, k float64) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), "gauges.db")
	db, err := sql.Open("sqlite", "file:"+path+"?mode=rwc")
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if _, err := db.Exec(`CREATE TABLE gauges (pressure_bar REAL, pipe_age_years REAL, flow_m3 REAL)`); err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(5, 6))
	tx, _ := db.Begin()
	for i := 0; i < n; i++ {
		a, b := rng.NormFloat64(), rng.NormFloat64()
		c := a + rng.NormFloat64()/math.Sqrt(k)
		tx.Exec(`INSERT INTO gauges VALUES (?, ?, ?)`, a, b, c)
	}
	if err := tx.Commit(); err != nil {
		t.Fatal(err)
	}
	return path
}

// TestCheckExitCodes pins plumb check's contract: 0 when no watch is at or
// above the gate, 1 when one is, 2 when a watch could not be run, 64 for a
// wrong command line; the gate is --fail-on (default critical).
func TestCheckExitCodes(t *testing.T) {
	ctx := context.Background()
	for _, c := range []struct {
		name   string
		k      float64 // VIF about k+1
		failOn string  // "" for the default
		want   int
		state  string
	}{
		{"independent", 0.01, "", 0, "steady"},
		{"independent, gate warning", 0.01, "warning", 0, "steady"},
		{"warning under the default gate", 6, "", 0, "leaning"}, // VIF ≈ 7: over warn 5, under critical 10
		{"warning at the warning gate", 6, "warning", 1, "leaning"},
		{"critical", 30, "", 1, "tilted"}, // VIF ≈ 31
		{"critical, gate critical", 30, "critical", 1, "tilted"},
	} {
		t.Run(c.name, func(t *testing.T) {
			src := collinearTable(t, 3000, c.k)
			dir := t.TempDir()
			cfg := filepath.Join(dir, "plumb.yaml")
			os.WriteFile(cfg, []byte(fmt.Sprintf("store: sqlite:%s/state.db\nsources: {g: \"sqlite:%s\"}\nwatches:\n  - {name: gauges, source: g, table: gauges}\n", dir, src)), 0o600)
			args := []string{"check", "--config", cfg, "-q"}
			if c.failOn != "" {
				args = append(args, "--fail-on", c.failOn)
			}
			code, out, errs := plumbCLI(t, ctx, append(args, "--format", "json")...)
			if code != c.want {
				t.Fatalf("exit %d, want %d\n%s\n%s", code, c.want, out, errs)
			}
			var res []checkResult
			if err := json.Unmarshal([]byte(out), &res); err != nil || len(res) != 1 || res[0].State != c.state || res[0].AtGate != (c.want == 1) {
				t.Fatalf("json %v: %s", err, out)
			}
			// The text form: the state first, in lower case, then the watch.
			code, out, _ = plumbCLI(t, ctx, args...)
			if code != c.want || !strings.HasPrefix(out, fmt.Sprintf("%-8s gauges · max VIF ", c.state)) ||
				!strings.Contains(out, fmt.Sprintf("exit %d\n", c.want)) {
				t.Fatalf("text: exit %d\n%s", code, out)
			}
			for _, word := range []string{"OK", "WARNING", "CRITICAL", "UNKNOWN"} {
				if strings.Contains(out, word) {
					t.Errorf("text output says %s:\n%s", word, out)
				}
			}
		})
	}
	// A source that cannot be read: exit 2, and the failure is recorded.
	dir := t.TempDir()
	cfg := filepath.Join(dir, "plumb.yaml")
	os.WriteFile(cfg, []byte(fmt.Sprintf("store: sqlite:%s/state.db\nsources: {g: \"sqlite:%s/missing.db\"}\nwatches:\n  - {name: gauges, source: g, table: gauges}\n", dir, dir)), 0o600)
	code, out, errs := plumbCLI(t, ctx, "check", "--config", cfg, "-q")
	if code != 2 || !strings.HasPrefix(out, "unread   gauges") {
		t.Fatalf("unreadable source: exit %d\n%s\n%s", code, out, errs)
	}
	// A wrong command line: 64.
	for _, args := range [][]string{
		{"check", "--config", cfg, "--fail-on", "error"},
		{"check", "--config", cfg, "--no-such-flag"},
		{"check", "a", "b", "--config", cfg},
	} {
		if code, _, errs := plumbCLI(t, ctx, args...); code != 64 {
			t.Errorf("%v: exit %d, want 64: %s", args, code, errs)
		}
	}
}

func TestCheckRefusedWhileLocked(t *testing.T) {
	ctx := context.Background()
	cfg, state := demoConfig(t, "")
	st, err := sqlstore.Open(ctx, "sqlite:"+state, sqlstore.Options{Migrate: true})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	release, err := st.Lock(ctx, "plumb agent (test)")
	if err != nil {
		t.Fatal(err)
	}
	defer release()
	code, _, errs := plumbCLI(t, ctx, "check", "--config", cfg)
	if code != exitError || !strings.Contains(errs, "in use by another plumb: plumb agent (test)") {
		t.Fatalf("exit %d: %s", code, errs)
	}
}

func TestMigrateCommand(t *testing.T) {
	ctx := context.Background()
	cfg, state := demoConfig(t, "")
	code, out, errs := plumbCLI(t, ctx, "migrate", "--config", cfg)
	if code != 0 || !strings.Contains(out, "applied schema version(s) [1 ") ||
		!strings.Contains(out, fmt.Sprintf("now at %d", migrations.Latest(migrations.SQLite))) {
		t.Fatalf("exit %d\n%s\n%s", code, out, errs)
	}
	code, out, _ = plumbCLI(t, ctx, "migrate", "--config", cfg)
	if code != 0 || !strings.Contains(out, "up to date") {
		t.Fatalf("second migrate: exit %d: %s", code, out)
	}
	db, err := sql.Open("sqlite", "file:"+state)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := db.Exec("INSERT INTO "+migrations.VersionTable+" (version_id, is_applied) VALUES (?, 1)", migrations.Latest(migrations.SQLite)+1); err != nil {
		t.Fatal(err)
	}
	db.Close()
	for _, args := range [][]string{{"migrate"}, {"history", "district_daily"}, {"check"}} {
		code, _, errs = plumbCLI(t, ctx, append(args, "--config", cfg)...)
		if code != exitError || !strings.Contains(errs, "newer plumb") {
			t.Fatalf("%v on a newer store: exit %d: %s", args, code, errs)
		}
	}
}

// TestAgentCommandStops runs `plumb agent` until its first run is
// recorded, then cancels it as SIGTERM would.
func TestAgentCommandStops(t *testing.T) {
	cfg, state := demoConfig(t, "    schedule: \"@every 1h\"\n")
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan int, 1)
	var out, errb bytes.Buffer
	go func() {
		done <- run(ctx, []string{"agent", "--config", cfg, "--jitter", "0", "--listen", "127.0.0.1:0"}, &out, &errb)
	}()
	deadline := time.Now().Add(60 * time.Second)
	for {
		if st, err := sqlstore.Open(context.Background(), "sqlite:"+state, sqlstore.Options{}); err == nil {
			runs, _ := st.Runs(context.Background(), "district_daily", 1)
			st.Close()
			if len(runs) == 1 && runs[0].Status == agent.StatusOK {
				break
			}
		}
		if time.Now().After(deadline) {
			cancel()
			t.Fatalf("no run recorded; log:\n%s", errb.String())
		}
		time.Sleep(50 * time.Millisecond)
	}
	cancel()
	select {
	case code := <-done:
		if code != 0 {
			t.Fatalf("agent exit %d:\n%s", code, errb.String())
		}
	case <-time.After(60 * time.Second):
		t.Fatal("agent did not stop")
	}
	if !strings.Contains(errb.String(), `"msg":"agent stopped"`) {
		t.Errorf("log:\n%s", errb.String())
	}
	// A second agent while none runs takes the lock; the first released it.
	st, err := sqlstore.Open(context.Background(), "sqlite:"+state, sqlstore.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	release, err := st.Lock(context.Background(), "after")
	if err != nil {
		t.Fatalf("lock after the agent stopped: %v", err)
	}
	release()
}

func TestSparkline(t *testing.T) {
	f := func(v float64) *float64 { return &v }
	// Log scale from 1 to 100: 10 is halfway, bar index int(0.5·7) = 3.
	got := sparkline([]*float64{f(1), f(10), f(100), nil}, 60)
	if got != "▁▄█!" {
		t.Fatalf("sparkline %q", got)
	}
	if got := sparkline([]*float64{f(5), f(5), f(5)}, 2); got != "▁▁" {
		t.Fatalf("flat sparkline %q", got)
	}
}
