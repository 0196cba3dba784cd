package stream

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/lapack/lapack64"
	"gonum.org/v1/gonum/mat"
)

// QR accumulates the R factor of the design [1 X] for the named columns
// (a target, when there is one, is simply the last column): the upper
// triangular R with RᵀR = AᵀA, where row i of A is √w_i·(1, x_i − c) and c is
// a provisional origin fixed by the first block. It is updated by
// re-factoring R stacked on each block (TSQR), so the condition number of
// the data is never squared. The trailing p×p block of R is the R factor of
// the centered data; R(1,1) is √(Σw).
//
// The zero value is not usable; call NewQR.
type QR struct {
	names []string
	p     int // data columns
	n     int // factor order, p+1

	counts Counts
	origin []float64 // c, per data column
	hasOrg bool
	r      []float64 // n×n row-major upper triangular

	// scratch
	buf   []float64
	w     []float64
	stack []float64
	tau   []float64
	work  []float64
}

// NewQR returns an empty QR accumulator for the named columns.
func NewQR(names []string) *QR {
	p := len(names)
	if p == 0 {
		panic("stream: NewQR with no columns")
	}
	n := p + 1
	return &QR{
		names:  append([]string(nil), names...),
		p:      p,
		n:      n,
		counts: newCounts(p),
		origin: make([]float64, p),
		r:      make([]float64, n*n),
		tau:    make([]float64, n),
	}
}

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

// R returns the (p+1)×(p+1) upper triangular factor in dst, sizing it when
// dst is nil or empty. Column 0 is the intercept; column j+1 is data column j
// shifted by Origin(j).
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
	p, n := q.p, q.n
	if cap(q.buf) < b.Rows*p {
		q.buf = make([]float64, b.Rows*p)
	}
	buf := q.buf[:b.Rows*p]
	var w []float64
	if b.Weight != nil {
		if cap(q.w) < b.Rows {
			q.w = make([]float64, b.Rows)
		}
		w = q.w[:b.Rows]
	}
	k := compact(b, &q.counts, buf, w)
	if k == 0 {
		return
	}
	q.counts.Used += int64(k)
	if !q.hasOrg {
		setOrigin(q.origin, buf, k, p)
		q.hasOrg = true
	}
	rows := n + k
	if cap(q.stack) < rows*n {
		q.stack = make([]float64, rows*n)
	}
	st := q.stack[:rows*n]
	copy(st[:n*n], q.r)
	bw := float64(k)
	if w != nil {
		bw = 0
		for _, wi := range w[:k] {
			bw += wi
		}
	}
	q.counts.SumWeights += bw
	for i := 0; i < k; i++ {
		row := st[(n+i)*n : (n+i+1)*n]
		s := 1.0
		if w != nil {
			s = math.Sqrt(w[i])
		}
		row[0] = s
		src := buf[i*p : i*p+p]
		for j := 0; j < p; j++ {
			row[j+1] = (src[j] - q.origin[j]) * s
		}
	}
	q.refactor(st, rows)
}

// refactor computes the QR factorization of the rows×n matrix st (whose
// first n rows may be an earlier R) and stores its R, with a non-negative
// diagonal, in q.r.
func (q *QR) refactor(st []float64, rows int) {
	n := q.n
	a := blas64.General{Rows: rows, Cols: n, Stride: n, Data: st}
	if q.work == nil {
		var wq [1]float64
		lapack64.Geqrf(a, q.tau, wq[:], -1)
		q.work = make([]float64, max(int(wq[0]), n))
	}
	lapack64.Geqrf(a, q.tau, q.work, len(q.work))
	for i := 0; i < n; i++ {
		sign := 1.0
		if st[i*n+i] < 0 {
			sign = -1
		}
		for j := 0; j < i; j++ {
			q.r[i*n+j] = 0
		}
		for j := i; j < n; j++ {
			q.r[i*n+j] = sign * st[i*n+j]
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
		copy(q.r, o.r)
		q.hasOrg = true
		return
	}
	n := q.n
	if cap(q.stack) < 2*n*n {
		q.stack = make([]float64, 2*n*n)
	}
	st := q.stack[:2*n*n]
	copy(st[:n*n], q.r)
	copy(st[n*n:], o.r)
	// o's columns are x − c_o = (x − c_q) − (c_o − c_q)·1: re-express them
	// in q's origin. Only row 0 of o's R has an intercept entry.
	r00 := o.r[0]
	for j := 0; j < q.p; j++ {
		st[n*n+j+1] += (o.origin[j] - q.origin[j]) * r00
	}
	q.refactor(st, 2*n)
}

// Clone returns a deep copy of q.
func (q *QR) Clone() *QR {
	c := NewQR(q.names)
	c.counts = q.counts.clone()
	copy(c.origin, q.origin)
	copy(c.r, q.r)
	c.hasOrg = q.hasOrg
	return c
}
