package diagnostics

import (
	"math"

	"plumb/stream"
)

// design is what every diagnostic is computed from, whichever accumulator
// supplied it: for the chosen regressors (and the target, last) the row
// count, the sum of weights, the means and a factor f of the centered
// co-moment matrix (fᵀf = Σ w (x − x̄)(x − x̄)ᵀ). On the QR path f is the
// trailing block of the R factor of [1 X y]; on the cross-product path it
// is a Cholesky factor of the co-moments. The uncentered factor of
// [1 X y] is then [[√W, √W·x̄ᵀ], [0, f]] without any further rounding of
// the centered part.
//
// Every column is held divided by its scale (a power of two from the
// accumulator, from the column's largest magnitude), so that sums of
// squares of data at 1e-200 or 1e200 neither underflow nor overflow: mean,
// sst, min, max, f and row0 (and their low parts) are those of x/scale.
// Diagnostics that do not depend on the columns' units (VIFs, condition
// indices, proportions, correlations, ranks) use them as they are; values
// reported in the columns' own units are multiplied back (own), exactly.
type design struct {
	path  string
	names []string // regressors, then the target
	k     int      // number of regressors
	hasY  bool

	n     int64
	w     float64
	scale []float64 // per column, a power of two
	mean  []float64
	sst   []float64 // centered sums of squares, ‖f_j‖²
	min   []float64
	max   []float64
	drop  []int64

	f    dense     // r×(k+hasY)
	row0 []float64 // first row of the uncentered factor, √W·x̄ (as computed by the path)

	// On the precise path, the low parts of f, row0 and mean (the
	// double-double values are f + flo and so on); flo.d is nil on the
	// other paths. Every diagnostic uses the float64 parts; the
	// regression and the VIFs also use the low parts.
	flo    dense
	row0lo []float64
	meanLo []float64

	constant  []bool
	nearConst []bool
	// dummy marks a factor's treatment dummies (nil without factors):
	// an exact dependency is written for another column where it can be.
	dummy []bool
	// cpFallback records that the cross-product factor needed the
	// eigenvalue fallback (the co-moments were not positive definite).
	cpFallback bool
}

// nearConstRel is the relative spread below which a column is near
// constant: its root-mean-square deviation is within about a hundred units
// in the last place of its magnitude, so its centered values are mostly
// rounding of the stored values.
const nearConstRel = 100 * eps

const eps = 0x1p-52

func (d *design) ncols() int { return len(d.names) }

// own returns a value of column j's scaled units in the column's own units.
func (d *design) own(j int, v float64) float64 { return v * d.scale[j] }

// finish fills sst, constant and near-constant flags from f, min and max.
func (d *design) finish() {
	p := d.ncols()
	d.sst = make([]float64, p)
	d.constant = make([]bool, p)
	d.nearConst = make([]bool, p)
	for j := 0; j < p; j++ {
		if d.min[j] == d.max[j] {
			// Every value equal: the co-moment is rounding of the mean.
			d.constant[j] = true
			for i := 0; i < d.f.r; i++ {
				d.f.set(i, j, 0)
				if d.flo.d != nil {
					d.flo.set(i, j, 0)
				}
			}
			continue
		}
		nrm := d.f.colNorm(j)
		d.sst[j] = nrm * nrm
		scale := math.Max(math.Abs(d.min[j]), math.Abs(d.max[j]))
		if math.Sqrt(d.sst[j]/d.w) <= nearConstRel*scale {
			d.nearConst[j] = true
		}
	}
}

// sd returns the standard deviation of column j, in its scaled units (n − 1
// denominator for unweighted rows; weights are treated as frequencies).
func (d *design) sd(j int) float64 {
	if d.n < 2 || d.w == 0 {
		return 0
	}
	return math.Sqrt(d.sst[j] / (d.w * float64(d.n-1) / float64(d.n)))
}

// newDesign starts a design for the accumulator columns idx, column idx[a]
// divided by scale(idx[a]).
func newDesign(m *stream.Moments, scale func(int) float64, idx []int, names []string, k int, hasY bool) *design {
	p := len(idx)
	d := &design{
		names: names, k: k, hasY: hasY,
		n:     m.N(),
		w:     m.SumWeights(),
		scale: make([]float64, p),
		mean:  make([]float64, p),
		min:   make([]float64, p),
		max:   make([]float64, p),
		drop:  make([]int64, p),
		row0:  make([]float64, p),
	}
	miss := m.Counts().Missing(nil)
	for a, j := range idx {
		d.scale[a] = scale(j)
		d.min[a] = m.Min(j) / d.scale[a]
		d.max[a] = m.Max(j) / d.scale[a]
		d.drop[a] = miss[j]
	}
	return d
}

// designFromQR builds the design from the QR accumulator: the columns of
// its R factor for the intercept and the chosen columns are re-factored (an
// orthogonal reduction, so nothing is squared), which gives the R factor of
// [1 (X−c)/s (y−c)/s] for exactly those columns, s the factor's scales. With low parts (an extended
// factor) the re-factoring runs in double-double and the design keeps them:
// the precise path.
func designFromQR(m *stream.Moments, q QRFactor, idx []int, names []string, k int, hasY bool) *design {
	full := q.R(nil)
	P := len(q.Names())
	r := newDense(P+1, P+1)
	for i := 0; i <= P; i++ {
		for j := i; j <= P; j++ {
			r.set(i, j, full.At(i, j))
		}
	}
	origin := make([]float64, P) // c/s: exact
	for j := range origin {
		origin[j] = q.Origin(j) / q.Scale(j)
	}
	if pf, ok := q.(PreciseFactor); ok && pf.Extended() {
		lo := pf.RLo(nil)
		rl := newDense(P+1, P+1)
		for i := 0; i <= P; i++ {
			for j := i; j <= P; j++ {
				rl.set(i, j, lo.At(i, j))
			}
		}
		return designFromRParts(m, q.Scale, r, rl, origin, idx, names, k, hasY)
	}
	return designFromR(m, q.Scale, r, origin, idx, names, k, hasY)
}

