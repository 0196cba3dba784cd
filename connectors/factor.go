package connectors

import (
	"fmt"
	"slices"
	"strings"

	"plumb/stream"
)

// Factors are accumulated as indicator columns, one per level seen, so
// groups of one result (buckets, segments, partitions) and results of
// different runs may hold different level sets. The canonical column order
// is the request's, each factor expanded in its place into its levels in
// byte order. Groups are aligned to a common, canonical set of columns
// (stream's Widen: a level a group has not seen is an all-zero indicator
// for its rows) before they are merged.

// ExpandNames returns the accumulated columns of values (the request's
// columns, in order) with each factor among them expanded in place into
// its indicator columns, one per level of factors (matched by name).
func ExpandNames(values []string, factors []Factor) []string {
	var out []string
	for _, v := range values {
		i := slices.IndexFunc(factors, func(f Factor) bool { return f.Name == v })
		if i < 0 {
			out = append(out, v)
			continue
		}
		for _, l := range factors[i].Levels {
			out = append(out, stream.IndicatorName(v, l))
		}
	}
	return out
}

// UnionFactors combines the factors of several partial results of one
// request (the same factors in the same order): the union of their levels,
// sorted, and the sum of their NULL counts. It panics when the lists do not
// name the same factors.
func UnionFactors(lists ...[]Factor) []Factor {
	if len(lists) == 0 {
		return nil
	}
	out := make([]Factor, len(lists[0]))
	for i, f := range lists[0] {
		out[i] = Factor{Name: f.Name}
	}
	for _, l := range lists {
		if len(l) != len(out) {
			panic(fmt.Sprintf("connectors: UnionFactors of %d and %d factors", len(l), len(out)))
		}
		for i, f := range l {
			if f.Name != out[i].Name {
				panic(fmt.Sprintf("connectors: UnionFactors: factor %d is %q here, %q there", i, out[i].Name, f.Name))
			}
			out[i].Levels = append(out[i].Levels, f.Levels...)
			out[i].Null += f.Null
		}
	}
	for i := range out {
		slices.Sort(out[i].Levels)
		out[i].Levels = slices.Compact(out[i].Levels)
	}
	return out
}

// UnionColumns returns the union of several lists of accumulated columns
// of one request in canonical order: each list holds the same plain
// columns in the same order and, for the factors named (in request order),
// some of their indicator columns, each factor's in level order. It is what
// the lists align to before their accumulators merge. It panics when two
// lists disagree on their plain columns.
func UnionColumns(factors []string, lists ...[]string) []string {
	var out []string
	for i, l := range lists {
		if i == 0 {
			out = append([]string(nil), l...)
			continue
		}
		out = unionTwo(factors, out, l)
	}
	return out
}

// indicatorOf parses an indicator column's name: the factor's index in
// factors and the level; ok is false for a plain column.
func indicatorOf(factors []string, name string) (fi int, level string, ok bool) {
	if !strings.HasSuffix(name, "]") {
		return 0, "", false
	}
	best := -1
	for i, f := range factors {
		if len(name) >= len(f)+2 && strings.HasPrefix(name, f+"[") && (best < 0 || len(f) > len(factors[best])) {
			best = i
		}
	}
	if best < 0 {
		return 0, "", false
	}
	return best, name[len(factors[best])+1 : len(name)-1], true
}

func unionTwo(factors, a, b []string) []string {
	out := make([]string, 0, max(len(a), len(b)))
	i, j := 0, 0
	for i < len(a) && j < len(b) {
		x, y := a[i], b[j]
		if x == y {
			out = append(out, x)
			i++
			j++
			continue
		}
		fx, lx, okx := indicatorOf(factors, x)
		fy, ly, oky := indicatorOf(factors, y)
		takeX := false
		switch {
		case okx && oky && fx == fy:
			takeX = lx < ly
		case okx && oky:
			takeX = fx < fy
		case okx, oky:
			// A plain column is in both lists, so the other list's
			// indicator comes before it.
			takeX = okx
		default:
			panic(fmt.Sprintf("connectors: UnionColumns: column %q in one list where the other has %q", x, y))
		}
		if takeX {
			out = append(out, x)
			i++
		} else {
			out = append(out, y)
			j++
		}
	}
	out = append(out, a[i:]...)
	return append(out, b[j:]...)
}

// Align returns the groups with their accumulators widened to names (a
// canonical superset of each group's columns, e.g. a result's Columns or
// UnionColumns of several results). Groups already over names are
// returned as they are; the others get new accumulators (the inputs are not
// modified).
func Align(gs []Group, names []string) []Group {
	out := make([]Group, len(gs))
	for i, g := range gs {
		out[i] = g
		if g.Moments != nil && !slices.Equal(g.Moments.Names(), names) {
			out[i].Moments = g.Moments.Widen(names)
		}
		if g.QR != nil && !slices.Equal(g.QR.Names(), names) {
			out[i].QR = g.QR.Widen(names)
		}
	}
	return out
}

// SpreadCounts takes per-value counts of a plan (one per Values) to the
// accumulated columns of a result with factors: a plain column's count in
// its place, zeros for a factor's indicator columns.
func SpreadCounts(p *Plan, factors []Factor, in []int64) []int64 {
	var out []int64
	for j, c := range p.Values {
		if !c.IsFactor() {
			out = append(out, in[j])
			continue
		}
		for _, f := range factors {
			if f.Name == c.Name {
				out = append(out, make([]int64, len(f.Levels))...)
			}
		}
	}
	return out
}
