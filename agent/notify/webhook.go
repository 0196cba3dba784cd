// Package notify holds plumb's delivery channels: a signed webhook, a log
// line (slog JSON) and plain-text email over SMTP. Each implements
// agent.Notifier and says whether a failure is worth retrying.
package notify

import (
	"bytes"
	"context"
	"crypto/hmac"
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"io"
	"net/http"
	"strconv"
	"time"

	"plumb/agent"
)

// Webhook headers.
const (
	HeaderTimestamp = "X-Plumb-Timestamp" // unix seconds
	HeaderSignature = "X-Plumb-Signature" // sha256=HEX
	HeaderEvent     = "X-Plumb-Event"     // the event id, for deduplication
)

// Webhook POSTs the notification's JSON body, signed with HMAC-SHA256 of
// TIMESTAMP + "." + BODY under the shared secret.
type Webhook struct {
	URL    string
	Secret []byte
	Client *http.Client     // nil means a client without redirects
	Now    func() time.Time // nil means time.Now
}

var _ agent.Notifier = (*Webhook)(nil)

// Sign returns the X-Plumb-Signature value for a body sent at ts.
func Sign(secret []byte, ts int64, body []byte) string {
	m := hmac.New(sha256.New, secret)
	m.Write([]byte(strconv.FormatInt(ts, 10)))
	m.Write([]byte("."))
	m.Write(body)
	return "sha256=" + hex.EncodeToString(m.Sum(nil))
}

// Verify checks a signature in constant time; receivers (and tests) use it.
func Verify(secret []byte, timestamp, signature string, body []byte) bool {
	ts, err := strconv.ParseInt(timestamp, 10, 64)
	if err != nil {
		return false
	}
	return hmac.Equal([]byte(Sign(secret, ts, body)), []byte(signature))
}

var noRedirects = &http.Client{CheckRedirect: func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }}

// Notify sends one delivery. 2xx acknowledges it; 408, 425, 429 and 5xx
// are retried, other statuses are not (the receiver refuses it).
func (w *Webhook) Notify(ctx context.Context, d agent.Delivery) (bool, error) {
	now := time.Now
	if w.Now != nil {
		now = w.Now
	}
	ts := now().Unix()
	req, err := http.NewRequestWithContext(ctx, http.MethodPost, w.URL, bytes.NewReader(d.Body))
	if err != nil {
		return false, fmt.Errorf("webhook: %w", err)
	}
	req.Header.Set("Content-Type", "application/json")
	req.Header.Set("User-Agent", "plumb")
	req.Header.Set(HeaderTimestamp, strconv.FormatInt(ts, 10))
	req.Header.Set(HeaderSignature, Sign(w.Secret, ts, d.Body))
	req.Header.Set(HeaderEvent, d.EventID)
	c := w.Client
	if c == nil {
		c = noRedirects
	}
	resp, err := c.Do(req)
	if err != nil {
		return true, fmt.Errorf("webhook %s: %w", req.URL.Redacted(), err)
	}
	defer resp.Body.Close()
	io.Copy(io.Discard, io.LimitReader(resp.Body, 64<<10))
	switch s := resp.StatusCode; {
	case s >= 200 && s < 300:
		return false, nil
	case s == http.StatusRequestTimeout, s == http.StatusTooEarly, s == http.StatusTooManyRequests, s >= 500:
		return true, fmt.Errorf("webhook %s: %s", req.URL.Redacted(), resp.Status)
	default:
		return false, fmt.Errorf("webhook %s: %s (not retried: the receiver refuses the request)", req.URL.Redacted(), resp.Status)
	}
}
