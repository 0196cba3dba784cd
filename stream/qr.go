package stream

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/floats"
	lapackgonum "gonum.org/v1/gonum/lapack/gonum"
	"gonum.org/v1/gonum/mat"

	"plumb/internal/eft"
)

// QR accumulates the R factor of the design [1 X] for the named columns
// (a target, when there is one, is simply the last column): the upper
// triangular R with RᵀR = AᵀA, where row i of A is √w_i·(1, (x_i − c)/s), c is
// a provisional origin fixed by the first block and s the columns' scales
// (Scale: powers of two from the largest magnitudes seen, grown, with R's
// columns rescaled exactly, when later rows are larger; see Moments). It
// is updated by re-factoring R stacked on each block (TSQR), so the
// condition number of the data is never squared. The trailing p×p block of
// R is the R factor of the centered scaled data; R(1,1) is √(Σw).
//
// An extended factor (NewQRExtended) keeps R and applies the reflections in
// double-double arithmetic (about 32 significant digits), so that R, rounded
// to float64 once at the end, is the correctly rounded factor of the data up
// to a relative error near 1e-30·κ rather than 1e-16·κ; its update is about
// 9 to 13 times slower than the float64 one (BenchmarkQRExtended). Regressions with large residuals on nearly
// collinear regressors need it: their coefficients' error grows as
// 1e-16·κ²·‖residual‖ with a float64 factor.
//
// The zero value is not usable; call NewQR or NewQRExtended.
type QR struct {
	names []string
	p     int // data columns
	n     int // factor order, p+1

	counts Counts
	origin []float64 // c, per data column
	hasOrg bool
	scale  []float64 // s, per data column
	r      []float64 // n×n row-major upper triangular
	rlo    []float64 // extended: the low parts of r; nil otherwise

	// scratch: the block's columns (and their low parts), its weights,
	// its extremes
	buf    []float64
	blo    []float64
	w      []float64
	lo, hi []float64
}

// NewQR returns an empty QR accumulator for the named columns.
func NewQR(names []string) *QR {
	p := len(names)
	if p == 0 {
		panic("stream: NewQR with no columns")
	}
	n := p + 1
	q := &QR{
		names:  append([]string(nil), names...),
		p:      p,
		n:      n,
		counts: newCounts(p),
		origin: make([]float64, p),
		scale:  make([]float64, p),
		r:      make([]float64, n*n),
		lo:     make([]float64, p),
		hi:     make([]float64, p),
	}
	for j := range q.scale {
		q.scale[j] = 1
	}
	return q
}

// NewQRExtended returns an empty QR accumulator for the named columns that
// works in double-double arithmetic (see QR).
func NewQRExtended(names []string) *QR {
	q := NewQR(names)
	q.rlo = make([]float64, q.n*q.n)
	return q
}

// Extended reports whether q works in double-double arithmetic.
func (q *QR) Extended() bool { return q.rlo != nil }

// P returns the number of data columns (the factor has P()+1 columns).
func (q *QR) P() int { return q.p }

// Names returns the column names; the slice must not be modified.
func (q *QR) Names() []string { return q.names }

// Counts returns the row counts; the slices must not be modified.
func (q *QR) Counts() *Counts { return &q.counts }

// N returns the number of rows used.
func (q *QR) N() int64 { return q.counts.Used }

// Origin returns the provisional origin c of column j.
func (q *QR) Origin(j int) float64 { return q.origin[j] }

// Scale returns the power of two s_j that column j is divided by (1 until
// rows arrive).
func (q *QR) Scale(j int) float64 { return q.scale[j] }

// R returns the (p+1)×(p+1) upper triangular factor in dst, sizing it when
// dst is nil or empty. Column 0 is the intercept; column j+1 is data column j
// shifted by Origin(j) and divided by Scale(j).
func (q *QR) R(dst *mat.TriDense) *mat.TriDense {
	if dst == nil {
		dst = mat.NewTriDense(q.n, mat.Upper, nil)
	} else if dst.IsEmpty() {
		dst.ReuseAsTri(q.n, mat.Upper)
	} else if n, kind := dst.Triangle(); n != q.n || kind != mat.Upper {
		panic(fmt.Sprintf("stream: R: dst is %d×%d, want upper %d×%d", n, n, q.n, q.n))
	}
	for i := 0; i < q.n; i++ {
		for j := i; j < q.n; j++ {
			dst.SetTri(i, j, q.r[i*q.n+j])
		}
	}
	return dst
}

