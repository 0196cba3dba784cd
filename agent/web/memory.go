package web

import (
	"context"
	"fmt"
	"slices"
	"sync"
)

// Memory is a View held in memory: tests use it, and so can a command
// that computed its results itself and has no store to read them from.
// The zero value is empty and ready to use.
type Memory struct {
	mu      sync.RWMutex
	order   []string
	watches map[string]*WatchDetail
}

var _ View = (*Memory)(nil)

// Put adds or replaces the watch d.Summary.Name. Memory keeps its own
// copy of the top-level slices; the caller must not modify the reports
// afterwards.
func (m *Memory) Put(d WatchDetail) {
	if d.Summary.Name == "" {
		panic("web: Memory.Put: watch without a name")
	}
	d.Segments = slices.Clone(d.Segments)
	d.Runs = slices.Clone(d.Runs)
	d.Alerts = slices.Clone(d.Alerts)
	d.Summary.Segments = slices.Clone(d.Summary.Segments)
	d.Summary.OpenAlerts = slices.Clone(d.Summary.OpenAlerts)
	m.mu.Lock()
	defer m.mu.Unlock()
	if m.watches == nil {
		m.watches = make(map[string]*WatchDetail)
	}
	if _, ok := m.watches[d.Summary.Name]; !ok {
		m.order = append(m.order, d.Summary.Name)
	}
	m.watches[d.Summary.Name] = &d
}

// Watches returns the summaries in the order the watches were first put.
func (m *Memory) Watches(ctx context.Context) ([]WatchSummary, error) {
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	m.mu.RLock()
	defer m.mu.RUnlock()
	out := make([]WatchSummary, 0, len(m.order))
	for _, name := range m.order {
		out = append(out, m.watches[name].Summary)
	}
	return out, nil
}

// Watch returns the named watch.
func (m *Memory) Watch(ctx context.Context, name string) (*WatchDetail, error) {
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	m.mu.RLock()
	defer m.mu.RUnlock()
	d, ok := m.watches[name]
	if !ok {
		return nil, fmt.Errorf("watch %q: %w", name, ErrNotFound)
	}
	c := *d
	return &c, nil
}
