package notify

import (
	"bufio"
	"bytes"
	"context"
	"crypto/hmac"
	"crypto/sha256"
	"encoding/base64"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net"
	"net/http"
	"net/http/httptest"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"plumb/agent"
)

func sampleDelivery(t *testing.T) agent.Delivery {
	t.Helper()
	onset := time.Date(2026, 8, 10, 0, 0, 0, 0, time.UTC)
	n := agent.Notification{ID: "a1:opened:oncall", Event: agent.EventOpened, AlertID: "a1", Watch: "district_daily",
		Source: "districts", Table: "district_daily", Rule: agent.RuleExact, Severity: agent.Critical,
		AsOf: time.Date(2026, 8, 10, 0, 0, 0, 0, time.UTC), Message: "exact linear dependency: total_connections = 1·residential_connections + 1·commercial_connections + 0",
		Columns:  []string{"total_connections", "residential_connections", "commercial_connections"},
		Equation: "total_connections = 1·residential_connections + 1·commercial_connections + 0", Remedy: "drop one of them",
		Summary: "district_daily: total_connections became the exact sum of two columns since 2026-08-10",
		Onset:   &onset, Window: &agent.AlertWindow{Start: onset.AddDate(0, 0, -6), End: onset.AddDate(0, 0, 1), Rows: 196},
		Caution: agent.CautionGovernance, URL: "https://plumb.example.org/watches/district_daily",
		RecordedAt: time.Date(2026, 8, 11, 6, 15, 0, 0, time.UTC)}
	b, err := json.Marshal(n)
	if err != nil {
		t.Fatal(err)
	}
	return agent.Delivery{ID: 1, EventID: n.ID, AlertID: "a1", Notifier: "oncall", Event: n.Event, Body: b}
}

func TestSign(t *testing.T) {
	// The HMAC itself, on RFC 4231 test case 2: key "Jefe", data "what do
	// ya want for nothing?".
	if rfc := rawHMAC([]byte("Jefe"), []byte("what do ya want for nothing?")); rfc != "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843" {
		t.Fatalf("HMAC-SHA256 of the RFC 4231 vector: %s", rfc)
	}
	// The signing convention's published example (recalled from memory;
	// Python's hmac module from Debian's python3 gives the same value).
	const (
		secret = "whsec_MfKQ9r8GKYqrTwjUPD8ILPZIo2LaLaSw"
		id     = "msg_p5jXN8AQM9LWM0D4loKWxJek"
		want   = "v1,g0hM9SsE+OTPJTGt/tmIKtSyZlE3uFJELVlNIOLJ1OE="
	)
	body := []byte(`{"test": 2432232314}`)
	got, err := Sign([]string{secret}, id, 1614265330, body)
	if err != nil || got != want {
		t.Fatalf("Sign = %q, %v; want %q", got, err, want)
	}
	if !Verify(secret, id, "1614265330", got, body) || Verify(secret, id, "1614265331", got, body) ||
		Verify(secret, "msg_other", "1614265330", got, body) || Verify(secret, id, "1614265330", got, []byte(`{"test": 2432232315}`)) {
		t.Fatal("Verify does not check id, timestamp and body")
	}
	// A secret without the prefix is keyed with its raw bytes: the same
	// bytes as the decoded form give the same signature.
	raw, _ := base64.StdEncoding.DecodeString(strings.TrimPrefix(secret, SecretPrefix))
	if got, _ := Sign([]string{string(raw)}, id, 1614265330, body); got != want {
		t.Fatalf("raw secret: %q", got)
	}
	if _, err := Sign([]string{"whsec_not base64!"}, id, 0, body); err == nil {
		t.Fatal("a whsec_ secret that is not base64 was accepted")
	}
	// A rotation signs under each secret, current first.
	two, _ := Sign([]string{"new-key", secret}, id, 1614265330, body)
	if parts := strings.Split(two, " "); len(parts) != 2 || parts[1] != want {
		t.Fatalf("two secrets: %q", two)
	}
}

