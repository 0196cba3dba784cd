package diagnostics

import (
	"errors"
	"fmt"
	"math"
	"reflect"
	"slices"
	"sort"
	"strings"

	"gonum.org/v1/gonum/mat"

	"plumb/stream"
)

// Errors for bad data, wrapped with the column concerned.
var (
	ErrUnknownColumn = errors.New("unknown column")
	ErrNoRows        = errors.New("no rows")
	ErrAllDropped    = errors.New("all rows dropped")
	ErrTooFewRows    = errors.New("too few usable rows")
	ErrBadOptions    = errors.New("bad options")
)

// QRFactor is what Analyze needs of a QR accumulator: the upper triangular
// factor R of the design [1 (X−c)/s] over its columns (column 0 the
// intercept, column j+1 data column j shifted by Origin(j) and divided by
// Scale(j), a power of two), the column names and the number of rows.
// *stream.QR implements it.
type QRFactor interface {
	R(dst *mat.TriDense) *mat.TriDense
	Origin(j int) float64
	Scale(j int) float64
	Names() []string
	N() int64
}

// PreciseFactor is a QRFactor that may keep R in double-double: when
// Extended reports true, R(i,j) + RLo(i,j) is the double-double entry, and
// Analyze takes the precise path (PathQRPrecise): the re-factoring of the
// chosen columns, the VIFs and the regression run in double-double.
// *stream.QR implements it; NewQRExtended makes an extended one.
type PreciseFactor interface {
	QRFactor
	Extended() bool
	RLo(dst *mat.TriDense) *mat.TriDense
}

var _ PreciseFactor = (*stream.QR)(nil)

// Analyze computes the diagnostics for the chosen columns. m must not be
// nil. q may be nil, also a nil *stream.QR (cross-product path only); when
// it is not, it must have been built over the same columns, in the same
// order, from the same rows as m, and the QR path is used — the precise QR
// path when q is an extended factor (see PreciseFactor). Analyze returns an
// error for bad data or options (an unknown column, no rows, fewer usable
// rows than columns + 1) naming the column; it panics only when m is nil or
// q does not match m.
//
// Report.Trust says whether the path's results can be trusted; a caller
// escalates cross-product → QR → precise QR until it is trustworthy (or,
// when it needs more digits than RequiredDigits, until
// Trust.ExpectedDigits reaches what it needs).
func Analyze(m *stream.Moments, q QRFactor, opt Options) (*Report, error) {
	if m == nil {
		panic("diagnostics: Analyze with a nil Moments")
	}
	if isNil(q) {
		q = nil
	} else {
		checkSame(m, q)
	}
	opt = withDefaults(opt)
	opt, plans, err := resolveFactors(m, opt)
	if err != nil {
		return nil, err
	}
	idx, names, k, err := resolve(m, opt)
	if err != nil {
		return nil, err
	}
	if err := checkRows(m, idx, names, k, opt); err != nil {
		return nil, err
	}
	hasY := opt.Target != ""
	var d *design
	if q != nil {
		d = designFromQR(m, q, idx, names, k, hasY)
	} else {
		d = designFromMoments(m, idx, names, k, hasY)
	}
	return analyzeDesign(d, m, opt, plans)
}

// isNil reports whether q is nil or holds a nil pointer (a nil *stream.QR
// passed as a QRFactor is not a nil interface).
func isNil(q QRFactor) bool {
	if q == nil {
		return true
	}
	v := reflect.ValueOf(q)
	switch v.Kind() {
	case reflect.Pointer, reflect.Interface, reflect.Map, reflect.Slice, reflect.Func, reflect.Chan:
		return v.IsNil()
	}
	return false
}

func checkSame(m *stream.Moments, q QRFactor) {
	mn, qn := m.Names(), q.Names()
	if len(mn) != len(qn) {
		panic(fmt.Sprintf("diagnostics: Moments has %d columns, QR %d", len(mn), len(qn)))
	}
	for i := range mn {
		if mn[i] != qn[i] {
			panic(fmt.Sprintf("diagnostics: column %d is %q in Moments, %q in QR", i, mn[i], qn[i]))
		}
	}
	if m.N() != q.N() {
		panic(fmt.Sprintf("diagnostics: Moments has %d rows, QR %d", m.N(), q.N()))
	}
}

