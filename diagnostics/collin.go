package diagnostics

import (
	"math"
	"sort"
)

// Rank tolerances (see the package documentation).
const (
	// qrRankTol: on the QR path a singular value of the scaled centered
	// factor at or below qrRankTol·p·σ₁ counts as zero.
	qrRankTol = 1e3 * eps
	// cpRankTol: on the cross-product path an eigenvalue of the
	// correlation matrix at or below cpRankTol·p·λ₁ counts as zero.
	cpRankTol = 1e3 * eps
	// involvedTol: a standardized coefficient of a null vector, reduced
	// so that its dependent column has coefficient 1, smaller than this
	// does not involve its column.
	involvedTol = 1e-6
	// pivotFloor: a column may be picked as dependent when its
	// null-vector component is at least this share of the largest.
	pivotFloor = 0.1
)

// exactDep is one exact dependency among the varying columns, in
// standardized units: z_dep = Σ coef[i]·z_terms[i], z_j = (x_j − x̄_j)/√SST_j.
type exactDep struct {
	dep   int
	terms []int
	coef  []float64
}

// collin is the collinearity analysis of a set of regressors of a design.
type collin struct {
	d     *design
	cols  []int // analyzed regressors (design indices)
	vary  []int // those that are neither constant nor near constant
	s     dense // f restricted to vary, columns scaled to unit length
	sv    []float64
	v     dense
	svdOK bool
	tol   float64 // relative singular-value tolerance used
	rank  int     // numerical rank of the scaled centered varying columns
	deps  []exactDep
	inv   map[int]bool // involved in an exact dependency
	isDep map[int]bool // dependent column of an exact dependency
	indep []int        // vary minus the dependents: a maximal independent subset
	tinv  dense        // inverse of the R factor of s restricted to indep
	pos   map[int]int  // design index -> row of tinv
	vif   map[int]float64
}

// rankTol returns the relative singular-value tolerance for nv columns.
func (d *design) rankTol(nv int) float64 {
	n := float64(max(nv, 1))
	if d.path != PathCrossProduct {
		// Both QR paths decide the rank on the float64 factor.
		return qrRankTol * n
	}
	return math.Sqrt(cpRankTol * n)
}

// analyzeSet runs the collinearity core on the regressors cols, in
// float64 (the what-if searches run it many times).
func analyzeSet(d *design, cols []int) *collin { return analyzeCols(d, cols, false) }

// analyzeCols is analyzeSet; with precise (the design must have low parts)
// the VIFs and the inverse behind them are computed in double-double.
func analyzeCols(d *design, cols []int, precise bool) *collin {
	c := &collin{d: d, cols: cols, inv: map[int]bool{}, isDep: map[int]bool{}, pos: map[int]int{}, vif: map[int]float64{}}
	for _, j := range cols {
		if !d.constant[j] && !d.nearConst[j] {
			c.vary = append(c.vary, j)
		}
	}
	nv := len(c.vary)
	sc := make([]float64, nv)
	for i, j := range c.vary {
		sc[i] = 1 / math.Sqrt(d.sst[j])
	}
	c.s = d.f.cols(c.vary, sc)
	c.tol = d.rankTol(nv)
	c.sv, c.v, c.svdOK = svd(c.s)
	if c.svdOK && !allFinite(c.sv) {
		// A NaN or an infinity in the factor (an accumulator that
		// overflowed) is no decomposition to read a rank from.
		c.svdOK = false
	}
	if !c.svdOK {
		// Fall back to a full-rank reading; the caller reports it.
		c.rank = nv
	} else {
		for _, s := range c.sv {
			if nv > 0 && s > c.tol*c.sv[0] {
				c.rank++
			}
		}
	}
	if c.rank < nv {
		c.reduceNullSpace()
	}
	for _, j := range c.vary {
		if !c.isDep[j] {
			c.indep = append(c.indep, j)
		}
	}
	// VIFs from the R factor of the independent columns: VIF_j is the
	// squared norm of row j of its inverse, ((SᵀS)⁻¹)_jj.
	spos := make([]int, len(c.indep))
	for a, j := range c.indep {
		spos[a] = c.vpos(j)
		c.pos[j] = a
	}
	if precise {
		// Precise path: the same in double-double from f + flo, so that
		// the VIFs are not limited by the rounding of f (about eps·κ).
		isc := make([]float64, len(c.indep))
		for a := range c.indep {
			isc[a] = sc[spos[a]]
		}
		ti := ddTriInv(ddQR(ddFrom(d.f, d.flo, c.indep, isc)))
		c.tinv = ti.hiPart()
		for a, j := range c.indep {
			if !c.inv[j] {
				c.vif[j] = ti.rowNorm2(a).hi
			}
		}
		return c
	}
	t := qrR(c.s.cols(spos, nil))
	c.tinv = triInv(t)
	for a, j := range c.indep {
		if !c.inv[j] {
			c.vif[j] = c.tinv.rowNorm2(a)
		}
	}
	return c
}