// Add folds a block of rows into the factor.
func (q *QR) Add(b *Block) {
	b.check(q.p)
	n, ld := q.n, leading(b.Rows)
	if cap(q.buf) < n*ld {
		q.buf = make([]float64, n*ld)
	}
	buf := q.buf[:n*ld]
	var w []float64
	if b.Weight != nil {
		if cap(q.w) < ld {
			q.w = make([]float64, ld)
		}
		w = q.w[:ld]
	}
	k := q.gather(b, buf, w, ld)
	if k == 0 {
		return
	}
	if q.rlo != nil {
		q.addExtended(buf, w, ld, k)
		return
	}
	for j := 0; j < q.p; j++ {
		shiftScale(buf[(j+1)*ld:(j+1)*ld+k], q.origin[j], q.scale[j])
	}
	q.counts.Used += int64(k)
	// Column 0 is the intercept; rows are scaled by √w.
	one := buf[:k]
	if w == nil {
		q.counts.SumWeights += float64(k)
		for i := range one {
			one[i] = 1
		}
	} else {
		w = w[:k]
		q.counts.SumWeights += floats.Sum(w)
		for i, wi := range w {
			one[i] = math.Sqrt(wi)
		}
		for j := 1; j < n; j++ {
			floats.Mul(buf[j*ld:j*ld+k], one)
		}
	}
	// The whole block at once: splitting it into chunks that fit level-2
	// cache was measured slower (more, shorter vector operations).
	tsqr(q.r, n, buf, ld, k, false)
	positiveDiagonal(q.r, nil, n)
}

var lapackImpl lapackgonum.Implementation

// gather copies the block's valid rows, raw, into columns 1..p of buf and
// fixes the origin and the scales from the first rows, or grows the scales
// (rescaling R) to the block's extremes; it returns the number of valid
// rows.
func (q *QR) gather(b *Block, buf, w []float64, ld int) int {
	for j := range q.lo {
		q.lo[j], q.hi[j] = math.Inf(1), math.Inf(-1)
	}
	k := gather(b, &q.counts, buf, ld, 1, w, q.lo, q.hi)
	if k == 0 {
		return 0
	}
	if !q.hasOrg {
		for j := range q.scale {
			q.scale[j] = scaleFor(magnitude(q.lo[j], q.hi[j]))
		}
		originOf(q.origin, q.scale, buf, ld, 1, k)
		q.hasOrg = true
		return k
	}
	for j, s := range q.scale {
		if mag := magnitude(q.lo[j], q.hi[j]); mag >= s {
			q.growScale(j, scaleFor(mag))
		}
	}
	return k
}

// growScale raises the scale of column j to ns when ns is larger.
func (q *QR) growScale(j int, ns float64) {
	if ns > q.scale[j] {
		q.setScale(j, ns)
	}
}

// setScale changes the scale of column j to ns, multiplying R's column j+1
// (and its low parts) by the ratio of the scales, a power of two: exact
// unless an entry becomes subnormal.
func (q *QR) setScale(j int, ns float64) {
	r := q.scale[j] / ns
	n := q.n
	for i := 0; i <= j+1; i++ {
		q.r[i*n+j+1] *= r
		if q.rlo != nil {
			q.rlo[i*n+j+1] *= r
		}
	}
	q.scale[j] = ns
}

// addExtended is Add in double-double: the shift (x − c)/s is formed
// exactly (as a double-double) and so are the weights' square roots.
func (q *QR) addExtended(buf, w []float64, ld, k int) {
	n := q.n
	if cap(q.blo) < n*ld {
		q.blo = make([]float64, n*ld)
	}
	blo := q.blo[:n*ld]
	q.counts.Used += int64(k)
	for j, c := range q.origin {
		hi, lo := buf[(j+1)*ld:(j+1)*ld+k], blo[(j+1)*ld:(j+1)*ld+k]
		inv := 1 / q.scale[j]
		cs := c * inv
		for i, x := range hi {
			hi[i], lo[i] = eft.TwoSum(x*inv, -cs)
		}
	}
	oh, ol := buf[:k], blo[:k]
	if w == nil {
		q.counts.SumWeights += float64(k)
		for i := range oh {
			oh[i], ol[i] = 1, 0
		}
	} else {
		w = w[:k]
		q.counts.SumWeights += floats.Sum(w)
		for i, wi := range w {
			oh[i], ol[i] = ddSqrt(wi, 0)
		}
		for j := 1; j < n; j++ {
			hi, lo := buf[j*ld:j*ld+k], blo[j*ld:j*ld+k]
			for i := range hi {
				hi[i], lo[i] = ddMul(hi[i], lo[i], oh[i], ol[i])
			}
		}
	}
	tsqrDD(q.r, q.rlo, n, buf, blo, ld, k, false)
	positiveDiagonal(q.r, q.rlo, n)
}

// tsqr overwrites the n×n upper triangular r (row-major) with the R factor
// of the stacked matrix [r; B], where B has k rows and n columns stored
// column-major (column j at b[j*ld : j*ld+k]) and is overwritten. The
// reflections exploit the structure: the one for column j touches row j of
// r and the rows of B only, so the stacked factorization costs 2·k·n² flops
// instead of the 2·(n+k)·n² − ⅔n³ of a dense one. With tri, B is itself
// upper triangular (k = n) and column j reads its rows 0..j only (n³·⅔).
func tsqr(r []float64, n int, b []float64, ld, k int, tri bool) {
	for j := 0; j < n; j++ {
		m := k
		if tri {
			m = min(j+1, k)
		}
		v := b[j*ld : j*ld+m]
		beta, tau := lapackImpl.Dlarfg(m+1, r[j*n+j], v, 1)
		r[j*n+j] = beta
		if tau == 0 {
			continue
		}
		rj := r[j*n : j*n+n]
		for l := j + 1; l < n; l++ {
			col := b[l*ld : l*ld+m]
			s := tau * (rj[l] + floats.Dot(v, col))
			rj[l] -= s
			floats.AddScaled(col, -s, v)
		}
	}
}

