package web

import (
	"cmp"
	"encoding/json"
	"fmt"
	"slices"
	"time"

	"plumb/diagnostics"
)

// Factor is one categorical column of a window: its levels and the
// generalized VIF of its treatment dummies (Fox & Monette 1992).
type Factor struct {
	Name string `json:"name"`
	// DF is the number of dummies: levels present − 1.
	DF int `json:"df"`
	// GVIF and GVIFAdjusted (GVIF^(1/(2·df)), comparable with √VIF) are
	// nil when undefined: one level only (df 0), or a dummy that is
	// constant or in an exact dependency; Undefined says which.
	GVIF         *float64 `json:"gvif"`
	GVIFAdjusted *float64 `json:"gvif_adjusted"`
	Undefined    string   `json:"gvif_undefined,omitempty"`
	// Levels are the levels present in the window's rows (byte order),
	// Counts their rows; Base is the level left out of the design and
	// BaseRule how it was chosen; Absent are levels known to the watch
	// but missing from the window.
	Levels   []string  `json:"levels"`
	Counts   []float64 `json:"level_counts"`
	Base     string    `json:"base"`
	BaseRule string    `json:"base_rule,omitempty"`
	Absent   []string  `json:"absent"`
}

// FactorsOf picks the factors out of a report's generalized VIFs (its
// groups of kind factor), in their order. It returns an empty, non-nil
// slice when there are none.
func FactorsOf(groups []diagnostics.GroupReport) []Factor {
	out := []Factor{}
	for _, g := range groups {
		if g.Kind != diagnostics.GroupFactor {
			continue
		}
		f := Factor{Name: g.Name, DF: g.DF, GVIF: g.GVIF, GVIFAdjusted: g.GVIFAdjusted, Undefined: g.Undefined,
			Levels: slices.Clone(g.Levels), Counts: slices.Clone(g.Counts), Base: g.Base, BaseRule: g.BaseRule,
			Absent: slices.Clone(g.Absent)}
		if f.Levels == nil {
			f.Levels = []string{}
		}
		if f.Counts == nil {
			f.Counts = []float64{}
		}
		if f.Absent == nil {
			f.Absent = []string{}
		}
		out = append(out, f)
	}
	return out
}

// Count returns the rows of a present level, 0 for any other.
func (f Factor) Count(level string) float64 {
	if i := slices.Index(f.Levels, level); i >= 0 && i < len(f.Counts) {
		return f.Counts[i]
	}
	return 0
}

// factorOf returns the factor named name among fs, or nil.
func factorOf(fs []Factor, name string) *Factor {
	for i := range fs {
		if fs[i].Name == name {
			return &fs[i]
		}
	}
	return nil
}

// NewLevel is a level of a factor that first occurs in a series' rows
// after the first full window of its timeline. It is noted, not alerted: a new
// level gets its own dummy from then on.
type NewLevel struct {
	Factor string `json:"factor"`
	Level  string `json:"level"`
	// Since is the end of the first window whose rows hold the level.
	Since time.Time `json:"since"`
}

// Note says the new level in words, e.g. `new level “desalinated” of
// supply_source since 2026-04-14` (the last day of the first window
// that holds it).
func (n NewLevel) Note(through func(time.Time) string) string {
	return fmt.Sprintf("new level “%s” of %s since %s", n.Level, n.Factor, through(n.Since))
}

// newLevels finds, in a timeline (oldest first), the levels that first
// occur in the rows after its first full window: the levels present in
// any point up to and including that window (the windows still filling
// before it hold the first rows of the history) are the series' own; a
// level present at a later point is new, dated to the first point that
// holds it. A level known to the watch but absent from the series' rows
// until then counts as new too, since these rows had not held it; a
// factor the baseline lacks (added to the watch later) has no "before"
// to compare with and is skipped. A timeline with no full window has no
// new levels. Ordered by date, factor and level.
func newLevels(tl []Point) []NewLevel {
	out := []NewLevel{}
	full := slices.IndexFunc(tl, func(p Point) bool { return !p.Filling })
	if full < 0 {
		return out
	}
	before := map[string]map[string]bool{}
	for _, p := range tl[:full+1] {
		for _, f := range p.Factors {
			m := before[f.Name]
			if m == nil {
				m = map[string]bool{}
				before[f.Name] = m
			}
			for _, l := range f.Levels {
				m[l] = true
			}
		}
	}
	for _, p := range tl[full+1:] {
		for _, f := range p.Factors {
			seen, ok := before[f.Name]
			if !ok {
				continue
			}
			for _, l := range f.Levels {
				if !seen[l] {
					seen[l] = true
					out = append(out, NewLevel{Factor: f.Name, Level: l, Since: p.At})
				}
			}
		}
	}
	slices.SortStableFunc(out, func(a, b NewLevel) int {
		return cmp.Or(a.Since.Compare(b.Since), cmp.Compare(a.Factor, b.Factor), cmp.Compare(a.Level, b.Level))
	})
	return out
}

// MarshalJSON writes the levels, counts and absent levels as arrays even
// when empty.
func (f Factor) MarshalJSON() ([]byte, error) {
	type plain Factor
	p := plain(f)
	if p.Levels == nil {
		p.Levels = []string{}
	}
	if p.Counts == nil {
		p.Counts = []float64{}
	}
	if p.Absent == nil {
		p.Absent = []string{}
	}
	return json.Marshal(p)
}

// nonNil returns s, or an empty slice when s is nil, so that JSON shows
// an array.
func nonNil[T any](s []T) []T {
	if s == nil {
		return []T{}
	}
	return s
}
