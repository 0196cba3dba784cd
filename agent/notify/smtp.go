package notify

import (
	"context"
	"crypto/tls"
	"encoding/json"
	"errors"
	"fmt"
	"net"
	"net/smtp"
	"net/textproto"
	"sort"
	"strings"
	"time"

	"plumb/agent"
	"plumb/connectors"
)

// SMTP sends each notification as a plain-text email.
type SMTP struct {
	Addr     string // host:port
	From     string
	To       []string
	Username string
	Password string
	// StartTLS upgrades the connection before anything is sent and fails
	// when the server cannot; without it the server must be on the
	// loopback interface.
	StartTLS  bool
	TLSConfig *tls.Config // nil means the system roots, server name from Addr
	Now       func() time.Time
}

var _ agent.Notifier = (*SMTP)(nil)

// Notify sends one delivery. Network errors and 4xx replies are retried;
// 5xx replies are not.
func (s *SMTP) Notify(ctx context.Context, d agent.Delivery) (bool, error) {
	var n agent.Notification
	if err := json.Unmarshal(d.Body, &n); err != nil {
		return false, fmt.Errorf("smtp notifier: %w", err)
	}
	host, _, err := net.SplitHostPort(s.Addr)
	if err != nil {
		return false, fmt.Errorf("smtp %s: %w", s.Addr, err)
	}
	if !s.StartTLS && !isLoopback(host) {
		return false, fmt.Errorf("smtp %s: refusing to send without STARTTLS to a server that is not on this machine", s.Addr)
	}
	var dialer net.Dialer
	conn, err := dialer.DialContext(ctx, "tcp", s.Addr)
	if err != nil {
		return true, fmt.Errorf("smtp %s: %w", s.Addr, err)
	}
	if dl, ok := ctx.Deadline(); ok {
		conn.SetDeadline(dl)
	}
	stop := context.AfterFunc(ctx, func() { conn.SetDeadline(time.Now()) })
	defer stop()
	c, err := smtp.NewClient(conn, host)
	if err != nil {
		conn.Close()
		return classify(s.Addr, err)
	}
	defer c.Close()
	if err := c.Hello("plumb.localhost"); err != nil {
		return classify(s.Addr, err)
	}
	if s.StartTLS {
		if ok, _ := c.Extension("STARTTLS"); !ok {
			return false, fmt.Errorf("smtp %s: the server does not offer STARTTLS", s.Addr)
		}
		cfg := s.TLSConfig
		if cfg == nil {
			cfg = &tls.Config{ServerName: host, MinVersion: tls.VersionTLS12}
		}
		if err := c.StartTLS(cfg); err != nil {
			return classify(s.Addr, err)
		}
	}
	if s.Username != "" {
		if err := c.Auth(smtp.PlainAuth("", s.Username, s.Password, host)); err != nil {
			return classify(s.Addr, err)
		}
	}
	if err := c.Mail(s.From); err != nil {
		return classify(s.Addr, err)
	}
	for _, to := range s.To {
		if err := c.Rcpt(to); err != nil {
			return classify(s.Addr, err)
		}
	}
	w, err := c.Data()
	if err != nil {
		return classify(s.Addr, err)
	}
	now := time.Now
	if s.Now != nil {
		now = s.Now
	}
	if _, err := w.Write(Message(s.From, s.To, n, now())); err != nil {
		return classify(s.Addr, err)
	}
	if err := w.Close(); err != nil {
		return classify(s.Addr, err)
	}
	c.Quit()
	return false, nil
}

