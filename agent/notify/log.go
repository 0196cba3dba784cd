package notify

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"sync"

	"plumb/agent"
)

// Log writes each notification as one JSON object on a line of its own:
// the webhook's body, compacted. The alert's severity is its own field
// ("severity"); there is no log level, so a critical alert is not mistaken
// for an error of plumb itself.
type Log struct {
	W  io.Writer
	mu sync.Mutex
}

var _ agent.Notifier = (*Log)(nil)

// Notify writes the delivery's line; it fails only on a body that is not
// a notification or a writer that refuses it.
func (l *Log) Notify(ctx context.Context, d agent.Delivery) (bool, error) {
	var n agent.Notification
	if err := json.Unmarshal(d.Body, &n); err != nil {
		return false, fmt.Errorf("log notifier: %w", err)
	}
	var line bytes.Buffer
	if err := json.Compact(&line, d.Body); err != nil {
		return false, fmt.Errorf("log notifier: %w", err)
	}
	line.WriteByte('\n')
	l.mu.Lock()
	defer l.mu.Unlock()
	if _, err := l.W.Write(line.Bytes()); err != nil {
		return true, fmt.Errorf("log notifier: %w", err)
	}
	return false, nil
}