func withDefaults(opt Options) Options {
	if !(opt.VIFLimit > 0) || math.IsInf(opt.VIFLimit, 0) {
		opt.VIFLimit = DefaultVIFLimit
	}
	if !(opt.CondLimit > 0) || math.IsInf(opt.CondLimit, 0) {
		opt.CondLimit = DefaultCondLimit
	}
	if !(opt.PropLimit > 0) || opt.PropLimit >= 1 {
		opt.PropLimit = DefaultPropLimit
	}
	return opt
}

// resolve maps the option's columns to accumulator indices: the regressors
// first, then the target.
func resolve(m *stream.Moments, opt Options) (idx []int, names []string, k int, err error) {
	all := m.Names()
	pos := make(map[string]int, len(all))
	for i, n := range all {
		pos[n] = i
	}
	avail := strings.Join(all, ", ")
	if opt.Target != "" {
		if _, ok := pos[opt.Target]; !ok {
			return nil, nil, 0, fmt.Errorf("diagnostics: target column %q is not among the scanned columns (%s): %w", opt.Target, avail, ErrUnknownColumn)
		}
	}
	cols := opt.Columns
	if cols == nil {
		for _, n := range all {
			if n != opt.Target {
				cols = append(cols, n)
			}
		}
	}
	if len(cols) == 0 {
		return nil, nil, 0, fmt.Errorf("diagnostics: no regressor columns (scanned: %s): %w", avail, ErrBadOptions)
	}
	seen := map[string]bool{}
	for _, n := range cols {
		j, ok := pos[n]
		if !ok {
			return nil, nil, 0, fmt.Errorf("diagnostics: column %q is not among the scanned columns (%s): %w", n, avail, ErrUnknownColumn)
		}
		if n == opt.Target {
			return nil, nil, 0, fmt.Errorf("diagnostics: column %q is the target and cannot also be a regressor: %w", n, ErrBadOptions)
		}
		if seen[n] {
			return nil, nil, 0, fmt.Errorf("diagnostics: column %q is listed twice: %w", n, ErrBadOptions)
		}
		seen[n] = true
		idx = append(idx, j)
		names = append(names, n)
	}
	k = len(idx)
	if opt.Target != "" {
		idx = append(idx, pos[opt.Target])
		names = append(names, opt.Target)
	}
	gnames := make([]string, 0, len(opt.Groups))
	for g := range opt.Groups {
		gnames = append(gnames, g)
	}
	sort.Strings(gnames)
	for _, g := range gnames {
		if len(opt.Groups[g]) == 0 {
			return nil, nil, 0, fmt.Errorf("diagnostics: group %q has no columns: %w", g, ErrBadOptions)
		}
		in := map[string]bool{}
		for _, n := range opt.Groups[g] {
			if !seen[n] {
				return nil, nil, 0, fmt.Errorf("diagnostics: group %q: column %q is not a regressor of this analysis: %w", g, n, ErrUnknownColumn)
			}
			if in[n] {
				return nil, nil, 0, fmt.Errorf("diagnostics: group %q lists column %q twice: %w", g, n, ErrBadOptions)
			}
			in[n] = true
		}
	}
	return idx, names, k, nil
}

// checkRows rejects accumulators with too few usable rows, naming the
// column that dropped the most rows when rows were dropped.
func checkRows(m *stream.Moments, idx []int, names []string, k int, opt Options) error {
	c := m.Counts()
	miss := c.Missing(nil)
	worst, wn := -1, int64(0)
	for a, j := range idx {
		if miss[j] > wn {
			worst, wn = a, miss[j]
		}
	}
	blame := ""
	if worst >= 0 {
		blame = fmt.Sprintf("; column %q is NULL, NaN or infinite in %d of them", names[worst], wn)
	} else if c.BadWeights > 0 {
		blame = fmt.Sprintf("; %d had a bad weight", c.BadWeights)
	}
	n := m.N()
	switch {
	case n == 0 && c.Dropped == 0:
		return fmt.Errorf("diagnostics: no rows for columns %s: %w", strings.Join(names, ", "), ErrNoRows)
	case n == 0:
		return fmt.Errorf("diagnostics: all %d rows dropped%s: %w", c.Dropped, blame, ErrAllDropped)
	case m.SumWeights() == 0:
		return fmt.Errorf("diagnostics: the %d usable rows all have weight zero: %w", n, ErrAllDropped)
	}
	need := int64(k + 1)
	what := fmt.Sprintf("%d columns plus the intercept", k)
	if opt.NoIntercept {
		what = fmt.Sprintf("%d columns", k)
	}
	if opt.Target != "" {
		// A residual degree of freedom for σ².
		need = int64(k + 2)
		if opt.NoIntercept {
			need = int64(k + 1)
		}
		what += " and one residual degree of freedom"
	}
	if n < need {
		return fmt.Errorf("diagnostics: only %d usable rows for %s (need at least %d; %d rows dropped%s): %w",
			n, what, need, c.Dropped, blame, ErrTooFewRows)
	}
	return nil
}

