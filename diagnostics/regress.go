package diagnostics

import (
	"fmt"
	"math"
	"strings"

	"gonum.org/v1/gonum/stat/distuv"
)

// Reference levels of the variance split (see the package documentation).
// Each severity is 1 at its alarm level.
const (
	fitAlarm = 0.5 // σ² at half the target's variance
	// tLevel: a coefficient's variance is large when its two-sided t test
	// at this level does not reject b_j = 0 (its 95% confidence interval
	// covers 0).
	tLevel = 0.05
)

// regression fits the target on the estimable regressors by back
// substitution in the R factor of [X y] (centered, or uncentered without
// an intercept), never forming XᵀX. On the precise path the factor, the
// back substitution, σ, the inverse for the standard errors and the
// intercept are all formed in double-double from the design's low parts,
// and rounded to float64 once at the end.
func (rep *Report) regression(d *design, c *collin, opt Options) {
	y := d.k
	tname := d.names[y]
	if d.constant[y] || d.nearConst[y] {
		rep.Notes = append(rep.Notes, fmt.Sprintf("target %q does not vary: no regression fitted", tname))
		return
	}
	fit := c.indep
	reg := &Regression{Target: tname, Intercept: !opt.NoIntercept, Coefficients: []Coefficient{}, Attribution: []VarianceSplit{}}
	inFit := map[int]bool{}
	for _, j := range fit {
		inFit[j] = true
	}
	for _, j := range c.cols {
		if !inFit[j] {
			reg.NotEstimable = append(reg.NotEstimable, d.names[j])
		}
	}
	p := len(fit)
	cols := append(append([]int(nil), fit...), y)
	precise := d.flo.d != nil
	var t dense
	var tdd ddMat     // precise path: t in double-double
	var sst []float64 // per fit column: the sum of squares the variance divides by
	var syy float64
	if opt.NoIntercept {
		// The uncentered factor [[√W, √W·x̄ᵀ], [0, f]] without its first
		// column, re-factored: the R factor of [X y].
		g := newDense(d.f.r+1, len(cols))
		gl := newDense(d.f.r+1, len(cols))
		for a, j := range cols {
			g.set(0, a, d.row0[j])
			if precise {
				gl.set(0, a, d.row0lo[j])
			}
			for i := 0; i < d.f.r; i++ {
				g.set(i+1, a, d.f.at(i, j))
				if precise {
					gl.set(i+1, a, d.flo.at(i, j))
				}
			}
		}
		if precise {
			all := make([]int, len(cols))
			for a := range all {
				all[a] = a
			}
			tdd = ddQR(ddFrom(g, gl, all, nil))
			t = tdd.hiPart()
		} else {
			t = qrR(g)
		}
		for a := range cols {
			nrm := g.colNorm(a)
			if a < p {
				sst = append(sst, nrm*nrm)
				if t.at(a, a) <= d.rankTol(p)*nrm {
					rep.Notes = append(rep.Notes, fmt.Sprintf("without an intercept the columns are rank deficient at %q: no regression fitted", d.names[fit[a]]))
					return
				}
			} else {
				syy = nrm * nrm
			}
		}
	} else {
		if precise {
			tdd = ddQR(ddFrom(d.f, d.flo, cols, nil))
			t = tdd.hiPart()
		} else {
			t = qrR(d.f.cols(cols, nil))
		}
		for _, j := range fit {
			sst = append(sst, d.sst[j])
		}
		syy = d.sst[y]
	}
	df := int(d.n) - p
	if !opt.NoIntercept {
		df--
	}
	var o ols
	if precise {
		o = olsDD(d, tdd, fit, df, !opt.NoIntercept)
	} else {
		o = olsFloat(d, t, fit, df, !opt.NoIntercept)
	}
	reg.DF = df
	reg.Sigma2 = o.sigma2
	reg.Sigma = o.sigma
	reg.R2 = 1 - o.ssr/syy
	if !opt.NoIntercept {
		reg.Coefficients = append(reg.Coefficients, Coefficient{Name: InterceptName, IsIntercept: true, Estimate: o.b0, StdError: o.se0, T: tstat(o.b0, o.se0)})
	}
	varY := d.sd(y) * d.sd(y)
	tcrit := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(df)}.Quantile(1 - tLevel/2)
	for a, j := range fit {
		se := o.se[a]
		coef := Coefficient{Name: d.names[j], Estimate: o.b[a], StdError: se, T: tstat(o.b[a], se)}
		reg.Coefficients = append(reg.Coefficients, coef)
		reg.Attribution = append(reg.Attribution, splitVariance(d, c, j, coef, tcrit, reg.Sigma, sst[a], o.inv[a], varY, opt))
	}
	rep.Regression = reg
	rep.regressionErrors(d, fit, o.b, o.tinv, sst, syy, o.ssr, opt)
}

