package diagnostics

import (
	"fmt"
	"math"
)

// RequiredDigits is the accuracy the trust verdict asks for: coefficients,
// standard errors and VIFs to seven significant digits.
const RequiredDigits = 7

// trust fills the numerical-trust verdict (see the package documentation).
func (rep *Report) trust(d *design, c *collin) {
	cols := append([]int(nil), c.indep...)
	hasY := d.hasY && !d.constant[d.k] && !d.nearConst[d.k]
	if hasY {
		cols = append(cols, d.k)
	}
	sc := make([]float64, len(cols))
	for a, j := range cols {
		sc[a] = 1 / math.Sqrt(d.sst[j])
	}
	kx := 1.0 // condition of the scaled centered regressors
	kxy := 1.0
	if len(c.indep) > 0 {
		sv, _, ok := svd(d.f.cols(c.indep, sc[:len(c.indep)]))
		if ok {
			kx = cond(sv)
		}
	}
	if hasY {
		sv, _, ok := svd(d.f.cols(cols, sc))
		if ok {
			kxy = cond(sv)
		}
	}
	var t Trust
	var errEst float64
	if d.path == PathCrossProduct {
		// Normal equations: relative errors of about cond(XᵀX)·eps in the
		// coefficients, and, with a target, in the residual sum of
		// squares, which the augmented matrix [X y] carries.
		k := kx
		if hasY {
			k = math.Max(kx, kxy)
		}
		t.EstimatedCondition = capCond(k * k)
		errEst = t.EstimatedCondition * eps
	} else {
		// Householder QR: eps·(κ + κ²·tanθ) for least squares (Wedin),
		// tanθ = ‖r‖/‖ŷ‖; κ·eps for the VIFs.
		t.EstimatedCondition = capCond(kx)
		errEst = kx * eps
		if rep.Regression != nil && rep.Regression.R2 > 0 {
			tan := math.Sqrt(math.Max(1-rep.Regression.R2, 0) / rep.Regression.R2)
			errEst = eps * (kx + kx*kx*tan)
		}
	}
	t.ExpectedDigits = math.Max(0, math.Min(15.9, -math.Log10(math.Max(errEst, eps))))
	t.Trustworthy = t.ExpectedDigits >= RequiredDigits
	switch {
	case d.path == PathCrossProduct && t.Trustworthy:
		t.Reason = fmt.Sprintf("cross-product path: the scaled centered cross-product matrix has condition about %.3g, which leaves about %.0f correct digits (%d needed)",
			t.EstimatedCondition, t.ExpectedDigits, RequiredDigits)
	case d.path == PathCrossProduct:
		t.Reason = fmt.Sprintf("cross-product path: the scaled centered cross-product matrix has condition about %.3g, too near 1/eps = %.2g for %d correct digits (about %.0f expected); use the QR accumulator",
			t.EstimatedCondition, 1/eps, RequiredDigits, t.ExpectedDigits)
	case t.Trustworthy:
		t.Reason = fmt.Sprintf("QR path: the scaled centered design has condition about %.3g, which leaves about %.0f correct digits (%d needed)",
			t.EstimatedCondition, t.ExpectedDigits, RequiredDigits)
	default:
		t.Reason = fmt.Sprintf("QR path: the scaled centered design has condition about %.3g, which leaves only about %.0f correct digits (%d needed); the data cannot determine the results more closely in float64",
			t.EstimatedCondition, t.ExpectedDigits, RequiredDigits)
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