// vpos returns the position of design column j in vary.
func (c *collin) vpos(j int) int {
	for i, v := range c.vary {
		if v == j {
			return i
		}
	}
	panic("diagnostics: column not in the varying set")
}

// reduceNullSpace turns the null-space basis (the trailing right singular
// vectors) into one equation per dependency: Gauss–Jordan elimination with
// threshold pivoting picks, each time, the last column (in column order)
// whose standardized component is within pivotFloor of the largest
// remaining one as the dependent one and removes it from the
// other vectors, so that each equation has its own dependent column
// expressed by independent ones. The coefficients are then refined by a
// least-squares fit of the dependent column on its terms.
func (c *collin) reduceNullSpace() {
	nv := len(c.vary)
	m := nv - c.rank
	a := newDense(m, nv)
	for i := 0; i < m; i++ {
		for j := 0; j < nv; j++ {
			a.set(i, j, c.v.at(j, c.rank+i))
		}
	}
	pivot := make([]int, m)
	isPiv := make([]bool, nv)
	for s := 0; s < m; s++ {
		// The dependent column is the last one, in the caller's column
		// order, whose component is at least pivotFloor of the largest
		// remaining one: derived columns (a total, a rescaled copy, the
		// last dummy) usually come after their sources, and the floor
		// keeps the elimination's growth bounded by 1/pivotFloor.
		best := 0.0
		for i := s; i < m; i++ {
			for j := 0; j < nv; j++ {
				if !isPiv[j] {
					best = math.Max(best, math.Abs(a.at(i, j)))
				}
			}
		}
		// Among the eligible columns a factor's dummy comes last in
		// preference: "chlorine is fixed by the source" is written for
		// chlorine whichever level is the base, so that each window
		// names the same dependent column.
		bi, bj := -1, -1
		plain := false
		for i := s; i < m; i++ {
			for j := 0; j < nv; j++ {
				if isPiv[j] || math.Abs(a.at(i, j)) < pivotFloor*best {
					continue
				}
				p := !c.d.isDummy(c.vary[j])
				if p && !plain || p == plain && j > bj {
					bi, bj, plain = i, j, p
				}
			}
		}
		if bi < 0 {
			// No finite pivot left (the basis holds NaN): report the
			// dependencies found so far.
			m = s
			break
		}
		// Swap rows s and bi.
		for j := 0; j < nv; j++ {
			x, y := a.at(s, j), a.at(bi, j)
			a.set(s, j, y)
			a.set(bi, j, x)
		}
		pv := a.at(s, bj)
		for j := 0; j < nv; j++ {
			a.set(s, j, a.at(s, j)/pv)
		}
		for i := 0; i < m; i++ {
			if i == s {
				continue
			}
			f := a.at(i, bj)
			if f == 0 {
				continue
			}
			for j := 0; j < nv; j++ {
				a.set(i, j, a.at(i, j)-f*a.at(s, j))
			}
			a.set(i, bj, 0)
		}
		pivot[s] = bj
		isPiv[bj] = true
	}
	for s := 0; s < m; s++ {
		dep := exactDep{dep: c.vary[pivot[s]]}
		var tpos []int
		for j := 0; j < nv; j++ {
			if !isPiv[j] && math.Abs(a.at(s, j)) > involvedTol {
				tpos = append(tpos, j)
			}
		}
		// Refine: least squares of z_dep on z_terms from the R factor
		// of [S_terms S_dep].
		all := append(append([]int(nil), tpos...), pivot[s])
		r := qrR(c.s.cols(all, nil))
		nt := len(tpos)
		rhs := make([]float64, nt)
		for i := range rhs {
			rhs[i] = r.at(i, nt)
		}
		tt := newDense(nt, nt)
		for i := 0; i < nt; i++ {
			for j := i; j < nt; j++ {
				tt.set(i, j, r.at(i, j))
			}
		}
		coef := backSolve(tt, rhs)
		for i, j := range tpos {
			dep.terms = append(dep.terms, c.vary[j])
			dep.coef = append(dep.coef, coef[i])
		}
		c.deps = append(c.deps, dep)
		c.isDep[dep.dep] = true
		c.inv[dep.dep] = true
		for _, j := range dep.terms {
			c.inv[j] = true
		}
	}
	// Report dependencies in column order of their dependent column.
	sort.SliceStable(c.deps, func(x, y int) bool { return c.deps[x].dep < c.deps[y].dep })
}

