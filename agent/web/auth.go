package web

import (
	"crypto/rand"
	"crypto/sha256"
	"crypto/subtle"
	"encoding/base64"
	"html/template"
	"net/http"
	"net/url"
	"strings"
	"sync"
	"time"
	"unicode"
	"unicode/utf8"
)

// sessionCookie carries a browser's proof that it was given the token.
const sessionCookie = "plumb_session"

const (
	// sessionTTL is how long a login lasts, counted by the server.
	sessionTTL = 12 * time.Hour
	// maxSessions bounds the sessions kept; the oldest goes first.
	maxSessions = 1024
)

// auth lets a request through when it carries the bearer token, or a
// session cookie that POST /login hands out in exchange for the token (a
// browser cannot send a header of its own on a link). Each login gets a
// fresh random session that the server forgets after sessionTTL or at POST
// /logout. Everything else gets 401: a login form for a browser asking for
// a page, a line of text for the rest.
type auth struct {
	want [32]byte // SHA-256 of the token
	now  func() time.Time

	mu       sync.Mutex
	sessions map[[32]byte]time.Time // SHA-256 of the session id → expiry
}

func newAuth(token string, now func() time.Time) *auth {
	return &auth{want: sha256.Sum256([]byte(token)), now: now, sessions: map[[32]byte]time.Time{}}
}

// tokenOK compares in constant time; hashing first hides the length.
func (a *auth) tokenOK(got string) bool {
	sum := sha256.Sum256([]byte(got))
	return subtle.ConstantTimeCompare(sum[:], a.want[:]) == 1
}

// newSession starts a session and returns its id: 32 random bytes.
func (a *auth) newSession() string {
	var b [32]byte
	rand.Read(b[:]) // never fails (crypto/rand panics instead)
	id := base64.RawURLEncoding.EncodeToString(b[:])
	now := a.now()
	a.mu.Lock()
	defer a.mu.Unlock()
	var oldest [32]byte
	var oldestAt time.Time
	for k, exp := range a.sessions {
		if !now.Before(exp) {
			delete(a.sessions, k)
		} else if oldestAt.IsZero() || exp.Before(oldestAt) {
			oldest, oldestAt = k, exp
		}
	}
	if len(a.sessions) >= maxSessions {
		delete(a.sessions, oldest)
	}
	a.sessions[sha256.Sum256([]byte(id))] = now.Add(sessionTTL)
	return id
}

// sessionOK reports whether id is a live session. The map is keyed by the
// id's hash, so the lookup reveals nothing about stored ids by its timing.
func (a *auth) sessionOK(id string) bool {
	k := sha256.Sum256([]byte(id))
	a.mu.Lock()
	defer a.mu.Unlock()
	exp, ok := a.sessions[k]
	if ok && !a.now().Before(exp) {
		delete(a.sessions, k)
		return false
	}
	return ok
}

func (a *auth) endSession(id string) {
	k := sha256.Sum256([]byte(id))
	a.mu.Lock()
	delete(a.sessions, k)
	a.mu.Unlock()
}

func (a *auth) allowed(r *http.Request) bool {
	if got, ok := bearer(r.Header.Get("Authorization")); ok && a.tokenOK(got) {
		return true
	}
	if c, err := r.Cookie(sessionCookie); err == nil {
		return a.sessionOK(c.Value)
	}
	return false
}

func (a *auth) wrap(next http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		switch {
		case r.URL.Path == "/login" && r.Method == http.MethodPost:
			a.login(w, r)
		case r.URL.Path == "/logout" && r.Method == http.MethodPost:
			a.logout(w, r)
		case a.allowed(r):
			next.ServeHTTP(w, r)
		default:
			a.refuse(w, r, "")
		}
	})
}

func (a *auth) login(w http.ResponseWriter, r *http.Request) {
	r.Body = http.MaxBytesReader(w, r.Body, 4096)
	if err := r.ParseForm(); err != nil || !a.tokenOK(r.PostForm.Get("token")) {
		a.refuse(w, r, "That is not the token.")
		return
	}
	http.SetCookie(w, &http.Cookie{Name: sessionCookie, Value: a.newSession(), Path: "/", MaxAge: int(sessionTTL / time.Second),
		HttpOnly: true, Secure: r.TLS != nil, SameSite: http.SameSiteStrictMode})
	http.Redirect(w, r, localPath(r.PostForm.Get("next")), http.StatusSeeOther)
}

// logout forgets the request's session, clears the cookie and goes to the
// login form.
func (a *auth) logout(w http.ResponseWriter, r *http.Request) {
	if c, err := r.Cookie(sessionCookie); err == nil {
		a.endSession(c.Value)
	}
	http.SetCookie(w, &http.Cookie{Name: sessionCookie, Value: "", Path: "/", MaxAge: -1,
		HttpOnly: true, Secure: r.TLS != nil, SameSite: http.SameSiteStrictMode})
	http.Redirect(w, r, "/", http.StatusSeeOther)
}

// localPath returns next when it is a path on this server, else "/".
// Browsers drop tabs and newlines from addresses and read a backslash as
// a slash, so "/\t/host" and "/\\host" would lead elsewhere: any control
// character, backslash or a second leading slash is refused, and what
// remains must parse as a path without scheme or host.
func localPath(next string) string {
	if !strings.HasPrefix(next, "/") || strings.HasPrefix(next, "//") || strings.ContainsRune(next, '\\') {
		return "/"
	}
	if !utf8.ValidString(next) || strings.IndexFunc(next, func(c rune) bool { return unicode.IsControl(c) || unicode.IsSpace(c) }) >= 0 {
		return "/"
	}
	u, err := url.Parse(next)
	if err != nil || u.Scheme != "" || u.Host != "" || u.User != nil || u.Opaque != "" || !strings.HasPrefix(u.Path, "/") {
		return "/"
	}
	return next
}

var loginPage = template.Must(template.New("login").Parse(`<!doctype html>
<html lang="en"><head><meta charset="utf-8"><meta name="viewport" content="width=device-width, initial-scale=1">
<title>Token required · plumb</title></head>
<body>
<h1>plumb: token required</h1>
<p>This dashboard listens beyond this machine, so it asks for its token (the value of {{.Env}} where it runs).
Programs send it as <code>Authorization: Bearer TOKEN</code>; a browser can exchange it for a session cookie here.</p>
{{if .Message}}<p role="alert"><strong>{{.Message}}</strong></p>{{end}}
<form method="post" action="/login">
<input type="hidden" name="next" value="{{.Next}}">
<label>Token <input type="password" name="token" autocomplete="current-password" required autofocus></label>
<button type="submit">Open the dashboard</button>
</form>
</body></html>
`))

func (a *auth) refuse(w http.ResponseWriter, r *http.Request, msg string) {
	w.Header().Set("WWW-Authenticate", `Bearer realm="plumb"`)
	w.Header().Set("Cache-Control", "no-store")
	if r.Method == http.MethodGet && strings.Contains(r.Header.Get("Accept"), "text/html") || r.URL.Path == "/login" {
		w.Header().Set("Content-Type", "text/html; charset=utf-8")
		w.WriteHeader(http.StatusUnauthorized)
		next := r.URL.RequestURI()
		if r.URL.Path == "/login" {
			next = r.PostForm.Get("next")
		}
		loginPage.Execute(w, struct{ Env, Message, Next string }{TokenEnv, msg, localPath(next)})
		return
	}
	http.Error(w, "401 unauthorized: send the token as \"Authorization: Bearer TOKEN\"", http.StatusUnauthorized)
}
