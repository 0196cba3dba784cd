package config

import (
	"strings"
	"testing"
	"time"
)

// FuzzParse feeds arbitrary bytes to the parser: it must return a
// configuration or an error, never panic, and a configuration it accepts
// must describe itself without panicking.
func FuzzParse(f *testing.F) {
	f.Add([]byte(full))
	f.Add([]byte("sources: {d: \"sqlite:x.db\"}\nwatches:\n  - {name: w, source: d, table: t, time_column: day, window: 28d}\n"))
	f.Add([]byte("watches: [{name: w, schedule: \"@every 1h\"}]\n"))
	f.Add([]byte("notifiers: {n: {smtp: {addr: \"h:25\", from: a@b.example, to: [c@d.example]}}}\n"))
	f.Add([]byte("&a [*a]"))
	f.Add([]byte("watches:\n  - name: w\n    limits: {vif: {warn: .inf}}\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		c, err := Parse(data)
		if err != nil {
			if err.Error() == "" {
				t.Fatal("empty error message")
			}
			return
		}
		if len(c.Watches) == 0 {
			t.Fatal("accepted a configuration without watches")
		}
		var sb strings.Builder
		c.Describe(&sb, time.Date(2026, 6, 1, 0, 0, 0, 0, time.UTC), nil)
		for _, w := range c.Watches {
			if w.Location == nil || w.Schedule == "" {
				t.Fatalf("watch %q: defaults not filled", w.Name)
			}
		}
	})
}