// designFromRParts is designFromR in double-double, from the high and low
// parts of the factor: the design of the precise path.
func designFromRParts(m *stream.Moments, scale func(int) float64, hi, lo dense, origin []float64, idx []int, names []string, k int, hasY bool) *design {
	d := newDesign(m, scale, idx, names, k, hasY)
	d.path = PathQRPrecise
	sel := make([]int, len(idx)+1)
	for b, j := range idx {
		sel[b+1] = j + 1
	}
	r := ddQR(ddFrom(hi, lo, sel, nil))
	sw := r.at(0, 0)
	p := len(idx)
	t := newDDMat(p, p)
	for i := 0; i < p; i++ {
		for j := i; j < p; j++ {
			t.set(i, j, r.at(i+1, j+1))
		}
	}
	d.f, d.flo = t.hiPart(), t.loPart()
	d.meanLo = make([]float64, p)
	d.row0lo = make([]float64, p)
	for b, j := range idx {
		c := ddf{origin[j], 0}
		mean := c.add(r.at(0, b+1).div(sw))
		row0 := r.at(0, b+1).add(c.mul(sw))
		d.mean[b], d.meanLo[b] = mean.hi, mean.lo
		d.row0[b], d.row0lo[b] = row0.hi, row0.lo
	}
	d.finish()
	return d
}

// designFromR builds the design from the (P+1)×(P+1) upper triangular
// factor of [1 (X−c)/s] over all accumulator columns and the scaled origin
// c/s.
func designFromR(m *stream.Moments, scale func(int) float64, full dense, origin []float64, idx []int, names []string, k int, hasY bool) *design {
	d := newDesign(m, scale, idx, names, k, hasY)
	d.path = PathQR
	P := full.c - 1
	a := newDense(P+1, len(idx)+1)
	for i := 0; i <= P; i++ {
		a.set(i, 0, full.at(i, 0))
		for b, j := range idx {
			a.set(i, b+1, full.at(i, j+1))
		}
	}
	r := qrR(a)
	sw := r.at(0, 0)
	p := len(idx)
	d.f = newDense(p, p)
	for i := 0; i < p; i++ {
		for j := i; j < p; j++ {
			d.f.set(i, j, r.at(i+1, j+1))
		}
	}
	for b, j := range idx {
		c := origin[j]
		d.mean[b] = c + r.at(0, b+1)/sw
		// Row 0 of R·M, where M maps the shifted columns back: the
		// uncentered factor of [1 X y].
		d.row0[b] = r.at(0, b+1) + c*sw
	}
	d.finish()
	return d
}

// designFromMoments builds the design from the centered cross-products: a
// Cholesky factor of the correlation matrix of the varying columns, scaled
// back to the columns' units. When the co-moments are not numerically
// positive definite (a Cholesky pivot² at or below the rank tolerance, an
// exact dependency) the factor comes from the symmetric eigendecomposition
// instead, with the eigenvalues below the rank tolerance set to zero.
func designFromMoments(m *stream.Moments, idx []int, names []string, k int, hasY bool) *design {
	d := newDesign(m, m.Scale, idx, names, k, hasY)
	d.path = PathCrossProduct
	p := len(idx)
	sw := math.Sqrt(d.w)
	for b, j := range idx {
		d.mean[b] = m.Mean(j) / d.scale[b]
		d.row0[b] = sw * d.mean[b]
	}
	var vary []int
	scale := make([]float64, p)
	for b, j := range idx {
		c := m.ScaledAt(j, j)
		if d.min[b] != d.max[b] && c > 0 {
			vary = append(vary, b)
			scale[b] = math.Sqrt(c)
		}
	}
	nv := len(vary)
	corr := newDense(nv, nv)
	for x, a := range vary {
		for y, b := range vary {
			corr.set(x, y, m.ScaledAt(idx[a], idx[b])/(scale[a]*scale[b]))
		}
		corr.set(x, x, 1)
	}
	u, ok := cholUpper(corr)
	// A pivot below the rank tolerance is rounding of an exact
	// dependency: take the eigenvalue route, which can represent it.
	tol := cpRankTol * float64(max(nv, 1))
	for i := 0; ok && i < nv; i++ {
		ok = u.at(i, i)*u.at(i, i) > tol
	}
	if !ok {
		d.cpFallback = true
		vals, vecs, eok := symEigen(corr)
		u = newDense(nv, nv)
		if eok {
			// u = Λ^½ Vᵀ, so uᵀu = V Λ Vᵀ. Eigenvalues at or below the
			// rank tolerance (relative to the largest) are set to zero:
			// the dependency is then exact in the factor too.
			top := math.Max(vals[nv-1], 0)
			for i := 0; i < nv; i++ {
				l := vals[i]
				if l <= tol*top {
					l = 0
				}
				s := math.Sqrt(l)
				for j := 0; j < nv; j++ {
					u.set(i, j, s*vecs.at(j, i))
				}
			}
		}
	}
	d.f = newDense(max(nv, 1), p)
	for i := 0; i < nv; i++ {
		for y, b := range vary {
			d.f.set(i, b, u.at(i, y)*scale[b])
		}
	}
	d.finish()
	return d
}

// isDummy reports whether design column j is a factor's treatment dummy.
func (d *design) isDummy(j int) bool { return d.dummy != nil && d.dummy[j] }
