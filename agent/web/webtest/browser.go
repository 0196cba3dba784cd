// Package webtest drives Debian's chromium over the dashboard for tests:
// it starts a headless browser in a fresh profile, loads pages, collects
// console errors, evaluates checks in the page and writes screenshots.
// Tests of any package that serves the dashboard (web, the CLI's demo)
// use it.
package webtest

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

// ChromiumPath is where Debian installs chromium.
const ChromiumPath = "/usr/bin/chromium"

// DumpEnv names a folder that, when set, also receives the screenshots
// (whole pages, their tops and each section), for a look by a person.
const DumpEnv = "PLUMB_WEB_DUMP"

// Browser is a headless chromium tab.
type Browser struct {
	t       testing.TB
	ctx     context.Context
	mu      sync.Mutex
	console []string
}

// NewBrowser starts chromium headless with a fresh profile in a temporary
// folder, or skips the test when chromium is missing, except under
// CI=true where it fails. The browser ends with the test.
func NewBrowser(t testing.TB) *Browser {
	t.Helper()
	if _, err := os.Stat(ChromiumPath); err != nil {
		if os.Getenv("CI") == "true" {
			t.Fatalf("%s is missing (apt-get install chromium): %v", ChromiumPath, err)
		}
		t.Skipf("%s is missing: install Debian's chromium (apt-get install -y chromium) to run the browser tests", ChromiumPath)
	}
	actx, cancelAlloc := chromedp.NewExecAllocator(context.Background(),
		chromedp.ExecPath(ChromiumPath),
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
	// The first run starts the browser; it must not carry a timeout.
	if err := chromedp.Do(ctx); err != nil {
		t.Fatalf("starting chromium: %v", err)
	}
	b := &Browser{t: t, ctx: ctx}
	msgs := chromedp.Console(ctx)
	go func() {
		for m, err := range msgs {
			if err != nil {
				return
			}
			if m.Type == chromedp.ConsoleError || m.IsException() || (m.Type == chromedp.ConsoleWarning && m.Source == "security") {
				b.mu.Lock()
				b.console = append(b.console, m.String())
				b.mu.Unlock()
			}
		}
	}()
	return b
}

// Context is the tab's chromedp context, for actions of one's own.
func (b *Browser) Context() context.Context { return b.ctx }

// ConsoleErrors returns and forgets the console errors, exceptions and
// security warnings seen since the last call.
func (b *Browser) ConsoleErrors() []string {
	b.mu.Lock()
	defer b.mu.Unlock()
	out := b.console
	b.console = nil
	return out
}

// Visit loads url, waits for the page's footer, and fails the test (not
// at once) for every console error the load caused.
func (b *Browser) Visit(url string) {
	b.t.Helper()
	ctx, cancel := context.WithTimeout(b.ctx, 30*time.Second)
	defer cancel()
	if err := chromedp.Do(ctx, chromedp.Navigate(url), chromedp.WaitReady(chromedp.CSS("footer"))); err != nil {
		b.t.Fatalf("loading %s: %v", url, err)
	}
	// Console events arrive on their own: a round trip to the page and a
	// short pause let those of the load come in.
	if _, err := chromedp.Run(ctx, chromedp.Evaluate[int]("1")); err != nil {
		b.t.Fatal(err)
	}
	time.Sleep(150 * time.Millisecond)
	if errs := b.ConsoleErrors(); len(errs) > 0 {
		b.t.Errorf("%s: console errors:\n%s", url, strings.Join(errs, "\n"))
	}
}

// Click clicks the first element matching the CSS selector and waits for
// the element matching waitFor on the page it leads to.
func (b *Browser) Click(selector, waitFor string) {
	b.t.Helper()
	ctx, cancel := context.WithTimeout(b.ctx, 30*time.Second)
	defer cancel()
	if err := chromedp.Do(ctx, chromedp.Click(chromedp.CSS(selector)), chromedp.WaitReady(chromedp.CSS(waitFor))); err != nil {
		b.t.Fatalf("clicking %s: %v", selector, err)
	}
}

// Eval evaluates a JavaScript expression in the page and decodes its
// value into T.
func Eval[T any](b *Browser, js string) T {
	b.t.Helper()
	ctx, cancel := context.WithTimeout(b.ctx, 10*time.Second)
	defer cancel()
	v, err := chromedp.Run(ctx, chromedp.Evaluate[T](js))
	if err != nil {
		b.t.Fatalf("evaluating %s: %v", js, err)
	}
	return v
}

// Screenshot writes a PNG of the whole page as name into the test's
// temporary folder and returns its path; with DumpEnv set it also writes
// it there, with the top of the page and each section of main apart.
func (b *Browser) Screenshot(name string) string {
	b.t.Helper()
	ctx, cancel := context.WithTimeout(b.ctx, 30*time.Second)
	defer cancel()
	png, err := chromedp.Run(ctx, chromedp.FullScreenshot(100))
	if err != nil {
		b.t.Fatalf("screenshot: %v", err)
	}
	path := filepath.Join(b.t.TempDir(), name)
	if err := os.WriteFile(path, png, 0o644); err != nil {
		b.t.Fatal(err)
	}
	dir := os.Getenv(DumpEnv)
	if dir == "" {
		return path
	}
	base := strings.TrimSuffix(name, ".png")
	write := func(name string, data []byte) {
		if err := os.WriteFile(filepath.Join(dir, name), data, 0o644); err != nil {
			b.t.Fatal(err)
		}
	}
	write(name, png)
	top, err := chromedp.Run(ctx, chromedp.CaptureScreenshot())
	if err != nil {
		b.t.Fatal(err)
	}
	write(base+"-top.png", top)
	n := Eval[int](b, "document.querySelectorAll('main > section').length")
	for i := 1; i <= n; i++ {
		shot, err := chromedp.Run(ctx, chromedp.Screenshot(chromedp.CSS(fmt.Sprintf("main > section:nth-of-type(%d)", i))))
		if err != nil {
			b.t.Fatal(err)
		}
		write(fmt.Sprintf("%s-s%d.png", base, i), shot)
	}
	return path
}
