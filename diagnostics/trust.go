package diagnostics

import (
	"fmt"
	"math"
)

// RequiredDigits is the accuracy the trust verdict asks for: coefficients,
// standard errors and VIFs to seven significant digits.
const RequiredDigits = 7

// ddEps plays eps's part for the precise path: twice the unit roundoff of
// double-double arithmetic, 2⁻¹⁰⁴ ≈ 4.9e-32.
const ddEps = 0x1p-104

// preciseFloor is the relative error the precise path's results keep
// whatever the conditioning: their rounding to float64 and that of the
// column scaling, a few eps.
const preciseFloor = 4 * eps

// condition sets rep.condX, the 2-norm condition number of the scaled
// centered independent regressors; the regression's error estimates use it.
func (rep *Report) condition(d *design, c *collin) {
	rep.condX = 1
	if len(c.indep) == 0 {
		return
	}
	sc := make([]float64, len(c.indep))
	for a, j := range c.indep {
		sc[a] = 1 / math.Sqrt(d.sst[j])
	}
	if sv, _, ok := svd(d.f.cols(c.indep, sc)); ok {
		rep.condX = cond(sv)
	}
}

// trust fills the numerical-trust verdict (see the package documentation).
func (rep *Report) trust(d *design) {
	kx := rep.condX
	gamma := float64(len(d.names)+1) * eps
	var t Trust
	var errEst float64
	what := "VIFs"
	switch d.path {
	case PathCrossProduct:
		// The centered cross-products square the condition number.
		t.EstimatedCondition = capCond(kx * kx)
		errEst = gamma * kx * kx
	case PathQRPrecise:
		// VIFs from the double-double factor, rounded at the end.
		t.EstimatedCondition = capCond(kx)
		errEst = float64(len(d.names)+1)*ddEps*kx + preciseFloor
	default:
		t.EstimatedCondition = capCond(kx)
		errEst = gamma * kx
	}
	if rep.Regression != nil && rep.regErr > errEst {
		errEst, what = rep.regErr, rep.regErrWhat
	}
	t.ExpectedDigits = digits(errEst)
	t.Trustworthy = t.ExpectedDigits >= RequiredDigits
	name := "QR path: the scaled centered design"
	switch d.path {
	case PathCrossProduct:
		name = "cross-product path: the scaled centered cross-product matrix"
	case PathQRPrecise:
		name = "precise QR path (double-double factor): the scaled centered design"
	}
	switch {
	case t.Trustworthy:
		t.Reason = fmt.Sprintf("%s has condition about %.3g; the least accurate result (%s) should have about %.0f correct digits (%d needed)",
			name, t.EstimatedCondition, what, math.Floor(t.ExpectedDigits), RequiredDigits)
	case d.path == PathCrossProduct:
		t.Reason = fmt.Sprintf("%s has condition about %.3g (1/eps = %.2g); %s would have only about %.0f correct digits (%d needed); use the QR accumulator",
			name, t.EstimatedCondition, 1/eps, what, math.Floor(t.ExpectedDigits), RequiredDigits)
	case d.path == PathQR:
		t.Reason = fmt.Sprintf("%s has condition about %.3g; %s would have only about %.0f correct digits (%d needed) from a float64 factor; use the extended (double-double) QR accumulator",
			name, t.EstimatedCondition, what, math.Floor(t.ExpectedDigits), RequiredDigits)
	default:
		t.Reason = fmt.Sprintf("%s has condition about %.3g; %s would have only about %.0f correct digits (%d needed) even from the double-double factor: the columns are too nearly dependent to determine it more closely",
			name, t.EstimatedCondition, what, math.Floor(t.ExpectedDigits), RequiredDigits)
	}
	if d.path == PathCrossProduct && !t.Trustworthy && rep.Rank < len(rep.ProportionNames) {
		t.Reason += fmt.Sprintf("; the exact dependencies reported are exact only to this path's resolution (singular values below %.2g of the largest)", d.rankTol(len(d.names)))
	}
	if d.cpFallback {
		t.Reason += "; the cross-products were not positive definite, so the factor came from their eigendecomposition"
	}
	rep.Trust = t
}

// cond returns σ₁/σₙ, +Inf when σₙ is zero.
func cond(sv []float64) float64 {
	if len(sv) == 0 {
		return 1
	}
	if sv[len(sv)-1] == 0 {
		return math.Inf(1)
	}
	return sv[0] / sv[len(sv)-1]
}

// capCond keeps a condition estimate finite for JSON: at most 1/eps².
func capCond(k float64) float64 {
	return math.Min(k, 1/(eps*eps))
}
