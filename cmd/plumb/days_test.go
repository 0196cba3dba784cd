package main

import (
	"context"
	"io"
	"log/slog"
	"net/http"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"plumb/agent/sqlstore"
)

// TestDayNumbersAgree: the demo's report, plumb alerts, plumb history and
// the dashboard name the same last data day for the window that raised the
// exact-dependency alert (day 0 is the demo's first day).
func TestDayNumbersAgree(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "demo")
	start := time.Date(2026, 6, 1, 0, 0, 0, 0, time.UTC)
	code, out, errs := runCLI(t, "demo", "--dir", dir, "--no-serve", "--start", start.Format(time.DateOnly))
	if code != 0 {
		t.Fatalf("demo: exit %d: %s", code, errs)
	}
	m := regexp.MustCompile(`district_connections reports the exact dependency on day (\d+), .*dated to day (\d+) \(its onset`).FindStringSubmatch(out)
	if m == nil {
		t.Fatalf("no exact-dependency day in the demo report:\n%s", out)
	}
	day, _ := strconv.Atoi(m[1])
	onsetDay, _ := strconv.Atoi(m[2])
	date := start.AddDate(0, 0, day).Format(time.DateOnly)
	onset := start.AddDate(0, 0, onsetDay).Format(time.DateOnly)
	if !strings.Contains(out, "day 0 = "+start.Format(time.DateOnly)) {
		t.Errorf("the report does not say which date day 0 is:\n%s", out)
	}
	cfg := filepath.Join(dir, "plumb.yaml")

	code, out, errs = runCLI(t, "alerts", "--config", cfg, "--watch", "district_connections", "--since", "all")
	if code != 0 || !regexp.MustCompile(`exact +district_connections  since `+onset+`, data through `+date+`  `).MatchString(out) {
		t.Errorf("plumb alerts does not date the exact alert since %s (day %d), data through %s (day %d):\n%s\n%s", onset, onsetDay, date, day, out, errs)
	}
	// The JSON keeps the window's end: the midnight after the last day.
	code, out, _ = runCLI(t, "alerts", "--config", cfg, "--watch", "district_connections", "--since", "all", "--format", "json")
	end := start.AddDate(0, 0, day+1).Format(time.RFC3339)
	if code != 0 || !strings.Contains(out, `"as_of": "`+end+`"`) || !strings.Contains(out, `"onset": "`+onset+`T00:00:00Z"`) {
		t.Errorf("plumb alerts JSON: want as_of %s and onset %s:\n%s", end, onset, out)
	}

	// History names the window that raised it by the same day.
	code, out, errs = runCLI(t, "history", "district_connections", "--config", cfg)
	if code != 0 || !regexp.MustCompile(`(?m)^`+date+` +\d+ +\d+ `).MatchString(out) || !strings.HasPrefix(out, "data through ") {
		t.Errorf("history: no window dated through %s (day %d):\n%s\n%s", date, day, out, errs)
	}
	code, out, _ = runCLI(t, "history", "district_connections", "--config", cfg, "--format", "json")
	if code != 0 || !strings.Contains(out, `"at": "`+end+`"`) {
		t.Errorf("history JSON lacks the window ending %s", end)
	}

	st, err := sqlstore.Open(context.Background(), "sqlite:"+filepath.Join(dir, "state.db"), sqlstore.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	c, err := loadStoreConfig(cfg)
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	wait, addr, err := startDashboard(ctx, st, c, "127.0.0.1:0", discardLogger())
	if err != nil {
		t.Fatal(err)
	}
	defer func() { cancel(); wait() }()
	resp, err := http.Get("http://" + addr + "/watches/district_connections")
	if err != nil {
		t.Fatal(err)
	}
	body, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	page := string(body)
	if !strings.Contains(page, "data through "+date) || !regexp.MustCompile(`<tr><td>`+onset+`</td><td>`+date+`</td><td><span class="pill pill-critical">critical</span></td><td>exact</td>`).MatchString(page) {
		t.Errorf("the dashboard does not date the exact alert since %s, its window through %s (day %d)", onset, date, day)
	}
	if strings.Contains(page, "data as of") {
		t.Errorf("the dashboard still says 'data as of'")
	}
}

func discardLogger() *slog.Logger { return slog.New(slog.NewTextHandler(io.Discard, nil)) }
