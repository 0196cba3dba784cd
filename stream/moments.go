package stream

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/mat"
)

// Moments is the centered cross-product accumulator: the (weighted) count,
// the column means and the centered co-moment matrix
//
//	M = Σ_i w_i (x_i − x̄)(x_i − x̄)ᵀ
//
// of the rows folded in so far, with per-column minimum, maximum and
// missing-value counts. Each block is centered on its own mean, folded in
// with a symmetric rank-k update and merged with the pairwise formula of
// Chan, Golub & LeVeque (1979); raw sums of products are never formed. All
// values are first shifted by a provisional origin (the first block's mean),
// which the subtraction does exactly for data near it, so a column with mean
// 1e9 and spread 1 keeps its digits in the means as well as the co-moments.
// They are also divided by the column's scale (Scale, a power of two from
// the largest magnitude seen), so that data at 1e-200 or at 1e200 give the
// same digits as data at 1: the accumulator keeps the co-moments of x/s
// (ScaledAt), exactly what it would keep for data already at that scale.
//
// The zero value is not usable; call NewMoments.
type Moments struct {
	names []string
	p     int

	counts Counts
	origin []float64 // provisional origin c, fixed by the first block
	hasOrg bool
	scale  []float64 // s: powers of two, set with the origin, grown with max|x|
	mean   []float64 // (mean − c)/s
	co     []float64 // p×p row-major, of x/s; the upper triangle is maintained
	min    []float64
	max    []float64

	// scratch, reused across blocks
	buf   []float64
	w     []float64
	bmean []float64
}

// NewMoments returns an empty accumulator for the named columns.
func NewMoments(names []string) *Moments {
	p := len(names)
	if p == 0 {
		panic("stream: NewMoments with no columns")
	}
	m := &Moments{
		names:  append([]string(nil), names...),
		p:      p,
		counts: newCounts(p),
		origin: make([]float64, p),
		scale:  make([]float64, p),
		mean:   make([]float64, p),
		co:     make([]float64, p*p),
		min:    make([]float64, p),
		max:    make([]float64, p),
		bmean:  make([]float64, p),
	}
	for j := range m.min {
		m.min[j] = math.Inf(1)
		m.max[j] = math.Inf(-1)
		m.scale[j] = 1
	}
	return m
}

// P returns the number of columns.
func (m *Moments) P() int { return m.p }

// Names returns the column names; the slice must not be modified.
func (m *Moments) Names() []string { return m.names }

// Counts returns the row counts; the slices must not be modified.
func (m *Moments) Counts() *Counts { return &m.counts }

// N returns the number of rows used.
func (m *Moments) N() int64 { return m.counts.Used }

// SumWeights returns the sum of the used rows' weights.
func (m *Moments) SumWeights() float64 { return m.counts.SumWeights }

// Mean returns the weighted mean of column j (NaN when no rows were used).
func (m *Moments) Mean(j int) float64 {
	if m.counts.SumWeights == 0 {
		return math.NaN()
	}
	return m.origin[j] + m.mean[j]*m.scale[j]
}

// Means copies the column means into dst, sizing it when nil.
func (m *Moments) Means(dst []float64) []float64 {
	if dst == nil {
		dst = make([]float64, m.p)
	}
	if len(dst) != m.p {
		panic(fmt.Sprintf("stream: Means: dst has %d slots, want %d", len(dst), m.p))
	}
	for j := range dst {
		dst[j] = m.origin[j] + m.mean[j]*m.scale[j]
	}
	return dst
}

// Scale returns the power of two s_j that column j is divided by before
// any product is formed (1 until rows arrive): the smallest power of two
// above the column's largest magnitude, within 2^±1022.
func (m *Moments) Scale(j int) float64 { return m.scale[j] }

// Min and Max return the extremes of column j over the used rows (+Inf and
// −Inf when no rows were used).
func (m *Moments) Min(j int) float64 { return m.min[j] }
func (m *Moments) Max(j int) float64 { return m.max[j] }

// CoMoment returns the centered co-moment matrix in dst, sizing it when dst
// is nil or empty. Entries beyond the range of float64 (columns of
// magnitude about 1e154 and above) are ±Inf: use ScaledAt and Scale for
// such data.
func (m *Moments) CoMoment(dst *mat.SymDense) *mat.SymDense {
	if dst == nil {
		dst = mat.NewSymDense(m.p, nil)
	} else if dst.IsEmpty() {
		dst.ReuseAsSym(m.p)
	} else if dst.SymmetricDim() != m.p {
		panic(fmt.Sprintf("stream: CoMoment: dst is %d×%d, want %d×%d", dst.SymmetricDim(), dst.SymmetricDim(), m.p, m.p))
	}
	for i := 0; i < m.p; i++ {
		for j := i; j < m.p; j++ {
			dst.SetSym(i, j, m.co[i*m.p+j]*m.scale[i]*m.scale[j])
		}
	}
	return dst
}

