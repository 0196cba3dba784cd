package web

import (
	"crypto/hmac"
	"crypto/sha256"
	"crypto/subtle"
	"encoding/hex"
	"html/template"
	"net/http"
	"strings"
)

// sessionCookie carries a browser's proof that it was given the token.
const sessionCookie = "plumb_session"

// auth lets a request through when it carries the bearer token, or the
// session cookie that POST /login sets in exchange for the token (a
// browser cannot send a header of its own on a link). Everything else
// gets 401: a login form for a browser asking for a page, a line of text
// for the rest.
type auth struct {
	want    [32]byte // SHA-256 of the token
	session string   // cookie value: HMAC-SHA256 of a fixed label, keyed by the token
}

func newAuth(token string) *auth {
	m := hmac.New(sha256.New, []byte(token))
	m.Write([]byte("plumb dashboard session v1"))
	return &auth{want: sha256.Sum256([]byte(token)), session: hex.EncodeToString(m.Sum(nil))}
}

// tokenOK compares in constant time; hashing first hides the length.
func (a *auth) tokenOK(got string) bool {
	sum := sha256.Sum256([]byte(got))
	return subtle.ConstantTimeCompare(sum[:], a.want[:]) == 1
}

func (a *auth) allowed(r *http.Request) bool {
	if got, ok := bearer(r.Header.Get("Authorization")); ok && a.tokenOK(got) {
		return true
	}
	if c, err := r.Cookie(sessionCookie); err == nil {
		return subtle.ConstantTimeCompare([]byte(c.Value), []byte(a.session)) == 1
	}
	return false
}

func (a *auth) wrap(next http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if r.URL.Path == "/login" && r.Method == http.MethodPost {
			a.login(w, r)
			return
		}
		if a.allowed(r) {
			next.ServeHTTP(w, r)
			return
		}
		a.refuse(w, r, "")
	})
}

func (a *auth) login(w http.ResponseWriter, r *http.Request) {
	r.Body = http.MaxBytesReader(w, r.Body, 4096)
	if err := r.ParseForm(); err != nil || !a.tokenOK(r.PostForm.Get("token")) {
		a.refuse(w, r, "That is not the token.")
		return
	}
	http.SetCookie(w, &http.Cookie{Name: sessionCookie, Value: a.session, Path: "/", MaxAge: 12 * 3600,
		HttpOnly: true, Secure: r.TLS != nil, SameSite: http.SameSiteStrictMode})
	next := r.PostForm.Get("next")
	if !strings.HasPrefix(next, "/") || strings.HasPrefix(next, "//") || strings.ContainsAny(next, "\\\r\n") {
		next = "/"
	}
	http.Redirect(w, r, next, http.StatusSeeOther)
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
		loginPage.Execute(w, struct{ Env, Message, Next string }{TokenEnv, msg, next})
		return
	}
	http.Error(w, "401 unauthorized: send the token as \"Authorization: Bearer TOKEN\"", http.StatusUnauthorized)
}
