package main

import (
	"bufio"
	"context"
	"io"
	"net/http"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"
)

// TestDemoThenServe runs `plumb demo --no-serve` into a folder, then
// `plumb serve` over the state store it wrote, and reads the dashboard,
// /healthz and /metrics over real HTTP.
func TestDemoThenServe(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "demo")
	code, out, errs := runCLI(t, "demo", "--dir", dir, "--no-serve", "--start", "2026-06-01")
	if code != 0 {
		t.Fatalf("demo: exit %d: %s", code, errs)
	}
	for _, f := range demoFiles {
		if _, err := os.Stat(filepath.Join(dir, f)); err != nil {
			t.Errorf("demo did not write %s: %v", f, err)
		}
	}
	// Each story once, at the day the data make possible, dated to the day
	// it began: the volumes' trend warning before their critical level; the
	// exact total on day 76, once the last 7 days of the window lie after
	// the change of day 70, dated to day 70; the stuck hillside sensor on
	// day 112, the first 28-day window after day 85, dated to day 85.
	for _, want := range []string{
		"smart meters: half of the accounts billed on a reading by day 62; district_volumes: trend warning on day ",
		"district_connections reports the exact dependency on day 76, once the last week of the window holds it, dated to day 70",
		"total_connections = 1·residential_connections + 1·commercial_connections + 0",
		"district_daily/hillside reports pressure_bar constant on day 112, the first 28-day window wholly after it (day 85+27), dated to day 85",
		// The dose fixed by the supply source from day 96, said in
		// words; the new source is a level, not an alert.
		"district_treatment reports it on day 102, once the last week of the window holds it, dated to day 96: supply_source determines chlorine_mg_l",
		"district_treatment counts it as a level of supply_source from day 109, with no alert",
		"omitted-variable bias",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("demo report lacks %q:\n%s", want, out)
		}
	}
	if m := regexp.MustCompile(`trend warning on day (\d+), .*critical level 10 crossed on day (\d+)`).FindStringSubmatch(out); m == nil {
		t.Errorf("smart-meter story lacks the trend warning or the critical level:\n%s", out)
	} else if tr, _ := strconv.Atoi(m[1]); tr >= must(strconv.Atoi(m[2])) {
		t.Errorf("trend warning on day %s, critical on day %s: want the warning first", m[1], m[2])
	}
	// Short: one line per cause, and each is one of the stories (the
	// volumes' near dependency is one alert, shown by its latest rule).
	stories := map[string]bool{
		"district_volumes trend": true, "district_volumes level": true,
		"district_connections exact": true, "district_daily/hillside constant": true,
		"district_treatment exact": true,
	}
	_, section, _ := strings.Cut(out, "What plumb noticed")
	section, _, _ = strings.Cut(section, "The stories in the data")
	lines := strings.Split(strings.TrimSpace(section), "\n")[1:]
	for _, l := range lines {
		f := strings.Fields(l)
		if len(f) < 2 || strings.Contains(l, "on the first windows") {
			continue
		}
		if !stories[f[0]+" "+f[1]] {
			t.Errorf("report line outside the stories: %q", l)
		}
	}
	if len(lines) != 4 {
		t.Errorf("%d report lines, want one per story that alerts (4):\n%s", len(lines), section)
	}
	// Running it again replaces its own files.
	if code, _, errs := runCLI(t, "demo", "--dir", dir, "--no-serve", "--start", "2026-06-01"); code != 0 {
		t.Fatalf("second demo: exit %d: %s", code, errs)
	}

	ctx, cancel := context.WithCancel(context.Background())
	pr, pw := io.Pipe()
	done := make(chan int, 1)
	go func() {
		done <- run(ctx, []string{"serve", "--config", filepath.Join(dir, "plumb.yaml"), "--listen", "127.0.0.1:0"}, pw, io.Discard)
		pw.Close()
	}()
	line, err := bufio.NewReader(pr).ReadString('\n')
	if err != nil {
		t.Fatalf("serve printed no address: %v", err)
	}
	go io.Copy(io.Discard, pr)
	_, rest, ok := strings.Cut(line, "http://")
	base, _, _ := strings.Cut(rest, "/ ")
	if !ok || base == "" {
		t.Fatalf("serve line %q", line)
	}
	get := func(path string) string {
		t.Helper()
		resp, err := http.Get("http://" + base + path)
		if err != nil {
			t.Fatal(err)
		}
		defer resp.Body.Close()
		b, _ := io.ReadAll(resp.Body)
		if resp.StatusCode != 200 {
			t.Fatalf("GET %s: %s", path, resp.Status)
		}
		return string(b)
	}
	if page := get("/"); !strings.Contains(page, `href="/watches/district_volumes"`) {
		t.Errorf("overview lacks the volumes watch link")
	}
	if page := get("/watches/district_connections"); !strings.Contains(page, "<svg") || !strings.Contains(page, "total_connections") {
		t.Errorf("watch page lacks its charts or columns")
	}
	get("/healthz")
	if m := get("/metrics"); !strings.Contains(m, "plumb_") {
		t.Errorf("/metrics has no plumb_ families")
	}
	cancel()
	select {
	case code := <-done:
		if code != 0 {
			t.Errorf("serve exit %d after interrupt", code)
		}
	case <-time.After(30 * time.Second):
		t.Fatal("serve did not stop within 30s of its context ending")
	}
}

func TestServeRefusesOpenAddressWithoutToken(t *testing.T) {
	t.Setenv("PLUMB_HTTP_TOKEN", "")
	dir := filepath.Join(t.TempDir(), "demo")
	if code, _, errs := runCLI(t, "demo", "--dir", dir, "--no-serve", "--start", "2026-06-01"); code != 0 {
		t.Fatalf("demo: exit %d: %s", code, errs)
	}
	code, _, errs := runCLI(t, "serve", "--config", filepath.Join(dir, "plumb.yaml"), "--listen", "0.0.0.0:0")
	if code != exitUsage || !strings.Contains(errs, "PLUMB_HTTP_TOKEN") {
		t.Errorf("exit %d, stderr %q: want a usage error naming PLUMB_HTTP_TOKEN", code, errs)
	}
}

func must(v int, err error) int {
	if err != nil {
		panic(err)
	}
	return v
}