// At returns entry (i, j) of the centered co-moment matrix, ScaledAt(i, j)
// times Scale(i)·Scale(j) (±Inf, or 0, where that leaves the range of
// float64).
func (m *Moments) At(i, j int) float64 {
	return m.ScaledAt(i, j) * m.scale[i] * m.scale[j]
}

// ScaledAt returns entry (i, j) of the centered co-moment matrix of the
// scaled columns x_i/Scale(i) and x_j/Scale(j), as the accumulator keeps it.
func (m *Moments) ScaledAt(i, j int) float64 {
	if i > j {
		i, j = j, i
	}
	return m.co[i*m.p+j]
}

// Reset empties the accumulator, keeping its storage.
func (m *Moments) Reset() {
	m.counts = Counts{Null: m.counts.Null, NaN: m.counts.NaN, Inf: m.counts.Inf}
	clear(m.counts.Null)
	clear(m.counts.NaN)
	clear(m.counts.Inf)
	clear(m.origin)
	m.hasOrg = false
	for j := range m.scale {
		m.scale[j] = 1
	}
	clear(m.mean)
	clear(m.co)
	for j := range m.min {
		m.min[j] = math.Inf(1)
		m.max[j] = math.Inf(-1)
	}
}

// Add folds a block of rows into the accumulator. It allocates only when the
// block is taller than any block seen before.
func (m *Moments) Add(b *Block) {
	b.check(m.p)
	p, ld := m.p, leading(b.Rows)
	if cap(m.buf) < p*ld {
		m.buf = make([]float64, p*ld)
	}
	buf := m.buf[:p*ld]
	var w []float64
	if b.Weight != nil {
		if cap(m.w) < 2*ld {
			m.w = make([]float64, 2*ld)
		}
		w = m.w[:ld]
	}
	k := gather(b, &m.counts, buf, ld, 0, w, m.min, m.max)
	if k == 0 {
		return
	}
	if !m.hasOrg {
		for j := range m.scale {
			m.scale[j] = scaleFor(magnitude(m.min[j], m.max[j]))
		}
		originOf(m.origin, m.scale, buf, ld, 0, k)
		m.hasOrg = true
	} else {
		m.growScales()
	}
	for j := 0; j < p; j++ {
		shiftScale(buf[j*ld:j*ld+k], m.origin[j], m.scale[j])
	}
	m.counts.Used += int64(k)

	// Block weight, mean and centering, column by column; rows are scaled
	// by √w so that the rank-k update weights them.
	bw := float64(k)
	var sw []float64
	if w != nil {
		w = w[:k]
		bw = floats.Sum(w)
		if bw == 0 {
			// Rows of weight zero are counted but carry no information.
			return
		}
		sw = m.w[ld : ld+k]
		for i, wi := range w {
			sw[i] = math.Sqrt(wi)
		}
	}
	bmean := m.bmean
	for j := 0; j < p; j++ {
		col := buf[j*ld : j*ld+k]
		if w == nil {
			bmean[j] = floats.Sum(col) / bw
			floats.AddConst(-bmean[j], col)
		} else {
			bmean[j] = floats.Dot(w, col) / bw
			for i, v := range col {
				col[i] = (v - bmean[j]) * sw[i]
			}
		}
	}
	cs := blas64.Symmetric{Uplo: blas.Upper, N: p, Stride: p, Data: m.co}
	blas64.Syrk(blas.NoTrans, 1, blas64.General{Rows: p, Cols: k, Stride: ld, Data: buf}, 1, cs)
	m.mergeMean(bw, bmean)
}

// growScales raises the scale of each column whose largest magnitude (from
// min and max) has reached it.
func (m *Moments) growScales() {
	for j, s := range m.scale {
		if mag := magnitude(m.min[j], m.max[j]); mag >= s {
			if ns := scaleFor(mag); ns > s {
				m.setScale(j, ns)
			}
		}
	}
}

// setScale changes the scale of column j to ns, multiplying its mean and
// its row and column of the co-moments (the diagonal entry twice) by the
// ratio of the scales, a power of two: exact unless a result is subnormal,
// and then negligible beside the column's magnitude.
func (m *Moments) setScale(j int, ns float64) {
	p := m.p
	r := m.scale[j] / ns
	m.mean[j] *= r
	for i := 0; i < j; i++ {
		m.co[i*p+j] *= r
	}
	for l := j; l < p; l++ {
		m.co[j*p+l] *= r
	}
	m.co[j*p+j] *= r
	m.scale[j] = ns
}

