package notify

import (
	"bufio"
	"bytes"
	"context"
	"crypto/hmac"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"io"
	"log/slog"
	"net"
	"net/http"
	"net/http/httptest"
	"strings"
	"sync"
	"testing"
	"time"

	"plumb/agent"
)

func sampleDelivery(t *testing.T) agent.Delivery {
	t.Helper()
	n := agent.Notification{ID: "a1:opened:oncall", Event: agent.EventOpened, AlertID: "a1", Watch: "district_daily",
		Source: "districts", Table: "district_daily", Rule: agent.RuleExact, Severity: agent.Critical,
		AsOf: time.Date(2026, 8, 10, 0, 0, 0, 0, time.UTC), Message: "exact linear dependency: total_connections = 1·residential_connections + 1·commercial_connections + 0",
		Columns:  []string{"total_connections", "residential_connections", "commercial_connections"},
		Equation: "total_connections = 1·residential_connections + 1·commercial_connections + 0", Remedy: "drop one of them"}
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
	// The signature is that HMAC over TIMESTAMP + "." + BODY.
	if Sign([]byte("k"), 1767225600, []byte(`{"a":1}`)) != "sha256="+rawHMAC([]byte("k"), []byte(`1767225600.{"a":1}`)) {
		t.Fatal(`Sign is not HMAC(secret, TIMESTAMP + "." + BODY)`)
	}
	got := Sign([]byte("Jefe"), 0, nil)
	if !Verify([]byte("Jefe"), "0", got, nil) || Verify([]byte("jefe"), "0", got, nil) ||
		Verify([]byte("Jefe"), "1", got, nil) || Verify([]byte("Jefe"), "x", got, nil) {
		t.Fatal("Verify does not check key and timestamp")
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

func TestWebhook(t *testing.T) {
	secret := []byte("s3cret")
	var (
		mu     sync.Mutex
		status = http.StatusOK
		got    []http.Header
		bodies [][]byte
	)
	srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		b, _ := io.ReadAll(r.Body)
		mu.Lock()
		defer mu.Unlock()
		got = append(got, r.Header.Clone())
		bodies = append(bodies, b)
		if r.Method != http.MethodPost || !Verify(secret, r.Header.Get(HeaderTimestamp), r.Header.Get(HeaderSignature), b) {
			w.WriteHeader(http.StatusUnauthorized)
			return
		}
		w.WriteHeader(status)
	}))
	defer srv.Close()
	now := time.Unix(1785000000, 0)
	wh := &Webhook{URL: srv.URL, Secret: secret, Now: func() time.Time { return now }}
	d := sampleDelivery(t)
	ctx := context.Background()
	if retry, err := wh.Notify(ctx, d); err != nil || retry {
		t.Fatalf("delivery: %v, retry %v", err, retry)
	}
	h := got[0]
	if h.Get(HeaderTimestamp) != "1785000000" || h.Get(HeaderEvent) != d.EventID || h.Get("Content-Type") != "application/json" {
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
	// A wrong secret is refused by the receiver and not retried.
	bad := &Webhook{URL: srv.URL, Secret: []byte("wrong")}
	if retry, err := bad.Notify(ctx, d); err == nil || retry {
		t.Fatalf("wrong secret: %v retry %v", err, retry)
	}
	// A receiver that is down is retried.
	srv.Close()
	if retry, err := wh.Notify(ctx, d); err == nil || !retry {
		t.Fatalf("down receiver: %v retry %v", err, retry)
	}
}

func TestLog(t *testing.T) {
	var buf bytes.Buffer
	l := &Log{Logger: slog.New(slog.NewJSONHandler(&buf, nil))}
	if _, err := l.Notify(context.Background(), sampleDelivery(t)); err != nil {
		t.Fatal(err)
	}
	var line map[string]any
	if err := json.Unmarshal(buf.Bytes(), &line); err != nil {
		t.Fatalf("not one JSON line: %q", buf.String())
	}
	if line["level"] != "ERROR" || line["rule"] != "exact" || !strings.Contains(line["msg"].(string), "total_connections") || line["equation"] == nil {
		t.Fatalf("log line %v", line)
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
	for _, want := range []string{"Subject: [plumb] critical opened: district_daily - exact", "To: network-analytics@example.org",
		"equation:  total_connections = 1·residential_connections + 1·commercial_connections + 0",
		"What to do: drop one of them", "event id: a1:opened:oncall"} {
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