// positiveDiagonal flips the sign of the rows of r (and of its low parts
// rlo, when not nil) whose diagonal entry is negative, making the factor
// unique for full-rank data (RᵀR is unchanged).
func positiveDiagonal(r, rlo []float64, n int) {
	for i := 0; i < n; i++ {
		if r[i*n+i] < 0 {
			floats.Scale(-1, r[i*n+i:i*n+n])
			if rlo != nil {
				floats.Scale(-1, rlo[i*n+i:i*n+n])
			}
		}
	}
}

// Merge folds another factor over the same columns into q.
func (q *QR) Merge(o *QR) {
	if o.p != q.p {
		panic(fmt.Sprintf("stream: Merge of %d columns into %d", o.p, q.p))
	}
	for j := range q.names {
		if q.names[j] != o.names[j] {
			panic(fmt.Sprintf("stream: Merge: column %d is %q here, %q there", j, q.names[j], o.names[j]))
		}
	}
	q.counts.add(&o.counts)
	if !o.hasOrg {
		return
	}
	if !q.hasOrg {
		copy(q.origin, o.origin)
		copy(q.scale, o.scale)
		copy(q.r, o.r)
		if q.rlo != nil {
			clear(q.rlo)
			if o.rlo != nil {
				copy(q.rlo, o.rlo)
			}
		}
		q.hasOrg = true
		return
	}
	// Common scales: the larger of each pair; o's columns are multiplied
	// by powers of two ≤ 1 below.
	for j, s := range o.scale {
		q.growScale(j, s)
	}
	if q.rlo != nil {
		q.mergeExtended(o)
		return
	}
	n := q.n
	if cap(q.buf) < n*n {
		q.buf = make([]float64, n*n)
	}
	st := q.buf[:n*n]
	// o's R, column-major, in q's scales. Its columns are (x − c_o)/s =
	// (x − c_q)/s − ((c_o − c_q)/s)·1: re-express them in q's origin. Only
	// row 0 of o's R has an intercept entry.
	for i := 0; i < n; i++ {
		st[i] = o.r[i*n]
		for l := 1; l < n; l++ {
			st[l*n+i] = o.r[i*n+l] * (o.scale[l-1] / q.scale[l-1])
		}
	}
	r00 := o.r[0]
	for j := 0; j < q.p; j++ {
		inv := 1 / q.scale[j]
		st[(j+1)*n] += (o.origin[j]*inv - q.origin[j]*inv) * r00
	}
	tsqr(q.r, n, st, n, n, true)
	positiveDiagonal(q.r, nil, n)
}

// mergeExtended is Merge into an extended factor; a float64 o counts as
// exact.
func (q *QR) mergeExtended(o *QR) {
	n := q.n
	if cap(q.buf) < n*n {
		q.buf = make([]float64, n*n)
	}
	if cap(q.blo) < n*n {
		q.blo = make([]float64, n*n)
	}
	sh, sl := q.buf[:n*n], q.blo[:n*n]
	for i := 0; i < n; i++ {
		for l := 0; l < n; l++ {
			r := 1.0
			if l > 0 {
				r = o.scale[l-1] / q.scale[l-1]
			}
			sh[l*n+i] = o.r[i*n+l] * r
			sl[l*n+i] = 0
			if o.rlo != nil {
				sl[l*n+i] = o.rlo[i*n+l] * r
			}
		}
	}
	r0h, r0l := sh[0], sl[0]
	for j := 0; j < q.p; j++ {
		inv := 1 / q.scale[j]
		dh, dl := eft.TwoSum(o.origin[j]*inv, -q.origin[j]*inv)
		ph, pl := ddMul(dh, dl, r0h, r0l)
		sh[(j+1)*n], sl[(j+1)*n] = ddAdd(sh[(j+1)*n], sl[(j+1)*n], ph, pl)
	}
	tsqrDD(q.r, q.rlo, n, sh, sl, n, n, true)
	positiveDiagonal(q.r, q.rlo, n)
}

// Reset empties the factor, keeping its storage.
func (q *QR) Reset() {
	q.counts = Counts{Null: q.counts.Null, NaN: q.counts.NaN, Inf: q.counts.Inf}
	clear(q.counts.Null)
	clear(q.counts.NaN)
	clear(q.counts.Inf)
	clear(q.origin)
	q.hasOrg = false
	for j := range q.scale {
		q.scale[j] = 1
	}
	clear(q.r)
	clear(q.rlo)
}

// Clone returns a deep copy of q.
func (q *QR) Clone() *QR {
	c := NewQR(q.names)
	if q.rlo != nil {
		c.rlo = append([]float64(nil), q.rlo...)
	}
	c.counts = q.counts.clone()
	copy(c.origin, q.origin)
	copy(c.scale, q.scale)
	copy(c.r, q.r)
	c.hasOrg = q.hasOrg
	return c
}
