package web

import (
	"errors"
	"io"
	"net/http"
	"net/http/httptest"
	"net/url"
	"strings"
	"sync"
	"testing"
	"time"
)

// A listener without a token answers only loopback host names: a page
// that points its own name at 127.0.0.1 (DNS rebinding) gets no data.
func TestLoopbackHostOnly(t *testing.T) {
	f := buildDemoFixture(t)
	ts := newTestServer(t, f.view, "", f.now)
	_, port, _ := strings.Cut(strings.TrimPrefix(ts.URL, "http://"), ":")
	for _, c := range []struct {
		host string
		ok   bool
	}{
		{"127.0.0.1:" + port, true},
		{"localhost:" + port, true},
		{"LOCALHOST", true},
		{"[::1]:" + port, true},
		{"127.0.0.2:" + port, true},
		{"dash.localhost:" + port, true},
		{"localhost.:" + port, true},
		{"rebind.evil.example:" + port, false},
		{"evil.example", false},
		{"localhost.evil.example:" + port, false},
		{"192.168.1.20:" + port, false},
		{"0.0.0.0:" + port, false},
	} {
		for _, path := range []string{"/api/watches", "/metrics", "/", "/healthz", "/static/style.css"} {
			req, _ := http.NewRequest("GET", ts.URL+path, nil)
			req.Host = c.host
			resp, err := http.DefaultClient.Do(req)
			if err != nil {
				t.Fatal(err)
			}
			b, _ := io.ReadAll(resp.Body)
			resp.Body.Close()
			if c.ok && resp.StatusCode != 200 {
				t.Errorf("Host %q GET %s: %d, want 200", c.host, path, resp.StatusCode)
			}
			if !c.ok && (resp.StatusCode != http.StatusMisdirectedRequest || strings.Contains(string(b), "district_daily")) {
				t.Errorf("Host %q GET %s: %d, want 421 and no data\n%.200s", c.host, path, resp.StatusCode, b)
			}
		}
	}
	// The listen address itself is accepted as Host.
	s, err := New(Options{View: f.view, Listen: "localhost:9464"})
	if err != nil {
		t.Fatal(err)
	}
	rec := httptest.NewRecorder()
	req := httptest.NewRequest("GET", "/healthz", nil)
	req.Host = "localhost:9464"
	s.Handler().ServeHTTP(rec, req)
	if rec.Code != 200 {
		t.Errorf("Host = listen address: %d", rec.Code)
	}
}

// settableClock is a clock the test moves while the server reads it.
type settableClock struct {
	mu sync.Mutex
	t  time.Time
}

func (c *settableClock) now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.t
}

func (c *settableClock) add(d time.Duration) {
	c.mu.Lock()
	c.t = c.t.Add(d)
	c.mu.Unlock()
}

// Each login gets its own random session, which the server forgets at
// logout and after sessionTTL, whatever the browser keeps.
func TestSessions(t *testing.T) {
	clock := &settableClock{t: f0}
	s, err := New(Options{View: &Memory{}, Listen: "0.0.0.0:0", Token: testToken, Now: clock.now})
	if err != nil {
		t.Fatal(err)
	}
	ts := httptest.NewServer(s.Handler())
	defer ts.Close()
	noRedirect := &http.Client{CheckRedirect: func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }}
	login := func() *http.Cookie {
		t.Helper()
		resp, err := noRedirect.PostForm(ts.URL+"/login", url.Values{"token": {testToken}, "next": {"/"}})
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		cs := resp.Cookies()
		if resp.StatusCode != http.StatusSeeOther || len(cs) != 1 || cs[0].Name != sessionCookie {
			t.Fatalf("login: %d, cookies %v", resp.StatusCode, cs)
		}
		return cs[0]
	}
	status := func(c *http.Cookie, method, path string) int {
		t.Helper()
		req, _ := http.NewRequest(method, ts.URL+path, nil)
		req.AddCookie(c)
		resp, err := noRedirect.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		return resp.StatusCode
	}
	a, b := login(), login()
	if a.Value == b.Value {
		t.Fatalf("two logins got the same session %q", a.Value)
	}
	if len(a.Value) < 40 {
		t.Errorf("session id %q is short", a.Value)
	}
	if status(a, "GET", "/api/watches") != 200 || status(b, "GET", "/api/watches") != 200 {
		t.Fatal("fresh sessions refused")
	}
	// Logout ends a, not b.
	if code := status(a, "POST", "/logout"); code != http.StatusSeeOther {
		t.Errorf("logout: %d", code)
	}
	if code := status(a, "GET", "/api/watches"); code != 401 {
		t.Errorf("session after logout: %d, want 401", code)
	}
	if code := status(b, "GET", "/api/watches"); code != 200 {
		t.Errorf("the other session after a logout: %d, want 200", code)
	}
	// The server's clock, not the cookie's age, ends b.
	clock.add(sessionTTL - time.Minute)
	if code := status(b, "GET", "/api/watches"); code != 200 {
		t.Errorf("session a minute before expiry: %d", code)
	}
	clock.add(time.Minute)
	if code := status(b, "GET", "/api/watches"); code != 401 {
		t.Errorf("expired session: %d, want 401", code)
	}
}

