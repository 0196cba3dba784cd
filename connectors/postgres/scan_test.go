package postgres

import (
	"context"
	"testing"

	"plumb/connectors"
	"plumb/connectors/internal/demand"
)

// TestModesAgree loads the scenario rows into PostgreSQL and compares every
// way of reading them with the rows accumulated in memory.
func TestModesAgree(t *testing.T) {
	rows := demand.Generate(6003, 3)
	url := loadDemand(t, rows)
	ctx := context.Background()
	reqs := []struct {
		name    string
		req     connectors.Request
		bucket  string
		segment bool
	}{
		{"whole table", connectors.Request{Table: "district_daily"}, "", false},
		{"monthly by district", connectors.Request{Table: "district_daily", TimeColumn: "day", Bucket: "month", Segment: "district"}, "month", true},
		{"query", connectors.Request{Query: "SELECT * FROM district_daily"}, "", false},
	}
	modes := []struct {
		name string
		opts connectors.Options
		set  func(*Source)
		tol  float64
	}{
		// Same rows, same order, same blocks as in memory: bit for bit.
		{"copy", connectors.Options{}, func(s *Source) { s.mode = readCopy }, 0},
		{"rows", connectors.Options{}, func(s *Source) { s.mode = readRows }, 0},
		// Other block boundaries and a pairwise merge: to 1e-12 (the
		// required bound for partitioned scans).
		{"parallel 3", connectors.Options{Parallel: 3}, func(s *Source) {}, 1e-12},
		// Updating aggregates inside PostgreSQL, the default pushdown.
		{"pushdown regr", connectors.Options{Pushdown: true}, func(s *Source) { s.push = pushRegr }, 1e-12},
		// Plain sums shifted by one global provisional mean lose about
		// ε·(|group mean − shift|/group spread)² in small groups: here
		// ~5e-12 in the monthly groups, within the required 1e-9 for
		// pushdown.
		{"pushdown shifted", connectors.Options{Pushdown: true}, func(s *Source) { s.push = pushShifted }, 1e-10},
		// The same products beside one updating state per pair of
		// columns, which centres each group on its own means.
		{"pushdown paired", connectors.Options{Pushdown: true}, func(s *Source) { s.push = pushPaired }, 1e-10},
	}
	for _, m := range modes {
		src := openPG(t, url, m.opts)
		m.set(src)
		for _, r := range reqs {
			if m.opts.Parallel > 1 && r.req.Query != "" {
				continue
			}
			t.Run(m.name+"/"+r.name, func(t *testing.T) {
				got, err := src.Scan(ctx, r.req)
				if err != nil {
					t.Fatal(err)
				}
				want := demand.InMemory(rows, nil, r.bucket, r.segment, false)
				demand.SameResult(t, m.name, want, got, m.tol)
				if m.opts.Parallel > 1 && got.Partitions != 3 {
					t.Errorf("%d partitions, want 3", got.Partitions)
				}
			})
		}
	}
}