// vifOf returns the VIF of design column j in this analysis and whether it
// is defined, with the reason when it is not.
func (c *collin) vifOf(j int) (float64, string) {
	switch {
	case c.d.constant[j]:
		return 0, UndefinedConstant
	case c.d.nearConst[j]:
		return 0, UndefinedNearConstant
	case c.inv[j]:
		return 0, UndefinedExact
	}
	v, ok := c.vif[j]
	if !ok {
		return 0, UndefinedExact
	}
	return v, ""
}

// dropVIF returns the VIFs of the other analyzed columns after dropping
// column k. For a column outside every exact dependency it uses the
// Schur-complement identity on P = (SᵀS)⁻¹ restricted to the independent
// columns: ((S₋ₖᵀS₋ₖ)⁻¹)_jj = P_jj − P_jk²/P_kk, O(p) per column. Dropping a
// column of an exact dependency changes the dependencies, so the analysis
// is rerun without it.
func (c *collin) dropVIF(k int) map[int]vifResult {
	out := map[int]vifResult{}
	if a, ok := c.pos[k]; ok && !c.inv[k] {
		pkk := c.tinv.rowNorm2(a)
		for _, j := range c.cols {
			if j == k {
				continue
			}
			v, why := c.vifOf(j)
			if why == "" {
				b := c.pos[j]
				pjk := dot(c.tinv.d[b*c.tinv.c:(b+1)*c.tinv.c], c.tinv.d[a*c.tinv.c:(a+1)*c.tinv.c])
				v -= pjk * pjk / pkk
			}
			out[j] = vifResult{v, why}
		}
		return out
	}
	if c.d.constant[k] || c.d.nearConst[k] {
		for _, j := range c.cols {
			if j != k {
				v, why := c.vifOf(j)
				out[j] = vifResult{v, why}
			}
		}
		return out
	}
	o := analyzeSet(c.d, without(c.cols, k))
	for _, j := range o.cols {
		v, why := o.vifOf(j)
		out[j] = vifResult{v, why}
	}
	return out
}

type vifResult struct {
	vif float64
	why string
}

func dot(a, b []float64) float64 {
	s := 0.0
	for i := range a {
		s += a[i] * b[i]
	}
	return s
}

// allFinite reports whether every value is finite.
func allFinite(v []float64) bool {
	for _, x := range v {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return false
		}
	}
	return true
}

func without(cols []int, k int) []int {
	out := make([]int, 0, len(cols))
	for _, j := range cols {
		if j != k {
			out = append(out, j)
		}
	}
	return out
}
