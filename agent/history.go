package agent

import (
	"context"
	"math"
	"slices"
	"time"

	"plumb/agent/config"
	"plumb/connectors"
	"plumb/diagnostics"
)

// bucketHistory gives a run the per-bucket accumulators of a watch: those
// the run scanned or loaded for its windows, and older ones read from the
// store on demand, so that the onset of a cause (the first bucket of its
// unbroken run) can be found however far back it lies.
type bucketHistory struct {
	ctx   context.Context
	store Store
	w     *config.Watch
	cal   connectors.Calendar
	cols  []string
	accs  map[bucketKey]acc
	first map[string]time.Time // oldest bucket per segment ("" is the oldest of all)
	// loadedFrom is the oldest bucket start the store has been read from
	// (or scanned); older buckets are loaded in chunks when asked for.
	loadedFrom time.Time
}

// firstOf returns the start of the oldest bucket of a series: a segment's
// own, or the oldest of all for the whole table.
func (h *bucketHistory) firstOf(seg string) time.Time {
	if seg == "" || h.w.SegmentBy == "" {
		var f time.Time
		for _, t := range h.first {
			if f.IsZero() || t.Before(f) {
				f = t
			}
		}
		return f
	}
	return h.first[seg]
}

// full reports whether the window ending at end lies wholly within the
// series' data.
func (h *bucketHistory) full(seg string, end time.Time) bool {
	f := h.firstOf(seg)
	return !f.IsZero() && h.cal.Full(end, span(h.w.Window), f)
}

// bucket returns the accumulator of one bucket of a series (for the whole
// table, its segments merged in segment order); ok is false when the
// series has no rows in it.
func (h *bucketHistory) bucket(seg string, start time.Time) (acc, bool, error) {
	if start.Before(h.loadedFrom) {
		if err := h.load(start); err != nil {
			return acc{}, false, err
		}
	}
	if seg != "" && h.w.SegmentBy != "" {
		a, ok := h.accs[bucketKey{start, seg}]
		return a, ok && a.m != nil && a.m.N() > 0, nil
	}
	var parts []acc
	var segs []string
	for k := range h.accs {
		if k.start.Equal(start) {
			segs = append(segs, k.seg)
		}
	}
	slices.Sort(segs)
	for _, s := range segs {
		parts = append(parts, h.accs[bucketKey{start, s}])
	}
	if len(parts) == 1 {
		return parts[0], parts[0].m.N() > 0, nil
	}
	a := merge(h.cols, parts)
	return a, a.m != nil && a.m.N() > 0, nil
}

// load reads the stored buckets from a chunk before start up to what is
// loaded already.
func (h *bucketHistory) load(start time.Time) error {
	chunk := 4 * max(h.w.Window.Buckets, 16)
	from := h.cal.Add(start, -chunk)
	bs, err := h.store.Buckets(h.ctx, h.w.Name, from, h.loadedFrom)
	if err != nil {
		return err
	}
	for _, b := range bs {
		if !slices.Equal(b.Columns, h.cols) {
			continue
		}
		a, err := decodeBucket(b)
		if err != nil {
			return err
		}
		if _, ok := h.accs[bucketKey{b.Start, b.Segment}]; !ok {
			h.accs[bucketKey{b.Start, b.Segment}] = a
		}
	}
	h.loadedFrom = from
	return nil
}

// onset walks back from the last bucket of the window ending at end while
// holds is true of each bucket with rows, and returns the first bucket of
// that unbroken run (zero when it does not hold in the last bucket with
// rows).
func (h *bucketHistory) onset(seg string, end time.Time, holds func(acc) bool) (time.Time, error) {
	var on time.Time
	first := h.firstOf(seg)
	for t := h.cal.LastBucket(end); !t.Before(first); t = h.cal.Add(t, -1) {
		a, ok, err := h.bucket(seg, t)
		if err != nil {
			return time.Time{}, err
		}
		if !ok {
			continue // no rows that bucket: neither breaks nor extends the run
		}
		if !holds(a) {
			break
		}
		on = t
	}
	return on, nil
}

// Tolerances of the per-bucket checks of an exact dependency and a constant
// column (common practice, no source: a few orders of magnitude above the
// rounding of centered co-moments and means in float64, far below any real
// spread).
const (
	// equationVarTol: the equation's residual variance relative to the
	// variance of the terms it balances.
	equationVarTol = 1e-10
	// equationMeanTol: the equation's mean residual relative to the size of
	// the terms it balances.
	equationMeanTol = 1e-8
	// constantTol: a column's value relative to the constant it is held at.
	constantTol = 1e-12
)

// equationHolds reports whether an exact dependency, in the columns' own
// units, holds on one bucket's rows: its residual varies by no more than
// rounding and averages to zero.
func equationHolds(d diagnostics.Dependency, a acc) bool {
	m := a.m
	idx := map[string]int{}
	for j, n := range m.Names() {
		idx[n] = j
	}
	if d.Intercept == nil {
		return false
	}
	// A column the bucket does not hold is the indicator of a level
	// absent from it: zero in every row, so its term drops out.
	var terms []int
	var coef []float64
	if dep, ok := idx[d.Dependent]; ok {
		terms, coef = append(terms, dep), append(coef, 1)
	}
	for name, b := range d.Coefficients {
		if j, ok := idx[name]; ok {
			terms = append(terms, j)
			coef = append(coef, -b)
		}
	}
	var resid, scale, meanRes, meanMag float64
	for x, i := range terms {
		for y, j := range terms {
			resid += coef[x] * coef[y] * m.At(i, j)
		}
		scale += coef[x] * coef[x] * m.At(i, i)
		mu := m.Mean(i)
		meanRes += coef[x] * mu
		meanMag += math.Abs(coef[x] * mu)
	}
	meanRes -= *d.Intercept
	meanMag += math.Abs(*d.Intercept)
	if !(resid <= equationVarTol*scale) && !(scale == 0 && resid == 0) {
		return false
	}
	return math.Abs(meanRes) <= equationMeanTol*meanMag
}

// constantHolds reports whether column name stays at value on one bucket's
// rows.
func constantHolds(name string, value float64, a acc) bool {
	j := slices.Index(a.m.Names(), name)
	if j < 0 {
		return false
	}
	tol := constantTol * math.Abs(value)
	return a.m.Min(j) >= value-tol && a.m.Max(j) <= value+tol
}
