package diagnostics

import (
	"math"

	"plumb/internal/eft"
)

// Double-double arithmetic for the precise path: a value is the unevaluated
// sum hi + lo of two float64 with |lo| ≤ ½ulp(hi), about 106 significant
// bits. The error-free transformations are Knuth's TwoSum, Dekker's
// FastTwoSum and the FMA form of TwoProduct; the sum is the accurate
// ("IEEE") double-double addition, whose error is a few u² of the result
// (u = 2⁻⁵³), so that cancellation in a back substitution costs nothing.
// Overflow, infinities and NaN are not handled: the precise path works on
// finite factors.

// ddf is a double-double number hi + lo.
type ddf struct{ hi, lo float64 }

func (a ddf) add(b ddf) ddf {
	s, e := eft.TwoSum(a.hi, b.hi)
	t, f := eft.TwoSum(a.lo, b.lo)
	e += t
	s, e = eft.FastTwoSum(s, e)
	e += f
	s, e = eft.FastTwoSum(s, e)
	return ddf{s, e}
}

func (a ddf) neg() ddf { return ddf{-a.hi, -a.lo} }

func (a ddf) sub(b ddf) ddf { return a.add(b.neg()) }

func (a ddf) mul(b ddf) ddf {
	p, e := eft.TwoProd(a.hi, b.hi)
	e += a.hi*b.lo + a.lo*b.hi
	p, e = eft.FastTwoSum(p, e)
	return ddf{p, e}
}

// div returns a/b: three quotient digits, each from the remainder of the
// previous ones.
func (a ddf) div(b ddf) ddf {
	q1 := a.hi / b.hi
	r := a.sub(b.mul(ddf{q1, 0}))
	q2 := r.hi / b.hi
	r = r.sub(b.mul(ddf{q2, 0}))
	q3 := r.hi / b.hi
	q1, q2 = eft.FastTwoSum(q1, q2)
	return ddf{q1, q2}.add(ddf{q3, 0})
}

// sqrt returns √a for a ≥ 0 (NaN for a < 0): one Newton step from the
// float64 root, with the residual a − s² formed exactly.
func (a ddf) sqrt() ddf {
	if a.hi == 0 {
		return ddf{}
	}
	s := math.Sqrt(a.hi)
	p, e := eft.TwoProd(s, s)
	r := a.sub(ddf{p, e})
	h, l := eft.FastTwoSum(s, r.hi/(2*s))
	return ddf{h, l}
}

// ldexp returns a·2^k, exact barring underflow.
func (a ddf) ldexp(k int) ddf { return ddf{math.Ldexp(a.hi, k), math.Ldexp(a.lo, k)} }

// ddMat is a small row-major double-double matrix.
type ddMat struct {
	r, c int
	d    []ddf
}

func newDDMat(r, c int) ddMat { return ddMat{r: r, c: c, d: make([]ddf, r*c)} }

func (a ddMat) at(i, j int) ddf     { return a.d[i*a.c+j] }
func (a ddMat) set(i, j int, v ddf) { a.d[i*a.c+j] = v }

// ddFrom joins the high parts hi and the low parts lo (lo.d nil: zero) of
// a matrix, keeping the columns idx each multiplied by scale[k] when scale
// is not nil (in double-double, so the scaling adds only its own rounding).
func ddFrom(hi, lo dense, idx []int, scale []float64) ddMat {
	a := newDDMat(hi.r, len(idx))
	for i := 0; i < hi.r; i++ {
		for k, j := range idx {
			v := ddf{hi.at(i, j), 0}
			if lo.d != nil {
				v.lo = lo.at(i, j)
			}
			if scale != nil {
				v = v.mul(ddf{scale[k], 0})
			}
			a.set(i, k, v)
		}
	}
	return a
}

// hiPart and loPart split a into two float64 matrices.
func (a ddMat) hiPart() dense {
	out := newDense(a.r, a.c)
	for i, v := range a.d {
		out.d[i] = v.hi
	}
	return out
}

