package web

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"net/http"
	"strings"
	"time"
	"unicode"
	"unicode/utf8"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promhttp"
)

// DefaultListen is the address the server listens on unless told
// otherwise: loopback only, so no token is needed. 7586 spells PLUM on a
// telephone keypad; no well-known exporter or SDK claims it.
const DefaultListen = "127.0.0.1:7586"

// TokenEnv is the environment variable the command line reads the bearer
// token from.
const TokenEnv = "PLUMB_HTTP_TOKEN"

// ErrTokenRequired is returned by New for a listen address that is not a
// loopback address when no token is given.
var ErrTokenRequired = errors.New("a bearer token is required")

// ErrWeakToken is returned by New for a token too short to resist
// guessing.
var ErrWeakToken = errors.New("the bearer token is too weak")

// MinTokenLength is the fewest characters a token may have: 22 random
// characters of the 64 of base64 carry 132 bits.
const MinTokenLength = 22

// MakeTokenHint tells how to make a good token.
const MakeTokenHint = "make one with: head -c 18 /dev/urandom | base64"

// Options configure a Server.
type Options struct {
	// Listen is the TCP address (host:port); "" means DefaultListen.
	Listen string
	// Token, when not empty, must be presented by every request as
	// "Authorization: Bearer TOKEN". It is required when Listen is not a
	// loopback address.
	Token string
	// View supplies what is shown; required.
	View View
	// Logger receives request errors; nil discards them.
	Logger *slog.Logger
	// Now is the clock for "ago" texts; nil means time.Now.
	Now func() time.Time
	// ScrapeTimeout bounds the View calls of one /metrics scrape
	// (default 10s).
	ScrapeTimeout time.Duration
}

// Server serves the dashboard, the JSON API, /healthz and /metrics.
type Server struct {
	opt     Options
	handler http.Handler
	pages   *pages
}

// New checks the options and builds the server. A listen address that is
// not loopback without a token is refused with ErrTokenRequired.
func New(opt Options) (*Server, error) {
	if opt.View == nil {
		panic("web: New: Options.View is nil")
	}
	if opt.Listen == "" {
		opt.Listen = DefaultListen
	}
	if opt.Logger == nil {
		opt.Logger = slog.New(slog.DiscardHandler)
	}
	if opt.Now == nil {
		opt.Now = time.Now
	}
	if opt.ScrapeTimeout <= 0 {
		opt.ScrapeTimeout = 10 * time.Second
	}
	if err := CheckListen(opt.Listen, opt.Token); err != nil {
		return nil, err
	}
	p, err := newPages(opt.Token != "")
	if err != nil {
		return nil, err
	}
	s := &Server{opt: opt, pages: p}
	reg := prometheus.NewRegistry()
	reg.MustRegister(NewCollector(opt.View, opt.ScrapeTimeout))
	s.handler = s.routes(promhttp.HandlerFor(reg, promhttp.HandlerOpts{
		ErrorLog:      slogPrinter{opt.Logger},
		ErrorHandling: promhttp.ContinueOnError,
	}))
	return s, nil
}

// CheckListen reports whether addr may be served with token: any
// address but a loopback one needs a token, and a token, wherever given,
// must pass CheckToken.
func CheckListen(addr, token string) error {
	host, _, err := net.SplitHostPort(addr)
	if err != nil {
		return fmt.Errorf("listen address %q: %w (want host:port, e.g. %s)", addr, err, DefaultListen)
	}
	if token != "" {
		return CheckToken(token)
	}
	if isLoopback(host) {
		return nil
	}
	return fmt.Errorf("listen address %q is reachable from other machines, so %w: set %s (%s), or listen on %s",
		addr, ErrTokenRequired, TokenEnv, MakeTokenHint, DefaultListen)
}

// CheckToken refuses a token that is easy to guess: shorter than
// MinTokenLength, with fewer than 8 distinct characters, or holding
// spaces or control characters (which a header cannot carry intact).
// Length is what can be checked; the characters must also be random.
func CheckToken(token string) error {
	if strings.IndexFunc(token, func(c rune) bool { return unicode.IsSpace(c) || unicode.IsControl(c) }) >= 0 {
		return fmt.Errorf("%s: %w: it holds spaces or control characters; %s", TokenEnv, ErrWeakToken, MakeTokenHint)
	}
	distinct := map[rune]bool{}
	for _, c := range token {
		distinct[c] = true
	}
	if n := utf8.RuneCountInString(token); n < MinTokenLength || len(distinct) < 8 {
		return fmt.Errorf("%s: %w: %d characters (%d distinct), want at least %d random ones (128 bits); %s",
			TokenEnv, ErrWeakToken, n, len(distinct), MinTokenLength, MakeTokenHint)
	}
	return nil
}

