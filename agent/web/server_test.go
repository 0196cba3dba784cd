package web

import (
	"context"
	"errors"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// newTestServer serves v over a real HTTP listener on loopback.
func newTestServer(t *testing.T, v View, token string, now time.Time) *httptest.Server {
	t.Helper()
	s, err := New(Options{View: v, Token: token, Logger: slog.New(slog.NewTextHandler(t.Output(), nil)), Now: func() time.Time { return now }})
	if err != nil {
		t.Fatal(err)
	}
	ts := httptest.NewServer(s.Handler())
	t.Cleanup(ts.Close)
	return ts
}

func get(t *testing.T, url, token string) (int, http.Header, string) {
	t.Helper()
	req, err := http.NewRequestWithContext(context.Background(), "GET", url, nil)
	if err != nil {
		t.Fatal(err)
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if err != nil {
		t.Fatal(err)
	}
	return resp.StatusCode, resp.Header, string(b)
}

func TestPagesRender(t *testing.T) {
	f := buildDemoFixture(t)
	ts := newTestServer(t, f.view, "", f.now)
	dump := os.Getenv("PLUMB_WEB_DUMP") // a folder to write the pages to, for a look
	for _, path := range []string{"/", "/watches/district_daily", "/watches/district_daily?segment=hillside", "/watches/district_volumes", "/watches/zone_pressure"} {
		code, h, body := get(t, ts.URL+path, "")
		if code != 200 {
			t.Fatalf("GET %s: %d\n%s", path, code, body)
		}
		if ct := h.Get("Content-Type"); !strings.HasPrefix(ct, "text/html") {
			t.Errorf("GET %s: Content-Type %q", path, ct)
		}
		if strings.Contains(body, "<script") {
			t.Errorf("GET %s: the page carries a script", path)
		}
		if dump != "" {
			name := strings.NewReplacer("/", "_", "?", "_", "=", "_").Replace(path) + ".html"
			if err := os.WriteFile(filepath.Join(dump, name), []byte(body), 0o644); err != nil {
				t.Fatal(err)
			}
		}
	}
	code, _, _ := get(t, ts.URL+"/watches/nope", "")
	if code != 404 {
		t.Errorf("unknown watch: %d, want 404", code)
	}
}

var _ = errors.Is