func isLoopback(host string) bool {
	if host == "localhost" {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}

func classify(addr string, err error) (bool, error) {
	var te *textproto.Error
	if errors.As(err, &te) {
		return te.Code < 500, fmt.Errorf("smtp %s: %w", addr, err)
	}
	return true, fmt.Errorf("smtp %s: %w", addr, err)
}

// Message renders a notification as an RFC 5322 plain-text message. Its
// subject says what happened in words (the notification's summary).
func Message(from string, to []string, n agent.Notification, now time.Time) []byte {
	var b strings.Builder
	hdr := func(k, v string) { b.WriteString(k + ": " + v + "\r\n") }
	subject := n.Summary
	if subject == "" {
		subject = fmt.Sprintf("%s: %s %s alert %s", n.Watch, n.Severity, n.Rule, n.Event)
	}
	hdr("From", from)
	hdr("To", strings.Join(to, ", "))
	hdr("Subject", mimeHeader(subject))
	hdr("Date", now.Format(time.RFC1123Z))
	hdr("Message-ID", "<"+strings.ReplaceAll(n.ID, ":", ".")+"@plumb>")
	hdr("MIME-Version", "1.0")
	hdr("Content-Type", "text/plain; charset=utf-8")
	hdr("Content-Transfer-Encoding", "8bit")
	b.WriteString("\r\n")
	line := func(format string, args ...any) { b.WriteString(fmt.Sprintf(format, args...) + "\r\n") }
	day := func(t time.Time) string { return t.UTC().Format(time.RFC3339) }
	line("%s", n.Message)
	line("")
	line("watch:       %s (source %s%s)", n.Watch, n.Source, tableSuffix(n.Table))
	seg := connectors.ParseSegmentKey(n.Segment).String()
	line("segment:     %s", seg)
	line("rule:        %s, %s", n.Rule, n.Severity)
	line("event:       %s", eventWords(n.Event))
	if n.Onset != nil {
		line("onset:       %s (data time: the cause holds from here)", day(*n.Onset))
	}
	line("as of:       %s (data time: the window that opened the alert)", day(n.AsOf))
	if n.ResolvedAsOf != nil {
		line("resolved as of: %s (data time)", day(*n.ResolvedAsOf))
	}
	if w := n.Window; w != nil {
		line("window:      %s to %s, %d rows used", day(w.Start), day(w.End), w.Rows)
	}
	if len(n.Values) > 0 {
		keys := make([]string, 0, len(n.Values))
		for k := range n.Values {
			keys = append(keys, k)
		}
		sort.Strings(keys)
		for _, k := range keys {
			line("%-12s %.4g", k+":", n.Values[k])
		}
	}
	if len(n.Columns) > 0 {
		line("columns:     %s", strings.Join(n.Columns, ", "))
	}
	if n.Equation != "" {
		line("equation:    %s", n.Equation)
	}
	if len(n.Drivers) > 0 {
		parts := make([]string, len(n.Drivers))
		for i, d := range n.Drivers {
			parts[i] = fmt.Sprintf("%s %.0f%%", d.Column, 100*d.Share)
		}
		line("explained by: %s (shares of R²)", strings.Join(parts, ", "))
	}
	if n.Forecast != nil {
		line("forecast:    %+.1f%%/day, reaches %.4g around %s", 100*n.Forecast.RatePerDay, n.Forecast.Limit, n.Forecast.Crossing.UTC().Format("2006-01-02"))
	}
	if a := n.Acknowledged; a != nil {
		ack := fmt.Sprintf("acknowledged: by %s at %s", a.By, a.At.UTC().Format("2006-01-02 15:04 UTC"))
		if !a.Until.IsZero() {
			ack += ", snoozed until " + a.Until.UTC().Format("2006-01-02 15:04 UTC")
		}
		if a.Note != "" {
			ack += ": " + a.Note
		}
		line("%s", ack)
	}
	if n.Remedy != "" {
		line("")
		line("What to do: %s", n.Remedy)
	}
	if n.URL != "" {
		line("")
		line("Watch page: %s", n.URL)
	}
	if n.Caution != "" {
		line("")
		line("Caution: %s", n.Caution)
	}
	line("")
	line("recorded at %s (wall clock) · event id %s", n.RecordedAt.UTC().Format(time.RFC3339), n.ID)
	// Dot-stuffing is done by net/smtp's data writer.
	return []byte(b.String())
}

func eventWords(e string) string {
	switch e {
	case agent.EventOpened:
		return "opened"
	case agent.EventEscalated:
		return "escalated"
	case agent.EventResolved:
		return "resolved"
	case agent.EventSnoozeEnded:
		return "snooze ended, still open"
	}
	return e
}

func tableSuffix(t string) string {
	if t == "" {
		return ""
	}
	return ", table " + t
}

// mimeHeader encodes a header value with non-ASCII text (RFC 2047).
func mimeHeader(s string) string {
	for _, r := range s {
		if r > 127 {
			return mimeQ(s)
		}
	}
	return s
}

func mimeQ(s string) string {
	var b strings.Builder
	b.WriteString("=?utf-8?q?")
	for _, c := range []byte(s) {
		switch {
		case c == ' ':
			b.WriteByte('_')
		case c == '=' || c == '?' || c == '_' || c < 32 || c >= 127:
			fmt.Fprintf(&b, "=%02X", c)
		default:
			b.WriteByte(c)
		}
	}
	b.WriteString("?=")
	return b.String()
}