func (a ddMat) loPart() dense {
	out := newDense(a.r, a.c)
	for i, v := range a.d {
		out.d[i] = v.lo
	}
	return out
}

// ddQR returns the c×c upper triangular factor R, with a non-negative
// diagonal, of the Householder QR factorization of a (r×c) in
// double-double; rows of zeros are appended when r < c. The reflector of
// column j maps (α, x) to (β, 0), β = −sign(α)·‖(α, x)‖, with u = (α − β, x):
// a column (ρ, y) becomes (ρ + g, y + (g/(α − β))·x), g = (uᵀ(ρ, y))/β. The
// norm is taken of values scaled by a power of two near the largest, so that
// it neither overflows nor underflows.
func ddQR(a ddMat) ddMat {
	n := a.c
	rows := max(a.r, n)
	w := newDDMat(rows, n)
	copy(w.d, a.d)
	for j := 0; j < n; j++ {
		var amax float64
		for i := j + 1; i < rows; i++ {
			amax = math.Max(amax, math.Abs(w.at(i, j).hi))
		}
		if amax == 0 {
			continue // nothing below the diagonal
		}
		alpha := w.at(j, j)
		amax = math.Max(amax, math.Abs(alpha.hi))
		_, e := math.Frexp(amax)
		nrm := alpha.ldexp(-e).mul(alpha.ldexp(-e))
		for i := j + 1; i < rows; i++ {
			x := w.at(i, j).ldexp(-e)
			nrm = nrm.add(x.mul(x))
		}
		beta := nrm.sqrt().ldexp(e)
		if alpha.hi >= 0 {
			beta = beta.neg()
		}
		u0 := alpha.sub(beta)
		iu := ddf{1, 0}.div(u0)
		for l := j + 1; l < n; l++ {
			s := u0.mul(w.at(j, l))
			for i := j + 1; i < rows; i++ {
				s = s.add(w.at(i, j).mul(w.at(i, l)))
			}
			g := s.div(beta)
			w.set(j, l, w.at(j, l).add(g))
			h := g.mul(iu)
			for i := j + 1; i < rows; i++ {
				w.set(i, l, w.at(i, l).add(h.mul(w.at(i, j))))
			}
		}
		w.set(j, j, beta)
	}
	out := newDDMat(n, n)
	for i := 0; i < n; i++ {
		neg := w.at(i, i).hi < 0
		for j := i; j < n; j++ {
			v := w.at(i, j)
			if neg {
				v = v.neg()
			}
			out.set(i, j, v)
		}
	}
	return out
}

// ddBackSolve solves the upper triangular system t·x = b.
func ddBackSolve(t ddMat, b []ddf) []ddf {
	n := t.c
	x := make([]ddf, n)
	for i := n - 1; i >= 0; i-- {
		s := b[i]
		for k := i + 1; k < n; k++ {
			s = s.sub(t.at(i, k).mul(x[k]))
		}
		x[i] = s.div(t.at(i, i))
	}
	return x
}

// ddTriInv returns the inverse of the upper triangular t, by columns of
// back substitution; callers ensure full rank.
func ddTriInv(t ddMat) ddMat {
	n := t.c
	inv := newDDMat(n, n)
	one := ddf{1, 0}
	for j := 0; j < n; j++ {
		inv.set(j, j, one.div(t.at(j, j)))
		for i := j - 1; i >= 0; i-- {
			var s ddf
			for k := i + 1; k <= j; k++ {
				s = s.add(t.at(i, k).mul(inv.at(k, j)))
			}
			inv.set(i, j, s.neg().div(t.at(i, i)))
		}
	}
	return inv
}

// rowNorm2 returns the squared Euclidean norm of row i.
func (a ddMat) rowNorm2(i int) ddf {
	var s ddf
	for _, v := range a.d[i*a.c : (i+1)*a.c] {
		s = s.add(v.mul(v))
	}
	return s
}
