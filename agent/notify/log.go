package notify

import (
	"context"
	"encoding/json"
	"fmt"
	"log/slog"

	"plumb/agent"
)

// Log writes each notification as one structured log line.
type Log struct {
	Logger *slog.Logger
}

var _ agent.Notifier = (*Log)(nil)

// Notify logs the delivery; it fails only on a body that is not a
// notification.
func (l *Log) Notify(ctx context.Context, d agent.Delivery) (bool, error) {
	var n agent.Notification
	if err := json.Unmarshal(d.Body, &n); err != nil {
		return false, fmt.Errorf("log notifier: %w", err)
	}
	level := slog.LevelWarn
	if n.Severity == agent.Critical {
		level = slog.LevelError
	}
	if n.Event == agent.EventResolved {
		level = slog.LevelInfo
	}
	attrs := []slog.Attr{
		slog.String("id", n.ID), slog.String("event", n.Event), slog.String("alert_id", n.AlertID),
		slog.String("watch", n.Watch), slog.String("rule", string(n.Rule)), slog.String("severity", string(n.Severity)),
		slog.Time("as_of", n.AsOf),
	}
	if n.Segment != "" {
		attrs = append(attrs, slog.String("segment", n.Segment))
	}
	if len(n.Columns) > 0 {
		attrs = append(attrs, slog.Any("columns", n.Columns))
	}
	if n.Equation != "" {
		attrs = append(attrs, slog.String("equation", n.Equation))
	}
	if n.Remedy != "" {
		attrs = append(attrs, slog.String("remedy", n.Remedy))
	}
	l.Logger.LogAttrs(ctx, level, n.Message, attrs...)
	return false, nil
}