// mergeMean combines the current mean (weight counts.SumWeights, not yet
// including bw) with a part of weight bw and mean bmean, adding the
// between-part term of the pairwise formula to the co-moment. bmean is
// overwritten with the difference of the means.
func (m *Moments) mergeMean(bw float64, bmean []float64) {
	wa := m.counts.SumWeights
	tot := wa + bw
	if wa > 0 {
		for j := range bmean {
			bmean[j] -= m.mean[j] // δ = mean_b − mean_a
		}
		f := wa * bw / tot
		cs := blas64.Symmetric{Uplo: blas.Upper, N: m.p, Stride: m.p, Data: m.co}
		blas64.Syr(f, blas64.Vector{N: m.p, Inc: 1, Data: bmean}, cs)
		r := bw / tot
		for j := range bmean {
			m.mean[j] += bmean[j] * r
		}
	} else {
		copy(m.mean, bmean)
	}
	m.counts.SumWeights = tot
}

// Merge folds another accumulator over the same columns into m.
func (m *Moments) Merge(o *Moments) {
	if o.p != m.p {
		panic(fmt.Sprintf("stream: Merge of %d columns into %d", o.p, m.p))
	}
	for j := range m.names {
		if m.names[j] != o.names[j] {
			panic(fmt.Sprintf("stream: Merge: column %d is %q here, %q there", j, m.names[j], o.names[j]))
		}
	}
	for j := 0; j < m.p; j++ {
		m.min[j] = math.Min(m.min[j], o.min[j])
		m.max[j] = math.Max(m.max[j], o.max[j])
	}
	sw := m.counts.SumWeights
	used := m.counts.Used
	m.counts.add(&o.counts)
	m.counts.SumWeights = sw
	m.counts.Used = used + o.counts.Used
	if !o.hasOrg {
		return // o has no rows: nothing more to fold in
	}
	if !m.hasOrg {
		copy(m.origin, o.origin)
		copy(m.scale, o.scale)
		m.hasOrg = true
	} else {
		// The merged extremes decide the scales; o's never exceed them
		// (its scales come from its own extremes), unless o was built
		// with larger ones, which m then takes.
		m.growScales()
		for j, s := range o.scale {
			if s > m.scale[j] {
				m.setScale(j, s)
			}
		}
	}
	// o's co-moments in m's scales: multiplied by powers of two ≤ 1.
	for i := 0; i < m.p; i++ {
		ri := o.scale[i] / m.scale[i]
		for j := i; j < m.p; j++ {
			m.co[i*m.p+j] += o.co[i*m.p+j] * ri * (o.scale[j] / m.scale[j])
		}
	}
	if o.counts.SumWeights > 0 {
		// o's mean in m's frame; the origins are close, so the difference
		// of their scaled values is exact.
		for j, s := range m.scale {
			inv := 1 / s
			m.bmean[j] = (o.origin[j]*inv - m.origin[j]*inv) + o.mean[j]*(o.scale[j]*inv)
		}
		m.mergeMean(o.counts.SumWeights, m.bmean)
	}
}

// Clone returns a deep copy of m.
func (m *Moments) Clone() *Moments {
	c := &Moments{
		names:  append([]string(nil), m.names...),
		p:      m.p,
		counts: m.counts.clone(),
		origin: append([]float64(nil), m.origin...),
		hasOrg: m.hasOrg,
		scale:  append([]float64(nil), m.scale...),
		mean:   append([]float64(nil), m.mean...),
		co:     append([]float64(nil), m.co...),
		min:    append([]float64(nil), m.min...),
		max:    append([]float64(nil), m.max...),
		bmean:  make([]float64, m.p),
	}
	return c
}

// Select returns a new accumulator restricted to the given columns (by
// index, in the given order). Rows dropped for a column that is not selected
// stay dropped: the counts are those of the scan.
func (m *Moments) Select(idx []int) *Moments {
	names := make([]string, len(idx))
	for a, j := range idx {
		names[a] = m.names[j]
	}
	s := NewMoments(names)
	s.counts.Used = m.counts.Used
	s.counts.SumWeights = m.counts.SumWeights
	s.counts.Dropped = m.counts.Dropped
	s.counts.BadWeights = m.counts.BadWeights
	s.hasOrg = m.hasOrg
	q := len(idx)
	for a, i := range idx {
		s.counts.Null[a] = m.counts.Null[i]
		s.counts.NaN[a] = m.counts.NaN[i]
		s.counts.Inf[a] = m.counts.Inf[i]
		s.origin[a] = m.origin[i]
		s.scale[a] = m.scale[i]
		s.mean[a] = m.mean[i]
		s.min[a], s.max[a] = m.min[i], m.max[i]
		for b := a; b < q; b++ {
			s.co[a*q+b] = m.ScaledAt(i, idx[b])
		}
	}
	return s
}