// receiverCheck verifies a delivery as a receiver following the signing
// convention would, written without the package's helpers: key from the
// secret (base64 after whsec_, else raw bytes), HMAC-SHA256 of
// ID.TIMESTAMP.BODY, base64, compared with every "v1," entry of the
// signature header; the timestamp within five minutes of now.
func receiverCheck(secret string, h http.Header, body []byte, now time.Time) error {
	key := []byte(secret)
	if rest, ok := strings.CutPrefix(secret, "whsec_"); ok {
		var err error
		if key, err = base64.StdEncoding.DecodeString(rest); err != nil {
			return err
		}
	}
	id, ts := h.Get("webhook-id"), h.Get("webhook-timestamp")
	sec, err := strconv.ParseInt(ts, 10, 64)
	if err != nil || id == "" {
		return fmt.Errorf("id %q timestamp %q", id, ts)
	}
	if d := now.Sub(time.Unix(sec, 0)); d > 5*time.Minute || d < -5*time.Minute {
		return fmt.Errorf("timestamp %s is %s from now", ts, d)
	}
	m := hmac.New(sha256.New, key)
	m.Write([]byte(id + "." + ts + "."))
	m.Write(body)
	want := m.Sum(nil)
	for _, sig := range strings.Split(h.Get("webhook-signature"), " ") {
		v, b64, _ := strings.Cut(sig, ",")
		got, err := base64.StdEncoding.DecodeString(b64)
		if v == "v1" && err == nil && hmac.Equal(got, want) {
			return nil
		}
	}
	return errors.New("no valid signature")
}

func TestWebhook(t *testing.T) {
	now := time.Unix(1785000000, 0)
	var (
		mu      sync.Mutex
		status  = http.StatusOK
		accept  = []string{"s3cret"} // the receiver's keys
		got     []http.Header
		bodies  [][]byte
		refused []error
	)
	srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		b, _ := io.ReadAll(r.Body)
		mu.Lock()
		defer mu.Unlock()
		got = append(got, r.Header.Clone())
		bodies = append(bodies, b)
		err := errors.New("no key")
		for _, k := range accept {
			if err = receiverCheck(k, r.Header, b, now); err == nil {
				break
			}
		}
		if r.Method != http.MethodPost || err != nil {
			refused = append(refused, err)
			w.WriteHeader(http.StatusUnauthorized)
			return
		}
		w.WriteHeader(status)
	}))
	defer srv.Close()
	wh := &Webhook{URL: srv.URL, Secrets: []string{"s3cret"}, Now: func() time.Time { return now }}
	d := sampleDelivery(t)
	ctx := context.Background()
	if retry, err := wh.Notify(ctx, d); err != nil || retry {
		t.Fatalf("delivery: %v, retry %v (receiver: %v)", err, retry, refused)
	}
	h := got[0]
	if h.Get("webhook-timestamp") != "1785000000" || h.Get("webhook-id") != d.EventID || h.Get("Content-Type") != "application/json" ||
		h.Get("X-Plumb-Signature") != "" || h.Get("X-Plumb-Timestamp") != "" {
		t.Errorf("headers %v", h)
	}
	if !bytes.Equal(bodies[0], d.Body) {
		t.Error("body changed on the way")
	}
	for _, c := range []struct {
		status int
		retry  bool
	}{{500, true}, {503, true}, {429, true}, {408, true}, {400, false}, {404, false}, {202, false}} {
		mu.Lock()
		status = c.status
		mu.Unlock()
		retry, err := wh.Notify(ctx, d)
		if (err == nil) != (c.status < 300) || retry != c.retry {
			t.Errorf("status %d: err %v retry %v; want retry %v", c.status, err, retry, c.retry)
		}
	}
	mu.Lock()
	status = http.StatusOK
	mu.Unlock()
	// A wrong secret is refused by the receiver and not retried.
	bad := &Webhook{URL: srv.URL, Secrets: []string{"wrong"}, Now: wh.Now}
	if retry, err := bad.Notify(ctx, d); err == nil || retry {
		t.Fatalf("wrong secret: %v retry %v", err, retry)
	}
	// A whsec_ secret: the receiver keys with the decoded bytes.
	const wsec = "whsec_cGx1bWIgZGlzdHJpY3QgZGFpbHkga2V5" // base64 of "plumb district daily key"
	mu.Lock()
	accept = []string{wsec}
	mu.Unlock()
	ws := &Webhook{URL: srv.URL, Secrets: []string{wsec}, Now: wh.Now}
	if _, err := ws.Notify(ctx, d); err != nil {
		t.Fatalf("whsec_ secret: %v", err)
	}
	// The raw string of a whsec_ secret is not its key.
	mu.Lock()
	accept = []string{"raw:" + wsec}
	mu.Unlock()
	if _, err := ws.Notify(ctx, d); err == nil {
		t.Fatal("a receiver keyed with the undecoded whsec_ string accepted the signature")
	}
	// Rotation: plumb signs with the new and the old key; a receiver that
	// knows only the old one, and one that knows only the new one, both
	// accept; the request carries two signatures.
	rot := &Webhook{URL: srv.URL, Secrets: []string{"new-key", wsec}, Now: wh.Now}
	for _, keys := range [][]string{{wsec}, {"new-key"}} {
		mu.Lock()
		accept = keys
		mu.Unlock()
		if _, err := rot.Notify(ctx, d); err != nil {
			t.Fatalf("rotation, receiver with %v: %v", keys, err)
		}
		mu.Lock()
		sig := got[len(got)-1].Get("webhook-signature")
		mu.Unlock()
		if n := len(strings.Fields(sig)); n != 2 {
			t.Fatalf("rotation: %d signatures in %q", n, sig)
		}
	}
	// A replayed request from long ago is refused by the receiver's clock.
	old := &Webhook{URL: srv.URL, Secrets: []string{"new-key"}, Now: func() time.Time { return now.Add(-time.Hour) }}
	if _, err := old.Notify(ctx, d); err == nil {
		t.Fatal("an hour-old timestamp was accepted")
	}
	// A receiver that is down is retried.
	srv.Close()
	if retry, err := wh.Notify(ctx, d); err == nil || !retry {
		t.Fatalf("down receiver: %v retry %v", err, retry)
	}
}