func fptr(v float64) *float64 { return &v }

func analyzeDesign(d *design, m *stream.Moments, opt Options, plans []*factorPlan) (*Report, error) {
	for _, p := range plans {
		for _, name := range p.kept {
			if j := slices.Index(d.names, name); j >= 0 {
				if d.dummy == nil {
					d.dummy = make([]bool, len(d.names))
				}
				d.dummy[j] = true
			}
		}
	}
	c := m.Counts()
	rep := &Report{
		RowsUsed:    c.Used,
		RowsDropped: c.Dropped,
		DroppedBy:   map[string]int64{},
		Path:        d.path,
	}
	for j, n := range d.names {
		rep.DroppedBy[n] = d.drop[j]
	}
	regs := make([]int, d.k)
	for j := range regs {
		regs[j] = j
	}
	col := analyzeCols(d, regs, d.flo.d != nil)
	if !col.svdOK {
		rep.Notes = append(rep.Notes, "the singular value decomposition of the scaled design did not converge; rank and dependencies assume full rank")
	}

	// Columns.
	for _, j := range regs {
		cr := ColumnReport{
			Name: d.names[j], Constant: d.constant[j], NearConstant: d.nearConst[j],
			Mean: d.own(j, d.mean[j]), SD: d.own(j, d.sd(j)), Min: d.own(j, d.min[j]), Max: d.own(j, d.max[j]),
			Dropped: d.drop[j],
		}
		if v, why := col.vifOf(j); why == "" {
			cr.VIF = fptr(v)
			cr.Tolerance = fptr(1 / v)
			cr.R2 = fptr(1 - 1/v)
			cr.SEInflation = fptr(math.Sqrt(v))
			cr.OverLimit = v >= opt.VIFLimit
		} else {
			cr.Undefined = why
			cr.OverLimit = true
		}
		rep.Columns = append(rep.Columns, cr)
	}
	rep.drivers(col)

	rep.correlation(col)
	rep.components(col)
	rep.conditioning(d, col)
	rep.Rank = 1 + col.rank
	rep.RankTolerance = col.tol
	rep.exactDependencies(d, col)
	rep.dependencyWords(m, plans)
	rep.nearDependencies(d, col, opt)
	rep.groups(d, col, opt, plans)
	rep.whatIf(d, col, opt)
	rep.condition(d, col)
	if opt.Target != "" {
		rep.regression(d, col, opt)
		rep.regressionOwnUnits(d)
	}
	rep.trust(d)
	rep.finite()
	return rep, nil
}

// correlation fills the correlation matrix of the regressors; see the
// Report field for constant columns.
func (rep *Report) correlation(c *collin) {
	d := c.d
	k := d.k
	rep.Correlation = make([][]float64, k)
	for i := range rep.Correlation {
		rep.Correlation[i] = make([]float64, k)
		rep.Correlation[i][i] = 1
	}
	// Correlations of the varying columns are inner products of the
	// unit-length columns of s.
	for a, i := range c.vary {
		for b := a + 1; b < len(c.vary); b++ {
			j := c.vary[b]
			r := 0.0
			for t := 0; t < c.s.r; t++ {
				r += c.s.at(t, a) * c.s.at(t, b)
			}
			r = math.Max(-1, math.Min(1, r))
			rep.Correlation[i][j] = r
			rep.Correlation[j][i] = r
		}
	}
}