func isLoopback(host string) bool {
	if strings.EqualFold(host, "localhost") {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}

// Handler returns the server's HTTP handler (with authentication).
func (s *Server) Handler() http.Handler { return s.handler }

// Addr returns the listen address.
func (s *Server) Addr() string { return s.opt.Listen }

// Run listens and serves until ctx is done, then shuts down, giving
// requests in flight up to five seconds.
func (s *Server) Run(ctx context.Context) error {
	ln, err := net.Listen("tcp", s.opt.Listen)
	if err != nil {
		return fmt.Errorf("dashboard: %w", err)
	}
	return s.Serve(ctx, ln)
}

// Serve serves on ln until ctx is done.
func (s *Server) Serve(ctx context.Context, ln net.Listener) error {
	hs := &http.Server{
		Handler:           s.handler,
		ReadHeaderTimeout: 10 * time.Second,
		ReadTimeout:       30 * time.Second,
		WriteTimeout:      60 * time.Second,
		IdleTimeout:       2 * time.Minute,
		ErrorLog:          slog.NewLogLogger(s.opt.Logger.Handler(), slog.LevelWarn),
	}
	errc := make(chan error, 1)
	go func() { errc <- hs.Serve(ln) }()
	select {
	case err := <-errc:
		return fmt.Errorf("dashboard: %w", err)
	case <-ctx.Done():
	}
	sctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	if err := hs.Shutdown(sctx); err != nil {
		hs.Close()
	}
	if err := <-errc; err != nil && !errors.Is(err, http.ErrServerClosed) {
		return fmt.Errorf("dashboard: %w", err)
	}
	return nil
}

func (s *Server) routes(metrics http.Handler) http.Handler {
	mux := http.NewServeMux()
	mux.Handle("GET /static/", http.FileServerFS(staticFS))
	mux.HandleFunc("GET /healthz", s.healthz)
	mux.Handle("GET /metrics", metrics)
	mux.HandleFunc("GET /{$}", s.overview)
	mux.HandleFunc("GET /watches/{name}", s.watchPage)
	mux.HandleFunc("GET /alerts", s.alertsPage)
	mux.HandleFunc("GET /api/watches", s.apiWatches)
	mux.HandleFunc("GET /api/watches/{name}", s.apiWatch)
	mux.HandleFunc("GET /api/watches/{name}/history", s.apiHistory)
	mux.HandleFunc("GET /api/watches/{name}/runs", s.apiRuns)
	mux.HandleFunc("GET /api/watches/{name}/report", s.apiReport)
	mux.HandleFunc("GET /api/alerts", s.apiAlerts)
	s.ackRoutes(mux)
	var h http.Handler = mux
	if s.opt.Token != "" {
		h = newAuth(s.opt.Token, s.opt.Now).wrap(h)
	} else {
		h = loopbackHosts(s.opt.Listen, h)
	}
	return securityHeaders(h)
}

// loopbackHosts guards a listener without a token against DNS rebinding:
// a web page the operator visits could point its own name at 127.0.0.1
// and read the reports. Only requests naming this machine's loopback (or
// the listen address itself) in Host get through; browsers always send
// the name they resolved.
func loopbackHosts(listen string, next http.Handler) http.Handler {
	listenHost, _, _ := net.SplitHostPort(listen)
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if !hostAllowed(r.Host, listenHost) {
			w.Header().Set("Cache-Control", "no-store")
			http.Error(w, "421 misdirected request: this dashboard answers only to a loopback host name such as localhost or 127.0.0.1",
				http.StatusMisdirectedRequest)
			return
		}
		next.ServeHTTP(w, r)
	})
}

func hostAllowed(hostport, listenHost string) bool {
	if hostport == "" {
		return true // HTTP/1.0 without Host: not a browser
	}
	host := hostport
	if h, _, err := net.SplitHostPort(hostport); err == nil {
		host = h
	} else if strings.HasPrefix(host, "[") && strings.HasSuffix(host, "]") {
		host = host[1 : len(host)-1]
	}
	host = strings.TrimSuffix(host, ".")
	if listenHost != "" && strings.EqualFold(host, strings.Trim(listenHost, "[]")) {
		return true
	}
	return isLoopback(host) || strings.HasSuffix(strings.ToLower(host), ".localhost")
}

func bearer(h string) (string, bool) {
	const prefix = "bearer "
	if len(h) < len(prefix) || !strings.EqualFold(h[:len(prefix)], prefix) {
		return "", false
	}
	return strings.TrimSpace(h[len(prefix):]), true
}

// securityHeaders forbids scripts and framing: the pages need neither.
func securityHeaders(next http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		h := w.Header()
		h.Set("Content-Security-Policy", "default-src 'none'; style-src 'self'; img-src 'self' data:; frame-ancestors 'none'; base-uri 'none'; form-action 'self'")
		h.Set("X-Content-Type-Options", "nosniff")
		h.Set("Referrer-Policy", "no-referrer")
		next.ServeHTTP(w, r)
	})
}

func (s *Server) healthz(w http.ResponseWriter, r *http.Request) {
	ctx, cancel := context.WithTimeout(r.Context(), 5*time.Second)
	defer cancel()
	if _, err := s.opt.View.Watches(ctx); err != nil {
		s.opt.Logger.Warn("healthz: state store unreadable", "err", err)
		writeJSON(w, http.StatusServiceUnavailable, map[string]string{"status": "unavailable", "error": err.Error()})
		return
	}
	writeJSON(w, http.StatusOK, map[string]string{"status": "ok"})
}

// slogPrinter adapts a logger to promhttp's Println interface.
type slogPrinter struct{ l *slog.Logger }

func (p slogPrinter) Println(v ...any) { p.l.Warn("metrics", "err", fmt.Sprint(v...)) }