func TestLog(t *testing.T) {
	var buf bytes.Buffer
	l := &Log{W: &buf}
	d := sampleDelivery(t)
	if _, err := l.Notify(context.Background(), d); err != nil {
		t.Fatal(err)
	}
	// A warning after the critical one: each is its own line.
	var n agent.Notification
	json.Unmarshal(d.Body, &n)
	n.Severity, n.ID = agent.Warning, "a2:opened:oncall"
	d.Body, _ = json.Marshal(n)
	if _, err := l.Notify(context.Background(), d); err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSuffix(buf.String(), "\n"), "\n")
	if len(lines) != 2 {
		t.Fatalf("want 2 lines, got %d: %q", len(lines), buf.String())
	}
	for i, want := range []string{"critical", "warning"} {
		var line map[string]any
		if err := json.Unmarshal([]byte(lines[i]), &line); err != nil {
			t.Fatalf("line %d is not one JSON object: %q", i+1, lines[i])
		}
		if line["severity"] != want || line["rule"] != "exact" || line["equation"] == nil ||
			!strings.Contains(line["message"].(string), "total_connections") {
			t.Fatalf("line %d: %v", i+1, line)
		}
		// The alert's severity is not dressed up as a log level.
		if _, ok := line["level"]; ok {
			t.Fatalf("line %d has a log level: %v", i+1, line)
		}
	}
	if _, err := l.Notify(context.Background(), agent.Delivery{Body: []byte("not json")}); err == nil {
		t.Fatal("a body that is not a notification was logged")
	}
}