// components fills the eigenvalues of the correlation matrix of the varying
// columns (squared singular values of the scaled centered factor) and the
// principal components (right singular vectors).
func (rep *Report) components(c *collin) {
	d := c.d
	rep.Eigenvalues = []float64{}
	rep.EigenNames = []string{}
	rep.Components = []Component{}
	if !c.svdOK {
		return
	}
	names := make([]string, len(c.vary))
	for a, j := range c.vary {
		names[a] = d.names[j]
	}
	rep.EigenNames = names
	tot := 0.0
	for _, s := range c.sv {
		tot += s * s
	}
	cum := 0.0
	for k, s := range c.sv {
		l := s * s
		cum += l
		load := make([]float64, len(c.vary))
		big := 0
		for a := range load {
			load[a] = c.v.at(a, k)
			if math.Abs(load[a]) > math.Abs(load[big]) {
				big = a
			}
		}
		if load[big] < 0 {
			for a := range load {
				load[a] = -load[a]
			}
		}
		rep.Eigenvalues = append(rep.Eigenvalues, l)
		rep.Components = append(rep.Components, Component{
			Eigenvalue: l, VarianceShare: l / tot, Cumulative: math.Min(cum/tot, 1),
			Names: names, Loadings: load,
		})
	}
}

// conditioning fills both BKW conventions.
func (rep *Report) conditioning(d *design, c *collin) {
	// (a) the uncentered design [1 X]: [[√W, √W·x̄ᵀ], [0, f]].
	k := d.k
	g := newDense(d.f.r+1, k+1)
	g.set(0, 0, math.Sqrt(d.w))
	for j := 0; j < k; j++ {
		g.set(0, j+1, d.row0[j])
		if d.constant[j] {
			continue
		}
		for i := 0; i < d.f.r; i++ {
			g.set(i+1, j+1, d.f.at(i, j))
		}
	}
	rep.ProportionNames = append([]string{InterceptName}, d.names[:k]...)
	ci, prop, ok := bkw(g)
	if !ok {
		rep.Notes = append(rep.Notes, "the singular value decomposition for the condition indices did not converge")
		ci, prop = []float64{}, [][]float64{}
	}
	rep.ConditionIndices, rep.Proportions = ci, prop
	if len(ci) > 0 {
		rep.ConditionNumber = ci[len(ci)-1]
	}
	// (b) the centered varying columns, scaled, no intercept.
	rep.CenteredProportionNames = []string{}
	for _, j := range c.vary {
		rep.CenteredProportionNames = append(rep.CenteredProportionNames, d.names[j])
	}
	ci, prop, ok = bkw(c.s)
	if !ok {
		ci, prop = []float64{}, [][]float64{}
	}
	rep.CenteredConditionIndices, rep.CenteredProportions = ci, prop
	if len(ci) > 0 {
		rep.CenteredConditionNumber = ci[len(ci)-1]
	}
}

// exactDependencies reports constant columns and the reduced null-space
// equations in original units.
func (rep *Report) exactDependencies(d *design, c *collin) {
	rep.Dependencies = []Dependency{}
	for _, j := range c.cols {
		if d.constant[j] || d.nearConst[j] {
			v := d.own(j, d.mean[j])
			if d.constant[j] {
				v = d.own(j, d.min[j])
			}
			rep.Dependencies = append(rep.Dependencies, Dependency{
				Kind: KindExact, Columns: []string{d.names[j]}, Dependent: d.names[j],
				Intercept: fptr(v), Equation: equation(d.names[j], nil, nil, v),
			})
		}
	}
	for _, e := range c.deps {
		rep.Dependencies = append(rep.Dependencies, originalUnits(d, e))
	}
}

// originalUnits converts a standardized equation to the columns' units:
// x_d = Σ b_j x_j + b₀ with b_j = a_j·√SST_d/√SST_j and b₀ = x̄_d − Σ b_j x̄_j.
// An intercept below 1e-9 of the magnitude of the terms it balances is
// rounding and reported as 0. The sums are formed on the scaled columns
// (in the dependent column's scaled units) and multiplied back by the
// scales at the end.
func originalUnits(d *design, e exactDep) Dependency {
	dep := Dependency{Kind: KindExact, Dependent: d.names[e.dep], Coefficients: map[string]float64{}}
	order := append([]int(nil), e.terms...)
	coef := map[int]float64{}
	b0 := d.mean[e.dep]
	mag := math.Abs(d.mean[e.dep])
	for i, j := range e.terms {
		b := e.coef[i] * math.Sqrt(d.sst[e.dep]/d.sst[j]) // scaled units
		b0 -= b * d.mean[j]
		mag += math.Abs(b * d.mean[j])
		b *= d.scale[e.dep] / d.scale[j] // own units
		coef[j] = b
		dep.Coefficients[d.names[j]] = b
	}
	if math.Abs(b0) <= 1e-9*mag {
		b0 = 0
	}
	b0 = d.own(e.dep, b0)
	dep.Intercept = fptr(b0)
	sort.Ints(order)
	dep.Columns = []string{}
	cols := append([]int{e.dep}, order...)
	sort.Ints(cols)
	for _, j := range cols {
		dep.Columns = append(dep.Columns, d.names[j])
	}
	tn := make([]string, len(order))
	tc := make([]float64, len(order))
	for i, j := range order {
		tn[i] = d.names[j]
		tc[i] = coef[j]
	}
	dep.Equation = equation(d.names[e.dep], tn, tc, b0)
	return dep
}