// ols is a least-squares fit from the R factor t of [X y]: the
// coefficients b of the fit columns, the residual sum of squares, σ², σ,
// the inverse of the regressors' factor, ((XᵀX)⁻¹)_jj and the standard
// errors, and with an intercept b₀ and its standard error.
type ols struct {
	b             []float64
	ssr           float64
	sigma2, sigma float64
	tinv          dense
	inv, se       []float64
	b0, se0       float64
}

// olsFloat fits in float64.
func olsFloat(d *design, t dense, fit []int, df int, intercept bool) ols {
	p := len(fit)
	tx := newDense(p, p)
	rhs := make([]float64, p)
	for i := 0; i < p; i++ {
		rhs[i] = t.at(i, p)
		for j := i; j < p; j++ {
			tx.set(i, j, t.at(i, j))
		}
	}
	o := ols{b: backSolve(tx, rhs), tinv: triInv(tx), inv: make([]float64, p), se: make([]float64, p)}
	o.ssr = t.at(p, p) * t.at(p, p)
	o.sigma2 = o.ssr / float64(df)
	o.sigma = math.Sqrt(o.sigma2)
	for a := range fit {
		o.inv[a] = o.tinv.rowNorm2(a)
		o.se[a] = o.sigma * math.Sqrt(o.inv[a])
	}
	if intercept {
		// b₀ = ȳ − Σ b_j x̄_j; Var(b₀) = σ²(1/W + ‖T⁻ᵀx̄‖²), a sum of
		// positive terms.
		y := d.k
		o.b0 = d.mean[y]
		z := make([]float64, p)
		for a, j := range fit {
			o.b0 -= o.b[a] * d.mean[j]
			for i := a; i < p; i++ {
				z[i] += o.tinv.at(a, i) * d.mean[j] // (T⁻ᵀx̄)_i
			}
		}
		v0 := 1 / d.w
		for _, zi := range z {
			v0 += zi * zi
		}
		o.se0 = o.sigma * math.Sqrt(v0)
	}
	return o
}

// olsDD is olsFloat in double-double, with the design's means taken with
// their low parts; the results are rounded to float64 at the end.
func olsDD(d *design, t ddMat, fit []int, df int, intercept bool) ols {
	p := len(fit)
	tx := newDDMat(p, p)
	rhs := make([]ddf, p)
	for i := 0; i < p; i++ {
		rhs[i] = t.at(i, p)
		for j := i; j < p; j++ {
			tx.set(i, j, t.at(i, j))
		}
	}
	b := ddBackSolve(tx, rhs)
	tinv := ddTriInv(tx)
	ssr := t.at(p, p).mul(t.at(p, p))
	sigma2 := ssr.div(ddf{float64(df), 0})
	sigma := sigma2.sqrt()
	o := ols{b: make([]float64, p), tinv: tinv.hiPart(), inv: make([]float64, p), se: make([]float64, p),
		ssr: ssr.hi, sigma2: sigma2.hi, sigma: sigma.hi}
	for a := range fit {
		o.b[a] = b[a].hi
		inv := tinv.rowNorm2(a)
		o.inv[a] = inv.hi
		o.se[a] = sigma.mul(inv.sqrt()).hi
	}
	if intercept {
		mean := func(j int) ddf { return ddf{d.mean[j], d.meanLo[j]} }
		b0 := mean(d.k)
		z := make([]ddf, p)
		for a, j := range fit {
			b0 = b0.sub(b[a].mul(mean(j)))
			for i := a; i < p; i++ {
				z[i] = z[i].add(tinv.at(a, i).mul(mean(j)))
			}
		}
		v0 := ddf{1, 0}.div(ddf{d.w, 0})
		for _, zi := range z {
			v0 = v0.add(zi.mul(zi))
		}
		o.b0 = b0.hi
		o.se0 = sigma.mul(v0.sqrt()).hi
	}
	return o
}

