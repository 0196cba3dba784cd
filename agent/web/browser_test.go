package web

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/chromedp/chromedp"
)

const chromiumPath = "/usr/bin/chromium"

// newBrowser starts Debian's chromium headless in a fresh profile. Without
// chromium the test is skipped, except under CI=true where it fails.
func newBrowser(t *testing.T) context.Context {
	t.Helper()
	if _, err := os.Stat(chromiumPath); err != nil {
		if os.Getenv("CI") == "true" {
			t.Fatalf("%s is missing (apt-get install chromium): %v", chromiumPath, err)
		}
		t.Skipf("%s is missing: install Debian's chromium (apt-get install -y chromium) to run the browser tests", chromiumPath)
	}
	actx, cancelAlloc := chromedp.NewExecAllocator(context.Background(),
		chromedp.ExecPath(chromiumPath),
		chromedp.Headless,
		chromedp.NoSandbox,
		chromedp.DisableGPU,
		chromedp.NoFirstRun,
		chromedp.Flag("disable-background-networking", true),
		chromedp.Flag("disable-component-update", true),
		chromedp.Flag("disable-sync", true),
		chromedp.Flag("no-default-browser-check", true),
		chromedp.Flag("hide-scrollbars", true),
		chromedp.UserDataDir(t.TempDir()),
		chromedp.WindowSize(1280, 900),
	)
	ctx, cancel := chromedp.NewContext(actx)
	t.Cleanup(func() { cancel(); cancelAlloc() })
	// The first Run starts the browser; it must not carry a timeout.
	if err := chromedp.Do(ctx); err != nil {
		t.Fatalf("starting chromium: %v", err)
	}
	return ctx
}

// consoleErrors collects the page's console errors and exceptions and the
// browser's error log entries (failed loads, policy violations).
type consoleErrors struct {
	mu   sync.Mutex
	msgs []string
}

func watchConsole(ctx context.Context) *consoleErrors {
	c := &consoleErrors{}
	msgs := chromedp.Console(ctx)
	go func() {
		for m, err := range msgs {
			if err != nil {
				return
			}
			if m.Type == chromedp.ConsoleError || m.IsException() || m.Type == chromedp.ConsoleWarning && m.Source == "security" {
				c.mu.Lock()
				c.msgs = append(c.msgs, m.String())
				c.mu.Unlock()
			}
		}
	}()
	return c
}

func (c *consoleErrors) take() []string {
	c.mu.Lock()
	defer c.mu.Unlock()
	out := c.msgs
	c.msgs = nil
	return out
}

// visit loads url, waits for the page and returns the console errors seen.
func visit(t *testing.T, ctx context.Context, cons *consoleErrors, url string) {
	t.Helper()
	tctx, cancel := context.WithTimeout(ctx, 30*time.Second)
	defer cancel()
	if err := chromedp.Do(tctx, chromedp.Navigate(url), chromedp.WaitReady(chromedp.CSS("footer"))); err != nil {
		t.Fatalf("loading %s: %v", url, err)
	}
	// Console events arrive asynchronously: a round trip to the page
	// lets those of the load come in first.
	if _, err := chromedp.Run(tctx, chromedp.Evaluate[int]("1")); err != nil {
		t.Fatal(err)
	}
	time.Sleep(100 * time.Millisecond)
	if errs := cons.take(); len(errs) > 0 {
		t.Errorf("%s: console errors:\n%s", url, strings.Join(errs, "\n"))
	}
}

func eval[T any](t *testing.T, ctx context.Context, js string) T {
	t.Helper()
	tctx, cancel := context.WithTimeout(ctx, 10*time.Second)
	defer cancel()
	v, err := chromedp.Run(tctx, chromedp.Evaluate[T](js))
	if err != nil {
		t.Fatalf("evaluating %s: %v", js, err)
	}
	return v
}

