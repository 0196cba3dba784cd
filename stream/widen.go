package stream

import (
	"fmt"
)

// Widening: accumulators of different groups (buckets, segments,
// partitions) may hold different columns when some columns come and go
// with the data, as the indicator columns of a categorical factor do (one
// per level seen). Before two such accumulators are merged each is widened
// to the union of their columns: a column an accumulator has not seen was
// zero in every row it folded in, so the widened accumulator is exactly the
// one those rows would have given with the zero column present (mean 0,
// co-moments 0, minimum and maximum 0 once there are rows; in the QR
// factor a zero row and column, which keeps it triangular).

// IndicatorName is the accumulator column of one level of a categorical
// column (a factor): factor + "[" + level + "]". Connectors name the
// columns they accumulate so, and the diagnostics find a factor's levels
// by it.
func IndicatorName(factor, level string) string { return factor + "[" + level + "]" }

// widenIndex returns, for each name of own, its position in names. It
// panics unless names holds every name of own in the same relative order.
func widenIndex(own, names []string) []int {
	idx := make([]int, len(own))
	k := 0
	for j, n := range own {
		for k < len(names) && names[k] != n {
			k++
		}
		if k == len(names) {
			panic(fmt.Sprintf("stream: Widen: column %q is missing from the new columns or out of order", n))
		}
		idx[j] = k
		k++
	}
	return idx
}

// widenCounts copies c into d (sized for the new columns) through idx.
func widenCounts(d *Counts, c *Counts, idx []int) {
	d.Used, d.SumWeights, d.Dropped, d.BadWeights = c.Used, c.SumWeights, c.Dropped, c.BadWeights
	for a, i := range idx {
		d.Null[i], d.NaN[i], d.Inf[i] = c.Null[a], c.NaN[a], c.Inf[a]
	}
}

// Widen returns a new accumulator over names, a superset of m's columns in
// the same relative order (it panics otherwise), in which every column m
// does not have is an all-zero column for the rows already folded in. m is
// not modified. Merging widened accumulators gives what one accumulator
// over names fed all the rows would give.
func (m *Moments) Widen(names []string) *Moments {
	idx := widenIndex(m.names, names)
	w := NewMoments(names)
	widenCounts(&w.counts, &m.counts, idx)
	w.hasOrg = m.hasOrg
	if m.counts.Used > 0 {
		clear(w.min)
		clear(w.max)
	}
	q := w.p
	for a, i := range idx {
		w.origin[i] = m.origin[a]
		w.scale[i] = m.scale[a]
		w.mean[i] = m.mean[a]
		w.min[i], w.max[i] = m.min[a], m.max[a]
		for b := a; b < m.p; b++ {
			w.co[i*q+idx[b]] = m.co[a*m.p+b] // idx increases: upper stays upper
		}
	}
	return w
}

// Drop records n rows dropped before they reached the accumulator, for a
// reason no column of its own can carry (a NULL in a categorical column
// whose indicator columns are not known yet): they count in
// Counts().Dropped and in no column's counts.
func (m *Moments) Drop(n int64) { m.counts.Dropped += n }

// Widen returns a new factor over names, a superset of q's columns in the
// same relative order (it panics otherwise), with a zero row and column in
// R for every new column: RᵀR = AᵀA for the design with those columns zero
// in every row folded in, and R stays upper triangular. q is not modified;
// an extended factor stays extended.
func (q *QR) Widen(names []string) *QR {
	idx := widenIndex(q.names, names)
	w := NewQR(names)
	if q.rlo != nil {
		w.rlo = make([]float64, w.n*w.n)
	}
	widenCounts(&w.counts, &q.counts, idx)
	w.hasOrg = q.hasOrg
	ri := make([]int, q.n) // R's index 0 is the intercept
	for a, i := range idx {
		w.origin[i] = q.origin[a]
		w.scale[i] = q.scale[a]
		ri[a+1] = i + 1
	}
	for a := 0; a < q.n; a++ {
		for b := a; b < q.n; b++ {
			w.r[ri[a]*w.n+ri[b]] = q.r[a*q.n+b]
			if q.rlo != nil {
				w.rlo[ri[a]*w.n+ri[b]] = q.rlo[a*q.n+b]
			}
		}
	}
	return w
}

// Drop records n rows dropped before they reached the factor (see
// (*Moments).Drop).
func (q *QR) Drop(n int64) { q.counts.Dropped += n }