// regressionErrors estimates, to first order, the relative rounding error
// of each coefficient, and on the cross-product path of the standard errors
// and σ, sets Coefficient.Digits and keeps the largest in rep.regErr. With
// γ = (p+1)·eps, ‖·‖ the (centered) column norms and
// base = ‖y‖ + Σ_k ‖x_k‖·|b_k|:
//
//   - QR path (backward-stable columns, error γ·‖a_k‖ per column):
//     δb_j ≈ γ·√((XᵀX)⁻¹_jj)·base;
//   - precise QR path: the same with γ = (p+1)·2⁻¹⁰⁴ (double-double
//     factor and solve), plus preciseFloor for the rounding of the results
//     to float64;
//   - cross-product path (each co-moment off by γ·‖x_j‖‖x_k‖):
//     δb_j ≈ γ·Σ_k |(XᵀX)⁻¹_jk|·‖x_k‖·base, δb₀ ≈ Σ_j |x̄_j|·δb_j + γ|ȳ|,
//     δσ/σ ≈ γ·‖y‖²/(2·SSR), and δSE_j/SE_j ≈ δσ/σ + γ·κ²/2.
func (rep *Report) regressionErrors(d *design, fit []int, b []float64, tinv dense, sst []float64, syy, ssr float64, opt Options) {
	reg := rep.Regression
	p := len(fit)
	gamma, floor := float64(p+1)*eps, 0.0
	if d.path == PathQRPrecise {
		gamma, floor = float64(p+1)*ddEps, preciseFloor
	}
	nx := make([]float64, p)
	base := math.Sqrt(syy)
	for a := range fit {
		nx[a] = math.Sqrt(sst[a])
		base += nx[a] * math.Abs(b[a])
	}
	off := 0
	if !opt.NoIntercept {
		off = 1
	}
	worst, what := 0.0, ""
	note := func(e float64, w string) {
		if e > worst || what == "" {
			worst, what = e, w
		}
	}
	rel := func(e, v float64) float64 {
		if v == 0 {
			return e
		}
		return e / math.Abs(v)
	}
	db := make([]float64, p)
	for a := range fit {
		if d.path != PathCrossProduct {
			db[a] = gamma * math.Sqrt(tinv.rowNorm2(a)) * base
		} else {
			ra := tinv.d[a*p : (a+1)*p]
			for k := range fit {
				db[a] += math.Abs(dot(ra, tinv.d[k*p:(k+1)*p])) * nx[k]
			}
			db[a] *= gamma * base
		}
		c := &reg.Coefficients[a+off]
		e := rel(db[a], c.Estimate) + floor
		c.Digits = digits(e)
		note(e, "estimate "+c.Name)
	}
	if off == 1 {
		c := &reg.Coefficients[0]
		var e float64
		if d.path != PathCrossProduct {
			e = gamma * c.StdError / reg.Sigma * base
			if reg.Sigma == 0 {
				e = 0
			}
		} else {
			e = gamma * math.Abs(d.mean[d.k])
			for a, j := range fit {
				e += math.Abs(d.mean[j]) * db[a]
			}
		}
		e = rel(e, c.Estimate) + floor
		c.Digits = digits(e)
		note(e, "estimate "+InterceptName)
	}
	if d.path == PathCrossProduct {
		es := math.Inf(1)
		if ssr > 0 {
			es = gamma * syy / (2 * ssr)
		}
		note(es, "residual SD")
		kx := rep.condX
		note(es+gamma*kx*kx/2, "standard errors")
	}
	rep.regErr, rep.regErrWhat = worst, what
}

// digits converts a relative error to correct significant digits, 0 to 15.9.
func digits(e float64) float64 {
	if !(e > 0) {
		return 15.9
	}
	return math.Max(0, math.Min(15.9, -math.Log10(e)))
}

func tstat(b, se float64) float64 {
	if se == 0 {
		return 0
	}
	return b / se
}

