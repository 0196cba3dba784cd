package diagnostics

import (
	"math"

	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/lapack/lapack64"
	"gonum.org/v1/gonum/mat"
)

// dense is a small row-major matrix. It allows zero sizes, which gonum's
// mat types do not, so that an analysis left with no varying column flows
// through the same code.
type dense struct {
	r, c int
	d    []float64
}

func newDense(r, c int) dense { return dense{r: r, c: c, d: make([]float64, r*c)} }

func (a dense) at(i, j int) float64     { return a.d[i*a.c+j] }
func (a dense) set(i, j int, v float64) { a.d[i*a.c+j] = v }

// cols returns the columns idx of a, each multiplied by scale[k] when scale
// is not nil.
func (a dense) cols(idx []int, scale []float64) dense {
	b := newDense(a.r, len(idx))
	for i := 0; i < a.r; i++ {
		for k, j := range idx {
			v := a.at(i, j)
			if scale != nil {
				v *= scale[k]
			}
			b.set(i, k, v)
		}
	}
	return b
}

// colNorm returns the Euclidean norm of column j.
func (a dense) colNorm(j int) float64 {
	s := make([]float64, a.r)
	for i := range s {
		s[i] = a.at(i, j)
	}
	return blas64.Nrm2(blas64.Vector{N: a.r, Inc: 1, Data: s})
}

// qrR returns the c×c upper triangular factor R, with a non-negative
// diagonal, of the Householder QR factorization of a (r×c). Rows of zeros
// are appended when r < c, which leaves RᵀR = aᵀa.
func qrR(a dense) dense {
	n := a.c
	out := newDense(n, n)
	if n == 0 {
		return out
	}
	rows := max(a.r, n)
	st := make([]float64, rows*n)
	copy(st, a.d)
	g := blas64.General{Rows: rows, Cols: n, Stride: n, Data: st}
	tau := make([]float64, n)
	var wq [1]float64
	lapack64.Geqrf(g, tau, wq[:], -1)
	work := make([]float64, max(int(wq[0]), n))
	lapack64.Geqrf(g, tau, work, len(work))
	for i := 0; i < n; i++ {
		sign := 1.0
		if st[i*n+i] < 0 {
			sign = -1
		}
		for j := i; j < n; j++ {
			out.set(i, j, sign*st[i*n+j])
		}
	}
	return out
}

// triInv returns the inverse of the upper triangular t, by columns of back
// substitution. A zero diagonal gives ±Inf entries; callers ensure full
// rank.
func triInv(t dense) dense {
	n := t.c
	inv := newDense(n, n)
	for j := 0; j < n; j++ {
		// Solve t·x = e_j; x has zeros below row j.
		inv.set(j, j, 1/t.at(j, j))
		for i := j - 1; i >= 0; i-- {
			s := 0.0
			for k := i + 1; k <= j; k++ {
				s += t.at(i, k) * inv.at(k, j)
			}
			inv.set(i, j, -s/t.at(i, i))
		}
	}
	return inv
}

// backSolve solves the upper triangular system t·x = b.
func backSolve(t dense, b []float64) []float64 {
	n := t.c
	x := make([]float64, n)
	for i := n - 1; i >= 0; i-- {
		s := b[i]
		for k := i + 1; k < n; k++ {
			s -= t.at(i, k) * x[k]
		}
		x[i] = s / t.at(i, i)
	}
	return x
}

// rowNorm2 returns the squared Euclidean norm of row i.
func (a dense) rowNorm2(i int) float64 {
	row := a.d[i*a.c : (i+1)*a.c]
	n := blas64.Nrm2(blas64.Vector{N: a.c, Inc: 1, Data: row})
	return n * n
}

// svd returns the singular values of a (descending) and the c×c matrix V of
// right singular vectors (columns). ok is false when the iteration did not
// converge.
func svd(a dense) (sv []float64, v dense, ok bool) {
	n := a.c
	if n == 0 {
		return nil, newDense(0, 0), true
	}
	rows := max(a.r, n)
	data := make([]float64, rows*n)
	copy(data, a.d)
	var s mat.SVD
	if !s.Factorize(mat.NewDense(rows, n, data), mat.SVDThin) {
		return nil, dense{}, false
	}
	sv = s.Values(nil)
	var vm mat.Dense
	s.VTo(&vm)
	v = newDense(n, n)
	for i := 0; i < n; i++ {
		for j := 0; j < n; j++ {
			v.set(i, j, vm.At(i, j))
		}
	}
	return sv, v, true
}

// symEigen returns the eigenvalues of the symmetric s (ascending) and its
// eigenvectors (columns).
func symEigen(s dense) (vals []float64, vecs dense, ok bool) {
	n := s.c
	if n == 0 {
		return nil, newDense(0, 0), true
	}
	sym := mat.NewSymDense(n, nil)
	for i := 0; i < n; i++ {
		for j := i; j < n; j++ {
			sym.SetSym(i, j, s.at(i, j))
		}
	}
	var es mat.EigenSym
	if !es.Factorize(sym, true) {
		return nil, dense{}, false
	}
	vals = es.Values(nil)
	var ev mat.Dense
	es.VectorsTo(&ev)
	vecs = newDense(n, n)
	for i := 0; i < n; i++ {
		for j := 0; j < n; j++ {
			vecs.set(i, j, ev.At(i, j))
		}
	}
	return vals, vecs, true
}

// cholUpper returns the upper triangular u with uᵀu = s, or ok = false when
// s is not numerically positive definite.
func cholUpper(s dense) (u dense, ok bool) {
	n := s.c
	u = newDense(n, n)
	for j := 0; j < n; j++ {
		d := s.at(j, j)
		for k := 0; k < j; k++ {
			d -= u.at(k, j) * u.at(k, j)
		}
		if !(d > 0) {
			return u, false
		}
		d = math.Sqrt(d)
		u.set(j, j, d)
		for i := j + 1; i < n; i++ {
			v := s.at(j, i)
			for k := 0; k < j; k++ {
				v -= u.at(k, j) * u.at(k, i)
			}
			u.set(j, i, v/d)
		}
	}
	return u, true
}

// logDetGram returns log det(aᵀa) from the R factor of a.
func logDetGram(a dense) float64 {
	r := qrR(a)
	s := 0.0
	for i := 0; i < r.c; i++ {
		s += 2 * math.Log(r.at(i, i))
	}
	return s
}