// nearDependencies reports, for each condition index of convention (a)
// above CondLimit that is not one of the exact dependencies, the columns
// whose proportion exceeds PropLimit, when there are at least two.
func (rep *Report) nearDependencies(d *design, c *collin, opt Options) {
	nExact := len(rep.ConditionIndices) - rep.Rank
	for dim := 0; dim < len(rep.ConditionIndices)-max(nExact, 0); dim++ {
		ci := rep.ConditionIndices[dim]
		if ci <= opt.CondLimit {
			continue
		}
		var cols []string
		props := map[string]float64{}
		for j, p := range rep.Proportions[dim] {
			if p > opt.PropLimit {
				cols = append(cols, rep.ProportionNames[j])
				props[rep.ProportionNames[j]] = p
			}
		}
		if len(cols) >= 2 {
			rep.Dependencies = append(rep.Dependencies, Dependency{
				Kind: KindNear, Columns: cols, ConditionIndex: ci, Proportions: props,
				IncludesIntercept: rep.Proportions[dim][0] > opt.PropLimit,
			})
		}
	}
}

// groups computes the generalized VIF of each factor (in the order of
// Options.Factors) and each declared group (by name).
func (rep *Report) groups(d *design, c *collin, opt Options, plans []*factorPlan) {
	rep.factorGroups(d, c, plans)
	if len(opt.Groups) == 0 {
		return
	}
	byName := map[string]int{}
	for j := 0; j < d.k; j++ {
		byName[d.names[j]] = j
	}
	gnames := make([]string, 0, len(opt.Groups))
	for g := range opt.Groups {
		gnames = append(gnames, g)
	}
	sort.Strings(gnames)
	for _, g := range gnames {
		gr := GroupReport{Name: g, Kind: GroupDeclared, Columns: append([]string(nil), opt.Groups[g]...), DF: len(opt.Groups[g])}
		idx := make([]int, len(gr.Columns))
		for i, n := range gr.Columns {
			idx[i] = byName[n]
		}
		gr.GVIF, gr.GVIFAdjusted, gr.Undefined = gvif(c, idx, gr.Columns)
		rep.GVIF = append(rep.GVIF, gr)
	}
}

// gvif is the generalized VIF of the design columns idx (named names)
// after Fox & Monette (1992): GVIF = det(R₁₁)·det(R₂₂)/det(R), R the
// correlation matrix of the independent columns, R₁₁ the group's block,
// R₂₂ the others'. The determinants come from R factors of column subsets
// of the scaled centered factor, never from R itself. It is undefined,
// with the reason, when a column's VIF is.
func gvif(c *collin, idx []int, names []string) (v, adjusted *float64, undefined string) {
	in := map[int]bool{}
	for i, j := range idx {
		in[j] = true
		if _, why := c.vifOf(j); why != "" && undefined == "" {
			undefined = fmt.Sprintf("column %q: %s", names[i], why)
		}
	}
	if undefined != "" {
		return nil, nil, undefined
	}
	var gpos, opos, allpos []int
	for _, j := range c.indep {
		p := c.vpos(j)
		if in[j] {
			gpos = append(gpos, p)
		} else {
			opos = append(opos, p)
		}
		allpos = append(allpos, p)
	}
	ld := logDetGram(c.s.cols(gpos, nil)) + logDetGram(c.s.cols(opos, nil)) - logDetGram(c.s.cols(allpos, nil))
	g := math.Exp(ld)
	return fptr(g), fptr(math.Pow(g, 1/(2*float64(len(idx))))), ""
}