func screenshot(t *testing.T, ctx context.Context, name string) {
	t.Helper()
	tctx, cancel := context.WithTimeout(ctx, 30*time.Second)
	defer cancel()
	png, err := chromedp.Run(tctx, chromedp.FullScreenshot(100))
	if err != nil {
		t.Fatalf("screenshot: %v", err)
	}
	dirs := []string{t.TempDir()}
	if d := os.Getenv("PLUMB_WEB_DUMP"); d != "" {
		dirs = append(dirs, d)
	}
	for _, dir := range dirs {
		if err := os.WriteFile(filepath.Join(dir, name), png, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	// For a closer look: the top of the page and each section alone.
	if d := os.Getenv("PLUMB_WEB_DUMP"); d != "" {
		base := strings.TrimSuffix(name, ".png")
		top, err := chromedp.Run(tctx, chromedp.CaptureScreenshot())
		if err != nil {
			t.Fatal(err)
		}
		os.WriteFile(filepath.Join(d, base+"-top.png"), top, 0o644)
		n := eval[int](t, ctx, "document.querySelectorAll('main > section').length")
		for i := 1; i <= n; i++ {
			b, err := chromedp.Run(tctx, chromedp.Screenshot(chromedp.CSS(fmt.Sprintf("main > section:nth-of-type(%d)", i))))
			if err != nil {
				t.Fatal(err)
			}
			os.WriteFile(filepath.Join(d, fmt.Sprintf("%s-s%d.png", base, i)), b, 0o644)
		}
	}
}

func TestBrowserDashboard(t *testing.T) {
	f := buildDemoFixture(t)
	if f.equation == "" || f.exactFrom.IsZero() {
		t.Fatal("the demo data should carry an exact dependency in district_daily (total_connections); the fixture found none")
	}
	ts := newTestServer(t, f.view, "", f.now)
	ctx := newBrowser(t)
	cons := watchConsole(ctx)

	// Overview: every watch listed with its state, linked to its page.
	visit(t, ctx, cons, ts.URL+"/")
	screenshot(t, ctx, "overview.png")
	rows := eval[[]map[string]string](t, ctx, `[...document.querySelectorAll("tr[data-watch]")].map(r => ({
		name: r.dataset.watch, state: r.dataset.state,
		href: r.querySelector("a.watch").getAttribute("href"),
		spark: String(r.querySelectorAll("svg[data-chart=sparkline] path[data-series=condition_number]").length)}))`)
	want := map[string]string{"district_daily": "critical", "district_volumes": "", "zone_pressure": "blind"}
	if len(rows) != len(want) {
		t.Fatalf("overview lists %d watches, want %d: %v", len(rows), len(want), rows)
	}
	for _, r := range rows {
		st, ok := want[r["name"]]
		if !ok {
			t.Errorf("unexpected watch %q", r["name"])
			continue
		}
		if st != "" && r["state"] != st {
			t.Errorf("watch %s: state %q, want %q", r["name"], r["state"], st)
		}
		if r["href"] != "/watches/"+r["name"] {
			t.Errorf("watch %s links to %q", r["name"], r["href"])
		}
		if r["name"] != "zone_pressure" && r["spark"] != "1" {
			t.Errorf("watch %s: %s sparklines, want 1", r["name"], r["spark"])
		}
	}

	// Follow the link to the watch page.
	tctx, cancel := context.WithTimeout(ctx, 30*time.Second)
	if err := chromedp.Do(tctx, chromedp.Click(chromedp.CSS(`a.watch[href="/watches/district_daily"]`)),
		chromedp.WaitReady(chromedp.CSS("#tl-cond"))); err != nil {
		t.Fatalf("following the overview's link: %v", err)
	}
	cancel()
	if loc := eval[string](t, ctx, "location.pathname"); loc != "/watches/district_daily" {
		t.Errorf("the link led to %s", loc)
	}
	visit(t, ctx, cons, ts.URL+"/watches/district_daily")
	screenshot(t, ctx, "watch.png")

	d, err := f.view.Watch(context.Background(), "district_daily")
	if err != nil {
		t.Fatal(err)
	}
	whole := d.Segment("")
	checks := []struct {
		what, js string
		want     int
	}{
		{"condition timeline series", `document.querySelectorAll('svg[data-chart=timeline][data-metric=condition_number] path[data-series=condition_number]').length`, 1},
		{"max VIF timeline series", `document.querySelectorAll('svg[data-chart=timeline][data-metric=max_vif] path[data-series=max_vif]').length`, 1},
		{"warn levels", `document.querySelectorAll('svg[data-chart=timeline] line[data-level=warn]').length`, 2},
		{"critical levels", `document.querySelectorAll('svg[data-chart=timeline] line[data-level=critical]').length`, 2},
		{"legends", `document.querySelectorAll('svg[data-chart] g[data-legend]').length`, 5},
		{"VIF bars", `document.querySelectorAll('svg[data-chart=bars] g[data-bar]:not([data-row])').length`, len(whole.Report.Columns)},
		{"heat map cells", `document.querySelectorAll('svg[data-chart=heatmap] g[data-cells] rect').length`, len(whole.Report.Columns) * len(whole.Report.Columns)},
		{"variance split rows", `document.querySelectorAll('tbody[data-coefficient]').length`, len(whole.Report.Regression.Attribution)},
		{"run log rows", `document.querySelectorAll('tr[data-run]').length`, len(d.Runs)},
		{"inline svg charts", `document.querySelectorAll('figure.chart > svg').length`, 5},
		{"images or scripts", `document.querySelectorAll('img, script, object, iframe').length`, 0},
	}
	for _, c := range checks {
		if got := eval[int](t, ctx, c.js); got != c.want {
			t.Errorf("watch page: %s: %d, want %d", c.what, got, c.want)
		}
	}
	// The polyline of the timeline carries one vertex per point.
	segs := eval[int](t, ctx, `(document.querySelector('svg[data-metric=condition_number] path[data-series=condition_number]').getAttribute('d').match(/[ML]/g) || []).length`)
	if segs != len(whole.Timeline) {
		t.Errorf("condition timeline has %d vertices, want %d points", segs, len(whole.Timeline))
	}
	eqs := eval[[]string](t, ctx, `[...document.querySelectorAll('[data-equation] code')].map(e => e.textContent)`)
	found := false
	for _, e := range eqs {
		found = found || e == f.equation
	}
	if !found {
		t.Errorf("exact-dependency equation %q not on the page; equations there: %q", f.equation, eqs)
	}
	if !strings.Contains(f.equation, "total_connections") {
		t.Errorf("the demo's exact dependency should involve total_connections: %q", f.equation)
	}

	// The stuck sensor's segment: a constant column shown as undefined.
	visit(t, ctx, cons, ts.URL+"/watches/district_daily?segment=hillside")
	screenshot(t, ctx, "watch-hillside.png")
	undefined := eval[[]string](t, ctx, `[...document.querySelectorAll('svg[data-chart=bars] g[data-category=undefined]')].map(g => g.dataset.bar)`)
	if !containsStr(undefined, "pressure_bar") {
		t.Errorf("hillside: pressure_bar should be drawn as undefined (constant); undefined bars: %q", undefined)
	}

	// The other watches' pages load cleanly too.
	visit(t, ctx, cons, ts.URL+"/watches/district_volumes")
	screenshot(t, ctx, "watch-volumes.png")
	if n := eval[int](t, ctx, `document.querySelectorAll('svg[data-chart=timeline] path[data-series=forecast-range]').length`); n == 0 {
		t.Errorf("district_volumes: no forecast cone drawn")
	}
	visit(t, ctx, cons, ts.URL+"/watches/zone_pressure")
	screenshot(t, ctx, "watch-blind.png")
	if n := eval[int](t, ctx, `document.querySelectorAll('tr.run-row-failed').length`); n != 4 {
		t.Errorf("zone_pressure: %d failed runs in the log, want 4", n)
	}
}

func containsStr(ss []string, s string) bool {
	for _, x := range ss {
		if x == s {
			return true
		}
	}
	return false
}