func TestMIMEHeader(t *testing.T) {
	// RFC 2047 Q encoding: UTF-8 bytes of ü are C3 BC.
	if got := mimeHeader("segment Zürich_1"); got != "=?utf-8?q?segment_Z=C3=BCrich=5F1?=" {
		t.Fatalf("encoded %q", got)
	}
	if got := mimeHeader("plain"); got != "plain" {
		t.Fatalf("ASCII changed: %q", got)
	}
}

// smtpServer is a minimal SMTP receiver on the loopback interface: it
// speaks enough of RFC 5321 for one client and records the message.
func smtpServer(t *testing.T, rcptCode string) (addr string, msgs chan string) {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { ln.Close() })
	msgs = make(chan string, 4)
	go func() {
		for {
			c, err := ln.Accept()
			if err != nil {
				return
			}
			go func(c net.Conn) {
				defer c.Close()
				r := bufio.NewReader(c)
				say := func(s string) { io.WriteString(c, s+"\r\n") }
				say("220 test ESMTP")
				var data strings.Builder
				inData := false
				for {
					line, err := r.ReadString('\n')
					if err != nil {
						return
					}
					if inData {
						if line == ".\r\n" {
							inData = false
							msgs <- data.String()
							say("250 queued")
							continue
						}
						data.WriteString(line)
						continue
					}
					cmd := strings.ToUpper(strings.TrimSpace(line))
					switch {
					case strings.HasPrefix(cmd, "EHLO"), strings.HasPrefix(cmd, "HELO"):
						say("250 test")
					case strings.HasPrefix(cmd, "MAIL"):
						say("250 ok")
					case strings.HasPrefix(cmd, "RCPT"):
						say(rcptCode)
					case cmd == "DATA":
						inData = true
						say("354 go ahead")
					case cmd == "QUIT":
						say("221 bye")
						return
					default:
						say("250 ok")
					}
				}
			}(c)
		}
	}()
	return ln.Addr().String(), msgs
}

func TestSMTP(t *testing.T) {
	addr, msgs := smtpServer(t, "250 ok")
	s := &SMTP{Addr: addr, From: "plumb@example.org", To: []string{"network-analytics@example.org"},
		Now: func() time.Time { return time.Date(2026, 8, 10, 6, 0, 0, 0, time.UTC) }}
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	if retry, err := s.Notify(ctx, sampleDelivery(t)); err != nil {
		t.Fatalf("send: %v (retry %v)", err, retry)
	}
	msg := <-msgs
	for _, want := range []string{"Subject: district_daily: total_connections became the exact sum of two columns since 2026-08-10",
		"To: network-analytics@example.org",
		"equation:    total_connections = 1·residential_connections + 1·commercial_connections + 0",
		"onset:       2026-08-10T00:00:00Z", "window:      2026-08-04T00:00:00Z to 2026-08-11T00:00:00Z, 196 rows used",
		"segment:     whole table", "What to do: drop one of them", "Watch page: https://plumb.example.org/watches/district_daily",
		"Caution: " + agent.CautionGovernance, "recorded at 2026-08-11T06:15:00Z (wall clock) · event id a1:opened:oncall"} {
		if !strings.Contains(msg, want) {
			t.Errorf("message lacks %q:\n%s", want, msg)
		}
	}
	// A permanent refusal is not retried, a temporary one is.
	for code, retry := range map[string]bool{"550 no such user": false, "451 try later": true} {
		addr, _ := smtpServer(t, code)
		s.Addr = addr
		got, err := s.Notify(ctx, sampleDelivery(t))
		if err == nil || got != retry {
			t.Errorf("RCPT %s: err %v retry %v; want retry %v", code, err, got, retry)
		}
	}
	// Without STARTTLS only a server on this machine is accepted.
	s.Addr = "mail.example.org:25"
	if _, err := s.Notify(ctx, sampleDelivery(t)); err == nil || !strings.Contains(err.Error(), "STARTTLS") {
		t.Fatalf("plain SMTP to a remote server: %v", err)
	}
}

func rawHMAC(key, msg []byte) string {
	m := hmac.New(sha256.New, key)
	m.Write(msg)
	return hex.EncodeToString(m.Sum(nil))
}
