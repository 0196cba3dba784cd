// Package notify holds plumb's delivery channels: a signed webhook, a log
// line (one JSON object per line) and plain-text email over SMTP. Each
// implements agent.Notifier and says whether a failure is worth retrying.
package notify

import (
	"bytes"
	"context"
	"crypto/hmac"
	"crypto/sha256"
	"encoding/base64"
	"errors"
	"fmt"
	"io"
	"net/http"
	"strconv"
	"strings"
	"time"

	"plumb/agent"
)

// Webhook headers, after the open vendor-neutral webhook signing
// convention.
const (
	HeaderID        = "webhook-id"        // the delivery's event id: receivers deduplicate on it
	HeaderTimestamp = "webhook-timestamp" // unix seconds
	HeaderSignature = "webhook-signature" // "v1,BASE64" per key, space-separated
)

// SecretPrefix marks a secret given as base64 of its key bytes.
const SecretPrefix = "whsec_"

// Key returns the HMAC key of a secret: a secret written whsec_BASE64 is
// keyed with the decoded bytes, any other with its raw bytes.
func Key(secret string) ([]byte, error) {
	rest, ok := strings.CutPrefix(secret, SecretPrefix)
	if !ok {
		return []byte(secret), nil
	}
	k, err := base64.StdEncoding.DecodeString(rest)
	if err != nil {
		return nil, fmt.Errorf("a secret that starts with %s must be base64 after it: %w", SecretPrefix, err)
	}
	if len(k) == 0 {
		return nil, errors.New("the secret is empty after " + SecretPrefix)
	}
	return k, nil
}

// Webhook POSTs the notification's JSON body, signed with HMAC-SHA256 of
// ID.TIMESTAMP.BODY under each of its secrets.
type Webhook struct {
	URL string
	// Secrets are the signing secrets, the current one first; during a
	// key rotation the previous one follows, and every request carries a
	// signature under each.
	Secrets []string
	Client  *http.Client     // nil means a client without redirects
	Now     func() time.Time // nil means time.Now
}

var _ agent.Notifier = (*Webhook)(nil)

// Sign returns the webhook-signature value for a delivery with id sent at
// ts: "v1," and the base64 HMAC-SHA256 of ID.TIMESTAMP.BODY for each
// secret, separated by spaces.
func Sign(secrets []string, id string, ts int64, body []byte) (string, error) {
	if len(secrets) == 0 {
		return "", errors.New("no signing secret")
	}
	sigs := make([]string, 0, len(secrets))
	for _, s := range secrets {
		k, err := Key(s)
		if err != nil {
			return "", err
		}
		sigs = append(sigs, "v1,"+signature(k, id, strconv.FormatInt(ts, 10), body))
	}
	return strings.Join(sigs, " "), nil
}

func signature(key []byte, id, ts string, body []byte) string {
	m := hmac.New(sha256.New, key)
	m.Write([]byte(id))
	m.Write([]byte("."))
	m.Write([]byte(ts))
	m.Write([]byte("."))
	m.Write(body)
	return base64.StdEncoding.EncodeToString(m.Sum(nil))
}

// Verify reports whether one of the signatures in header is valid for
// secret, comparing in constant time. It does not judge the timestamp's
// age: a receiver should also refuse timestamps far from its clock.
func Verify(secret, id, timestamp, header string, body []byte) bool {
	k, err := Key(secret)
	if err != nil {
		return false
	}
	want := []byte(signature(k, id, timestamp, body))
	for _, s := range strings.Fields(header) {
		v, sig, ok := strings.Cut(s, ",")
		if ok && v == "v1" && hmac.Equal([]byte(sig), want) {
			return true
		}
	}
	return false
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
	sig, err := Sign(w.Secrets, d.EventID, ts, d.Body)
	if err != nil {
		return false, fmt.Errorf("webhook: signing: %w", err)
	}
	req, err := http.NewRequestWithContext(ctx, http.MethodPost, w.URL, bytes.NewReader(d.Body))
	if err != nil {
		return false, fmt.Errorf("webhook: %w", err)
	}
	req.Header.Set("Content-Type", "application/json")
	req.Header.Set("User-Agent", "plumb")
	req.Header.Set(HeaderID, d.EventID)
	req.Header.Set(HeaderTimestamp, strconv.FormatInt(ts, 10))
	req.Header.Set(HeaderSignature, sig)
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
