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
	m := regexp.MustCompile(`district_connections reports the exact dependency on day (\d+)`).FindStringSubmatch(out)
	if m == nil {
		t.Fatalf("no exact-dependency day in the demo report:\n%s", out)
	}
	day, _ := strconv.Atoi(m[1])
	date := start.AddDate(0, 0, day).Format(time.DateOnly)
	if !strings.Contains(out, "day 0 = "+start.Format(time.DateOnly)) {
		t.Errorf("the report does not say which date day 0 is:\n%s", out)
	}
	cfg := filepath.Join(dir, "plumb.yaml")

	code, out, errs = runCLI(t, "alerts", "--config", cfg, "--watch", "district_connections", "--since", "all")
	if code != 0 || !regexp.MustCompile(`exact +district_connections  data through `+date+`  `).MatchString(out) {
		t.Errorf("plumb alerts does not date the exact alert's window through %s (day %d):\n%s\n%s", date, day, out, errs)
	}

	code, out, errs = runCLI(t, "history", "district_connections", "--config", cfg)
	if code != 0 {
		t.Fatalf("history: exit %d: %s", code, errs)
	}
	// The first window with rank 3 of 4 is the exact alert's.
	var first string
	for _, line := range strings.Split(out, "\n") {
		if f := strings.Fields(line); len(f) > 3 && f[2] == "3" {
			first = f[0]
			break
		}
	}
	if first != date {
		t.Errorf("history: first rank-deficient window through %q, want %s (day %d):\n%s", first, date, day, out)
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
	if !strings.Contains(page, "data through "+date) || !regexp.MustCompile(`<tr><td>`+date+`</td><td><span class="pill pill-critical">critical</span></td><td>exact</td>`).MatchString(page) {
		t.Errorf("the dashboard does not date the exact alert's window through %s (day %d)", date, day)
	}
	if strings.Contains(page, "data as of") {
		t.Errorf("the dashboard still says 'data as of'")
	}
}

func discardLogger() *slog.Logger { return slog.New(slog.NewTextHandler(io.Discard, nil)) }
