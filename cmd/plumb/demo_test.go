package main

import (
	"bufio"
	"context"
	"io"
	"net/http"
	"os"
	"path/filepath"
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
	// The scenario's upstream change on day 70 (2026-08-10) makes the
	// total an exact sum: the report must show the exact alert on that
	// data day, and the stuck hillside sensor from day 85 (2026-08-25).
	for _, want := range []string{"exact", "2026-08-", "hillside", "constant", "omitted-variable bias"} {
		if !strings.Contains(out, want) {
			t.Errorf("demo report lacks %q:\n%s", want, out)
		}
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
