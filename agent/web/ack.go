package web

import (
	"context"
	"errors"
	"fmt"
	"net/http"
	"net/url"
	"strings"
	"time"
	"unicode/utf8"
)

// Acknowledger is implemented by a View that can record an owner's
// acknowledgement of an open alert (the store-backed one does). The
// dashboard offers the form only when its View is one.
//
// Acknowledge records that by knows about the open alert id of watch,
// until the given time (zero: until it resolves or escalates), with a
// note. An unknown watch or alert wraps ErrNotFound, a resolved alert
// ErrResolved.
type Acknowledger interface {
	Acknowledge(ctx context.Context, watch, id, by, note string, until time.Time) error
}

// ErrResolved is wrapped by Acknowledger.Acknowledge for an alert that is
// resolved already.
var ErrResolved = errors.New("the alert is resolved")

// AlertAck is an owner's acknowledgement as the dashboard shows it. Times
// are wall-clock times.
type AlertAck struct {
	By    string    `json:"by"`
	At    time.Time `json:"at"`
	Until time.Time `json:"until,omitzero"` // zero: until it resolves or escalates
	Note  string    `json:"note,omitempty"`
	// Lapsed: the snooze ended or the alert escalated past what was
	// acknowledged, so it is notified again.
	Lapsed bool `json:"lapsed,omitempty"`
}

// Snoozes the dashboard offers, and how they read.
var snoozeChoices = []struct {
	Value, Label string
	D            time.Duration
}{
	{"", "until it resolves or escalates", 0},
	{"4h", "for 4 hours", 4 * time.Hour},
	{"1d", "for a day", 24 * time.Hour},
	{"3d", "for 3 days", 72 * time.Hour},
	{"7d", "for a week", 7 * 24 * time.Hour},
}

// Limits of the acknowledgement form's fields.
const (
	maxAckNote = 1000
	maxAckName = 80
)

// ackRoutes registers the acknowledgement form's handler. Browsers are
// kept from posting it from another site (Sec-Fetch-Site and Origin
// checks); off loopback the token or its session is required as for
// every page.
func (s *Server) ackRoutes(mux *http.ServeMux) {
	if _, ok := s.opt.View.(Acknowledger); !ok {
		return
	}
	mux.Handle("POST /watches/{name}/alerts/{id}/ack", http.NewCrossOriginProtection().Handler(http.HandlerFunc(s.ackAlert)))
}

func (s *Server) ackAlert(w http.ResponseWriter, r *http.Request) {
	ack := s.opt.View.(Acknowledger)
	name, id := r.PathValue("name"), r.PathValue("id")
	r.Body = http.MaxBytesReader(w, r.Body, 16<<10)
	if err := r.ParseForm(); err != nil {
		http.Error(w, "400 bad request: the form could not be read", http.StatusBadRequest)
		return
	}
	f := r.PostForm
	var until time.Time
	found := false
	for _, c := range snoozeChoices {
		if f.Get("for") == c.Value {
			found = true
			if c.D > 0 {
				until = s.opt.Now().Add(c.D)
			}
		}
	}
	note := strings.TrimSpace(f.Get("note"))
	who := strings.TrimSpace(f.Get("by"))
	switch {
	case !found:
		http.Error(w, "400 bad request: unknown snooze "+f.Get("for"), http.StatusBadRequest)
		return
	case utf8.RuneCountInString(note) > maxAckNote || !utf8.ValidString(note):
		http.Error(w, fmt.Sprintf("400 bad request: the note is limited to %d characters", maxAckNote), http.StatusBadRequest)
		return
	case utf8.RuneCountInString(who) > maxAckName || !utf8.ValidString(who) || strings.ContainsAny(who, "\r\n"):
		http.Error(w, fmt.Sprintf("400 bad request: the name is limited to %d characters on one line", maxAckName), http.StatusBadRequest)
		return
	}
	by := "dashboard"
	if who != "" {
		by = "dashboard: " + who
	}
	ctx, cancel := context.WithTimeout(r.Context(), apiTimeout)
	defer cancel()
	err := ack.Acknowledge(ctx, name, id, by, note, until)
	switch {
	case errors.Is(err, ErrNotFound):
		http.Error(w, fmt.Sprintf("404 not found: watch %q has no alert %q", name, id), http.StatusNotFound)
		return
	case errors.Is(err, ErrResolved):
		http.Error(w, "409 conflict: the alert is resolved already", http.StatusConflict)
		return
	case err != nil:
		s.opt.Logger.Error("acknowledging an alert", "watch", name, "alert", id, "err", err)
		http.Error(w, "503 service unavailable: the state store could not record it (see the log)", http.StatusServiceUnavailable)
		return
	}
	s.opt.Logger.Info("alert acknowledged", "watch", name, "alert", id, "by", by, "until", until)
	http.Redirect(w, r, watchURL(name, f.Get("segment"))+"#alert-"+url.PathEscape(id), http.StatusSeeOther)
}

// ackURL is where an alert's acknowledgement form posts.
func ackURL(watch, id string) string {
	return "/watches/" + url.PathEscape(watch) + "/alerts/" + url.PathEscape(id) + "/ack"
}

func init() {
	funcs["ackURL"] = ackURL
	funcs["snoozes"] = func() any { return snoozeChoices }
}