// splitVariance splits Var(b_j) = σ²·inv, inv = 1/(SST_j·(1 − R_j²)), into
// its three factors, and speaks (Inflated, Dominant, Remedy) only when the
// variance is in fact large: the coefficient cannot be told from zero
// (|t_j| < tcrit, the two-sided 5% quantile of Student's t on the residual
// degrees of freedom, so its 95% interval covers 0) AND at least one factor
// is at its alarm level. A coefficient that stands clear of zero needs no
// remedy whatever its VIF; one that does not, with no factor at alarm, shows
// a small effect rather than an inflated variance. Reason says which case
// holds. The factors' severities (1 at alarm):
//
//   - poor fit: (σ²/Var(y))/0.5;
//   - little variation: (sd_ref/sd_j)²/VIFLimit, sd_ref the column's SD in
//     a broader sample (Options.ReferenceSD): the factor by which Var(b_j)
//     exceeds what the column's usual variation would give, judged against
//     the same limit as the VIF. SDs do not depend on the origin (°C and K
//     give the same ratio) and the ratio not on the unit; without a
//     reference this factor is not judged (0);
//   - redundancy: VIF_j/VIFLimit.
func splitVariance(d *design, c *collin, j int, coef Coefficient, tcrit, sigma, sst, inv, varY float64, opt Options) VarianceSplit {
	name := d.names[j]
	tname := d.names[d.k]
	omr := 1 / (sst * inv)
	vs := VarianceSplit{
		Name: name, Sigma2: sigma * sigma, SST: sst, OneMinusR2: omr,
		Variance: sigma * sigma * inv, VIF: 1 / omr, TCritical: tcrit,
	}
	if varY > 0 {
		vs.FitSeverity = vs.Sigma2 / varY / fitAlarm
	}
	sd := d.own(j, d.sd(j)) // in the column's own units, as the reference
	if ref, ok := opt.ReferenceSD[name]; ok && ref > 0 && !math.IsInf(ref, 0) {
		vs.ReferenceSD = fptr(ref)
		if sd > 0 {
			vs.VariationSeverity = (ref / sd) * (ref / sd) / opt.VIFLimit
		}
	}
	vs.RedundancySeverity = vs.VIF / opt.VIFLimit

	// The largest severity and its cause.
	top, cause := vs.RedundancySeverity, CauseRedundancy
	if vs.VariationSeverity > top {
		top, cause = vs.VariationSeverity, CauseLittleVariation
	}
	if vs.FitSeverity > top {
		top, cause = vs.FitSeverity, CausePoorFit
	}
	absT := math.Abs(coef.T)
	unclear := coef.StdError > 0 && absT < tcrit
	vs.Inflated = unclear && top >= 1
	tText := fmt.Sprintf("|t| %.3g", absT)
	switch {
	case vs.Inflated:
		vs.Reason = fmt.Sprintf("%s < %.3g: the 95%% interval of the coefficient covers 0, and %s is %.3g× its alarm level", tText, tcrit, cause, top)
	case !unclear && top >= 1:
		vs.Reason = fmt.Sprintf("%s ≥ %.3g: the coefficient stands clear of zero although %s is %.3g× its alarm level; its variance needs no remedy", tText, tcrit, cause, top)
	case !unclear:
		vs.Reason = fmt.Sprintf("%s ≥ %.3g: the coefficient stands clear of zero", tText, tcrit)
	default:
		vs.Reason = fmt.Sprintf("%s < %.3g, but no factor is at its alarm level (largest: %s, %.2g of it): no clear effect of %s rather than an inflated variance",
			tText, tcrit, cause, top, name)
		if vs.ReferenceSD == nil {
			vs.Reason += fmt.Sprintf("; variation not judged (no reference SD; SD here %.3g in %s's units)", sd, name)
		}
	}
	if !vs.Inflated {
		return vs
	}
	vs.Dominant = cause
	switch cause {
	case CauseRedundancy:
		vs.Remedy = fmt.Sprintf("VIF %.3g: %s largely repeats other columns (R² %.4g on them%s); drop or combine the columns that measure the same thing, or replace the correlated block by its principal components",
			vs.VIF, name, 1-omr, explainedBy(d, c, j))
		vs.Caution = DropCaution
	case CauseLittleVariation:
		vs.Remedy = fmt.Sprintf("%s varies with SD %.3g here against %.3g in its reference sample (in %s's units), which makes the coefficient's variance %.3g times larger: widen the sample (more districts, seasons or operating conditions) so that it varies",
			name, sd, *vs.ReferenceSD, name, vs.VariationSeverity*opt.VIFLimit)
	default:
		vs.Remedy = fmt.Sprintf("σ is %.3g in %s's units against its SD of %.3g (σ² is %.3g of the target's variance): add the relevant explanatory variables that are missing",
			d.own(d.k, sigma), tname, d.own(d.k, math.Sqrt(varY)), vs.FitSeverity*fitAlarm)
	}
	return vs
}

// explainedBy names the partner columns that explain j (its drivers), or
// when it has none the varying column most correlated with it.
func explainedBy(d *design, c *collin, j int) string {
	top := topDrivers(c.pratt(j))
	if len(top) == 0 {
		return closest(d, c, j)
	}
	parts := make([]string, 0, 3)
	for _, dr := range top[:min(len(top), 3)] {
		parts = append(parts, fmt.Sprintf("%s %.0f%%", dr.Column, 100*dr.Share))
	}
	return "; explained by " + strings.Join(parts, ", ")
}

// closest names the varying column most correlated with j.
func closest(d *design, c *collin, j int) string {
	a := -1
	for i, v := range c.vary {
		if v == j {
			a = i
		}
	}
	if a < 0 {
		return ""
	}
	best, br := -1, 0.0
	for b, v := range c.vary {
		if v == j {
			continue
		}
		r := 0.0
		for t := 0; t < c.s.r; t++ {
			r += c.s.at(t, a) * c.s.at(t, b)
		}
		if math.Abs(r) > math.Abs(br) {
			best, br = b, r
		}
	}
	if best < 0 {
		return ""
	}
	return fmt.Sprintf("; most correlated with %s, r = %.4f", d.names[c.vary[best]], br)
}
