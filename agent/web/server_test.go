package web

import (
	"context"
	"errors"
	"io"
	"log/slog"
	"net"
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

// testToken is a token of the strength New asks for (random base64).
const testToken = "q7Vt0mX2bLr9sPe4KcWz8uNa"

// f0 is a fixed clock for tests that do not look at times.
var f0 = time.Date(2026, 9, 30, 12, 0, 0, 0, time.UTC)

func TestListenNeedsToken(t *testing.T) {
	cases := []struct {
		addr, token string
		ok          bool
	}{
		{"127.0.0.1:9464", "", true},
		{"localhost:9464", "", true},
		{"[::1]:9464", "", true},
		{"127.0.0.2:9464", "", true}, // all of 127/8 is loopback
		{"0.0.0.0:9464", "", false},
		{":9464", "", false}, // every interface
		{"[::]:9464", "", false},
		{"192.168.1.20:9464", "", false},
		{"dashboard.internal:9464", "", false},
		{"0.0.0.0:9464", testToken, true},
		{"192.168.1.20:9464", testToken, true},
	}
	for _, c := range cases {
		_, err := New(Options{View: &Memory{}, Listen: c.addr, Token: c.token})
		if c.ok && err != nil {
			t.Errorf("%s token=%q: %v", c.addr, c.token, err)
		}
		if !c.ok {
			if !errors.Is(err, ErrTokenRequired) {
				t.Errorf("%s without a token: err = %v, want ErrTokenRequired", c.addr, err)
			} else if !strings.Contains(err.Error(), TokenEnv) {
				t.Errorf("%s: the error should name %s: %v", c.addr, TokenEnv, err)
			}
		}
	}
	if _, err := New(Options{View: &Memory{}, Listen: "9464"}); err == nil {
		t.Errorf("a listen address without a port should be refused")
	}
}

func TestTokenRequired(t *testing.T) {
	f := buildDemoFixture(t)
	const token = testToken
	s, err := New(Options{View: f.view, Listen: "0.0.0.0:0", Token: token})
	if err != nil {
		t.Fatal(err)
	}
	// A real listener on loopback, serving the non-loopback server's handler.
	ts := httptest.NewServer(s.Handler())
	defer ts.Close()
	paths := []string{"/", "/watches/district_daily", "/metrics", "/healthz", "/api/watches", "/api/alerts", "/static/style.css"}
	for _, p := range paths {
		for _, bad := range []string{"", "wrong", token + "x", token[:len(token)-1]} {
			code, h, _ := get(t, ts.URL+p, bad)
			if code != http.StatusUnauthorized {
				t.Errorf("GET %s with token %q: %d, want 401", p, bad, code)
			}
			if !strings.HasPrefix(h.Get("WWW-Authenticate"), "Bearer") {
				t.Errorf("GET %s: 401 without a Bearer challenge", p)
			}
		}
		if code, _, body := get(t, ts.URL+p, token); code != http.StatusOK {
			t.Errorf("GET %s with the token: %d\n%s", p, code, body)
		}
	}
	// Other schemes and a token in the query string are refused.
	req, _ := http.NewRequest("GET", ts.URL+"/metrics?token="+token, nil)
	req.SetBasicAuth("plumb", token)
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if resp.StatusCode != http.StatusUnauthorized {
		t.Errorf("basic auth: %d, want 401", resp.StatusCode)
	}
}

func TestBrowserLogin(t *testing.T) {
	const token = testToken
	s, err := New(Options{View: &Memory{}, Listen: "0.0.0.0:0", Token: token})
	if err != nil {
		t.Fatal(err)
	}
	ts := httptest.NewServer(s.Handler())
	defer ts.Close()
	noRedirect := &http.Client{CheckRedirect: func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }}
	do := func(req *http.Request) (*http.Response, string) {
		t.Helper()
		resp, err := noRedirect.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		defer resp.Body.Close()
		b, _ := io.ReadAll(resp.Body)
		return resp, string(b)
	}
	// A browser asking for a page gets 401 with a form that posts the token.
	req, _ := http.NewRequest("GET", ts.URL+"/watches/x?segment=a", nil)
	req.Header.Set("Accept", "text/html,application/xhtml+xml")
	resp, body := do(req)
	if resp.StatusCode != 401 || !strings.Contains(body, `action="/login"`) || !strings.Contains(body, `value="/watches/x?segment=a"`) {
		t.Errorf("browser without a session: %d\n%s", resp.StatusCode, body)
	}
	if resp.Header.Get("Content-Security-Policy") == "" {
		t.Errorf("the login page lacks the security headers")
	}
	post := func(form string) (*http.Response, string) {
		req, _ := http.NewRequest("POST", ts.URL+"/login", strings.NewReader(form))
		req.Header.Set("Content-Type", "application/x-www-form-urlencoded")
		return do(req)
	}
	if resp, body := post("token=wrong&next=/"); resp.StatusCode != 401 || !strings.Contains(body, "not the token") || len(resp.Cookies()) != 0 {
		t.Errorf("wrong token: %d, cookies %v", resp.StatusCode, resp.Cookies())
	}
	resp, _ = post("token=" + token + "&next=//evil.example/")
	if resp.StatusCode != http.StatusSeeOther || resp.Header.Get("Location") != "/" {
		t.Errorf("login with an off-site next: %d → %q, want 303 → /", resp.StatusCode, resp.Header.Get("Location"))
	}
	cookies := resp.Cookies()
	if len(cookies) != 1 || !cookies[0].HttpOnly || cookies[0].SameSite != http.SameSiteStrictMode || strings.Contains(cookies[0].Value, token) {
		t.Fatalf("session cookie: %+v", cookies)
	}
	for _, p := range []string{"/", "/metrics", "/api/watches"} {
		req, _ := http.NewRequest("GET", ts.URL+p, nil)
		req.AddCookie(cookies[0])
		if resp, _ := do(req); resp.StatusCode != 200 {
			t.Errorf("GET %s with the session: %d", p, resp.StatusCode)
		}
		req, _ = http.NewRequest("GET", ts.URL+p, nil)
		req.AddCookie(&http.Cookie{Name: cookies[0].Name, Value: cookies[0].Value[:len(cookies[0].Value)-1] + "x"})
		if resp, _ := do(req); resp.StatusCode != 401 {
			t.Errorf("GET %s with a forged session: %d", p, resp.StatusCode)
		}
	}
	resp, _ = post("token=" + token + "&next=/watches/x")
	if resp.Header.Get("Location") != "/watches/x" {
		t.Errorf("login returns to %q", resp.Header.Get("Location"))
	}
}

func TestServerRun(t *testing.T) {
	s, err := New(Options{View: &Memory{}, Listen: "127.0.0.1:0"})
	if err != nil {
		t.Fatal(err)
	}
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- s.Serve(ctx, ln) }()
	code, _, body := get(t, "http://"+ln.Addr().String()+"/healthz", "")
	if code != 200 || !strings.Contains(body, `"ok"`) {
		t.Errorf("/healthz: %d %s", code, body)
	}
	cancel()
	if err := <-done; err != nil {
		t.Errorf("Serve after cancel: %v", err)
	}
}
