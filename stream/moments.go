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
//
// The zero value is not usable; call NewMoments.
type Moments struct {
	names []string
	p     int

	counts Counts
	origin []float64 // provisional origin c, fixed by the first block
	hasOrg bool
	mean   []float64 // mean − c
	co     []float64 // p×p row-major; the upper triangle is maintained
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
		mean:   make([]float64, p),
		co:     make([]float64, p*p),
		min:    make([]float64, p),
		max:    make([]float64, p),
		bmean:  make([]float64, p),
	}
	for j := range m.min {
		m.min[j] = math.Inf(1)
		m.max[j] = math.Inf(-1)
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
	return m.origin[j] + m.mean[j]
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
		dst[j] = m.origin[j] + m.mean[j]
	}
	return dst
}

// Min and Max return the extremes of column j over the used rows (+Inf and
// −Inf when no rows were used).
func (m *Moments) Min(j int) float64 { return m.min[j] }
func (m *Moments) Max(j int) float64 { return m.max[j] }

// CoMoment returns the centered co-moment matrix in dst, sizing it when dst
// is nil or empty.
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
			dst.SetSym(i, j, m.co[i*m.p+j])
		}
	}
	return dst
}

// At returns entry (i, j) of the centered co-moment matrix.
func (m *Moments) At(i, j int) float64 {
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
	if !m.hasOrg {
		clear(m.origin)
	}
	k := gather(b, &m.counts, m.origin, buf, ld, 0, w, m.min, m.max)
	if k == 0 {
		return
	}
	if !m.hasOrg {
		setOrigin(m.origin, buf, ld, 0, k)
		m.hasOrg = true
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
	for i := 0; i < m.p; i++ {
		for j := i; j < m.p; j++ {
			m.co[i*m.p+j] += o.co[i*m.p+j]
		}
	}
	sw := m.counts.SumWeights
	used := m.counts.Used
	m.counts.add(&o.counts)
	m.counts.SumWeights = sw
	m.counts.Used = used + o.counts.Used
	if o.hasOrg && !m.hasOrg {
		copy(m.origin, o.origin)
		m.hasOrg = true
	}
	if o.counts.SumWeights > 0 {
		// o's mean in m's frame; the origins are close, so their
		// difference is exact.
		for j := range m.bmean {
			m.bmean[j] = (o.origin[j] - m.origin[j]) + o.mean[j]
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
		s.mean[a] = m.mean[i]
		s.min[a], s.max[a] = m.min[i], m.max[i]
		for b := a; b < q; b++ {
			s.co[a*q+b] = m.At(i, idx[b])
		}
	}
	return s
}