func TestSessionBound(t *testing.T) {
	clock := &settableClock{t: f0}
	a := newAuth(testToken, clock.now)
	first := a.newSession()
	for range maxSessions {
		clock.add(time.Second)
		a.newSession()
	}
	if len(a.sessions) != maxSessions || a.sessionOK(first) {
		t.Errorf("%d sessions kept, oldest alive %v; want %d and the oldest gone", len(a.sessions), a.sessionOK(first), maxSessions)
	}
}

// After login the browser goes back only to a path on this server.
func TestLoginNextStaysLocal(t *testing.T) {
	s, err := New(Options{View: &Memory{}, Listen: "0.0.0.0:0", Token: testToken})
	if err != nil {
		t.Fatal(err)
	}
	ts := httptest.NewServer(s.Handler())
	defer ts.Close()
	noRedirect := &http.Client{CheckRedirect: func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }}
	for _, c := range []struct{ next, want string }{
		{"/watches/x?segment=a", "/watches/x?segment=a"},
		{"/api/alerts?state=open", "/api/alerts?state=open"},
		{"/\t/evil.example", "/"},
		{"/\n/evil.example", "/"},
		{"/\r/evil.example", "/"},
		{"/ /evil.example", "/"},
		{"/\x00/evil.example", "/"},
		{"/\u2028/evil.example", "/"},
		{"//evil.example/", "/"},
		{"/\\evil.example", "/"},
		{"\\/evil.example", "/"},
		{"https://evil.example/", "/"},
		{"evil.example", "/"},
		{"", "/"},
		{"/%09/evil.example", "/%09/evil.example"}, // stays a path: escaped
		{"/\xff", "/"},
	} {
		resp, err := noRedirect.PostForm(ts.URL+"/login", url.Values{"token": {testToken}, "next": {c.next}})
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		if got := resp.Header.Get("Location"); resp.StatusCode != http.StatusSeeOther || got != c.want {
			t.Errorf("next=%q: %d → %q, want 303 → %q", c.next, resp.StatusCode, got, c.want)
		}
	}
}

// A token that can be guessed is refused, with a way to make a good one.
func TestWeakTokenRefused(t *testing.T) {
	for _, tok := range []string{"x", " ", "c0rrect-horse", strings.Repeat("a", 40), "q7Vt0mX2bLr9sPe4KcWz8", "q7Vt0mX2bLr9 sPe4KcWz8uNa", "q7Vt0mX2bLr9\x1bsPe4KcWz8uNa"} {
		for _, addr := range []string{"0.0.0.0:9464", "127.0.0.1:9464"} {
			_, err := New(Options{View: &Memory{}, Listen: addr, Token: tok})
			if !errors.Is(err, ErrWeakToken) || !strings.Contains(err.Error(), "/dev/urandom") {
				t.Errorf("token %q on %s: err = %v, want ErrWeakToken with a hint", tok, addr, err)
			}
			if err != nil && len(tok) > 1 && strings.Contains(err.Error(), tok) {
				t.Errorf("the error shows the token: %v", err)
			}
		}
	}
	for _, tok := range []string{testToken, "3f9a0c6e1b7d24e58a9c0f1d2b3e4a5c"} {
		if _, err := New(Options{View: &Memory{}, Listen: "0.0.0.0:9464", Token: tok}); err != nil {
			t.Errorf("token %q: %v", tok, err)
		}
	}
}
