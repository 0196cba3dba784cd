// Package diagnostics computes plumb's multicollinearity diagnostics from
// the stream accumulators: correlation matrix, VIF, tolerance, R_j² and
// √VIF per column; eigenvalues and principal components of the
// correlation matrix; Belsley–Kuh–Welsch condition indices and
// variance-decomposition proportions in two conventions; exact and near
// dependencies, in equations and words; generalized VIFs for column groups
// and for categorical factors' dummies (Fox & Monette 1992);
// OLS with the split of each coefficient's variance into its three
// factors; what-if drops; and a numerical-trust verdict.
//
// # Three paths
//
// Analyze works from a factor f of the centered co-moment matrix of the
// chosen columns (fᵀf = Σ w (x − x̄)(x − x̄)ᵀ). On the QR path (a float64
// stream.QR) f is the trailing block of the R factor of [1 X y],
// re-factored for the chosen columns, so nothing is squared: VIFs are
// squared row norms of the inverse of the column-scaled R, condition
// indices come from singular values of the scaled R, and OLS is back
// substitution. On the cross-product path (no factor) f is a Cholesky
// factor of the correlation matrix built from stream.Moments (the
// eigendecomposition when it is not positive definite), which squares the
// condition number; the trust verdict says when that costs the requested
// accuracy.
//
// The precise QR path (an extended stream.QR, from NewQRExtended, whose R
// is kept and updated in double-double) is the QR path with the factor's
// low parts: the re-factoring for the chosen columns, the inverse behind
// the VIFs, and the whole regression (back substitution, σ, the inverse
// behind the standard errors, the intercept ȳ − Σ b_j x̄_j with the means'
// low parts) run in double-double (about 32 digits) and are rounded to
// float64 at the end. Rank, condition indices, proportions, dependencies,
// GVIF and what-if drops use the rounded factor, as on the QR path. It
// matters for regressions with a large residual on nearly collinear
// regressors, whose coefficients a float64 factor leaves with an error
// near eps·κ²·‖residual‖/‖y‖: on NIST's Wampler5 it turns 6.7 correct
// digits into 14.5. It costs about ten times the float64 accumulator's
// update (see stream.QR); the analysis itself is not noticeably slower.
//
// A caller escalates cross-product → QR → precise QR while the verdict is
// untrustworthy, or promises fewer digits (Trust.ExpectedDigits) than it
// needs.
//
// # Magnitudes
//
// The accumulators divide each column by a power of two from its largest
// magnitude before forming any product (stream.Moments.Scale), and every
// path works on those scaled columns: the sums of squares of data near
// 1e-200 do not underflow, those of data near 1e200 do not overflow, and
// the digits are those of the same data at ordinary scale. VIFs, condition
// indices, proportions, correlations and ranks do not depend on the units;
// means, standard deviations, equations and regression results are
// multiplied back to the columns' own units (exact: powers of two). A
// result that does not fit float64 even so (σ² of a target near 1e200) is
// reported as ±1.8e308 with a note, never as NaN or an infinity.
//
// # Constant columns and the correlation matrix
//
// A column whose minimum equals its maximum is constant; a column whose
// root-mean-square deviation is at most 100·eps times its largest
// magnitude is near constant (its centered values are rounding). Both get
// a null VIF with the reason, are reported as an exact dependency
// "col = value", and are left out of the centered analyses: the
// correlation matrix gives them 1 on the diagonal and 0 elsewhere, the
// eigenvalues, principal components and convention (b) omit them. The
// rank counts them as dependent on the intercept.
//
// # Rank and exact dependencies
//
// The numerical rank of [1 X] is 1 plus the rank of the centered varying
// columns, each scaled to unit length (S, with SᵀS the correlation
// matrix). That is offset-invariant: a column with mean 1e9 and spread 1 is
// not mistaken for the intercept. The tolerance differs by path:
//
//   - QR path: singular value σ_k of S counts as zero when
//     σ_k ≤ 1000·p·eps·σ₁ (p varying columns; about 2.2e-12·σ₁ for p = 10):
//     the factor is backward stable, so its singular values are good to a
//     small multiple of p·eps·σ₁.
//   - Cross-product path: eigenvalue λ_k = σ_k² of the correlation matrix
//     counts as zero when λ_k ≤ 1000·p·eps·λ₁, i.e. σ_k ≤ √(1000·p·eps)·σ₁
//     (about 1.5e-6·σ₁ for p = 10): rounding of the cross-products leaves
//     eigenvalues uncertain by a small multiple of p·eps·λ₁.
//
// Report.RankTolerance is the relative singular-value tolerance used.
// The null space (trailing right singular vectors of S) is reduced by
// Gauss–Jordan elimination with threshold pivoting: each equation's
// dependent column is the last one, in the caller's column order, whose
// standardized component is at least 0.1 of the largest remaining one
// (derived columns — a total, a rescaled copy, the last dummy — usually
// follow their sources, and the threshold bounds the elimination's
// growth), expressed by columns that are not dependents, so that
// several independent dependencies are reported separately. Standardized
// coefficients below 1e-6 are dropped; the rest are refined by least
// squares of the dependent column on its terms and converted to original
// units, with the intercept x̄_d − Σ b_j x̄_j (set to 0 when below 1e-9 of
// the magnitude of the terms it balances). Columns of an exact dependency
// get a null VIF ("exact dependency"); the other columns' VIFs are
// computed on the maximal independent subset (the columns that are not
// dependents), which spans the same space.
//
// # Factors
//
// A categorical column (Options.Factors) is accumulated as one indicator
// column per level, the full set, named stream.IndicatorName(factor, level).
// Analyze turns it into treatment dummies: it leaves out the base level's
// indicator (a named base, else the most frequent level by row count =
// mean·n, ties to the first level in byte order) and those of levels with
// no row here (reported as absent, never as constant columns), so that a
// full set beside the intercept cannot make the design singular. The
// dummies keep their own rows among the columns (VIF per dummy), and the
// factor gets one generalized-VIF entry (Report.GVIF, kind "factor") with
// df = levels present − 1 and GVIF^(1/(2·df)), comparable with √VIF. By
// Fox & Monette (1992) GVIF = det(R₁₁)·det(R₂₂)/det(R) does not depend on
// the base; tests check it for every base of R's datasets against car::vif.
// A factor with one level present has no dummies: its entry has df 0 and
// says so instead of a GVIF.
//
// Exact dependencies carry Words: two factors of which one determines the
// other (district_code within district) are recognised from the cross
// counts of their indicators, which the co-moments hold exactly (rows with
// both set = M_ab + W·x̄_a·x̄_b); a numeric column fixed within each level
// of a factor is given with its value per level, read off the same way.
//
// # Condition indices
//
// Convention (a) is the uncentered design [1 X], each column scaled to unit
// length, built as [[√W, √W·x̄ᵀ], [0, f]]; the headline ConditionNumber is
// its largest index. Convention (b) is S. Singular values are floored at
// σ₁·eps, so a singular design reports an index of 1/eps, never +Inf.
// Near dependencies are the indices of (a) above CondLimit, other than the
// (p + 1 − rank) largest which are the exact dependencies, with at least
// two proportions above PropLimit ("intercept" can be one of them; Dependency.IncludesIntercept says when).
//
// # Drivers
//
// ColumnReport.Drivers names the partner columns behind a VIF: R_j², the R²
// of regressing column j on the others, is split by Pratt's product
// measure (Pratt 1987) into share_k = β_k·r_jk/R_j², β_k the standardized
// coefficient of partner k in that regression and r_jk the correlation of
// j and k. Since R_j² = Σ_k β_k·r_jk the shares sum to 1; a negative share
// marks a suppressor. The β come from P = (SᵀS)⁻¹ restricted to the
// independent columns, β_k = −P_jk/P_jj, O(p²) per column from the inverse
// factor the VIFs already use; R_j² = 1 − 1/P_jj is the reported R2. The
// dependent column of an exact dependency is no partner (its terms stand
// for it). Kept: |share| ≥ 0.05 (common practice, no source), at most five,
// largest share first.
//
// # What-if drops
//
// Dropping a column k outside every exact dependency updates the other
// VIFs by the Schur-complement identity on P = (SᵀS)⁻¹: VIF_j becomes
// P_jj − P_jk²/P_kk (relative rounding about eps·P_jj/result). Dropping a
// column of an exact dependency reruns the analysis without it. The
// suggested drops are greedy: constant columns, then the dependent column
// of each exact dependency (the column its equation expresses, e.g.
// total_connections for total_connections = residential_connections +
// commercial_connections; the rest spans the same space, so nothing is
// lost), then, while a VIF is over the limit, the column whose removal
// leaves the fewest over-limit VIFs and the smallest largest VIF; a drop
// that turns out not to be needed is put back. Every suggestion carries the
// omitted-variable bias caution.
//
// # Variance split
//
// With a target, Var(b_j) = σ²/(SST_j·(1 − R_j²)). Each factor gets a
// severity that is 1 at its alarm level:
//
//   - poor fit: (σ²/Var(y)) / 0.5, i.e. half of the target's variance left
//     unexplained;
//   - little variation: (sd_ref/sd_j)²/VIFLimit, sd_ref the column's SD in
//     a broader sample given in Options.ReferenceSD (the watch's history,
//     the whole table for a bucket or segment): the factor by which the
//     column's narrow spread here multiplies Var(b_j), held to the same
//     limit as the VIF, which measures the same multiplication by
//     redundancy. A ratio of two SDs of one column depends neither on its
//     origin nor on its unit (°C, K and °F give the same answer), unlike
//     the spread relative to the column's magnitude. Without a reference
//     the factor is not judged: one sample alone cannot tell whether a
//     column varies little;
//   - redundancy: VIF_j/VIFLimit.
//
// The split speaks (Inflated, with the dominant cause and its remedy) only
// when the variance is in fact large: |t_j| is below the two-sided 5%
// quantile of Student's t on the residual degrees of freedom (the
// coefficient's 95% interval covers 0), AND the largest severity is at
// least 1. A coefficient that stands clear of zero needs no remedy, however
// large its VIF; a small |t| with no factor at alarm shows a small effect,
// not an inflated variance. Reason says which case holds; Dominant, Remedy
// and Caution are empty when the split is silent. Remedies: add the missing
// explanatory variables (σ given in the target's units beside its SD);
// widen the sample so that the column varies (its SD here and in the
// reference, in its units); drop or combine the redundant columns (naming
// the drivers), with the omitted-variable bias caution. The alarm levels
// are the package's own rule, not a published one. Without an intercept
// SST_j and R_j² are uncentered.
//
// # Numerical trust
//
// The verdict estimates, to first order, the relative rounding error of
// the least accurate result and is trustworthy when that leaves at least
// RequiredDigits (7) correct digits. With κ the 2-norm condition number of
// the scaled centered independent regressors and γ = (p+1)·eps:
//
//   - VIFs: γ·κ² on the cross-product path, γ·κ on the QR path
//     (EstimatedCondition is κ² or κ respectively: the condition of the
//     scaled XᵀX, or of the scaled design);
//   - coefficients (with a target), base = ‖y‖ + Σ_k ‖x_k‖·|b_k| over the
//     centered columns: on the QR path δb_j ≈ γ·√((XᵀX)⁻¹_jj)·base, the
//     effect of a backward error γ·‖a_k‖ in each column; on the
//     cross-product path δb_j ≈ γ·Σ_k |(XᵀX)⁻¹_jk|·‖x_k‖·base, the effect of
//     an error γ·‖x_j‖‖x_k‖ in each co-moment, and δb₀ ≈ Σ_j |x̄_j|·δb_j;
//   - on the cross-product path also σ, δσ/σ ≈ γ·‖y‖²/(2·SSR), which fails
//     for a nearly exact fit, and the standard errors, δσ/σ + γ·κ²/2;
//   - on the precise path the QR path's estimates with γ = (p+1)·2⁻¹⁰⁴,
//     plus 4·eps for the rounding of the results to float64.
//
// Each coefficient carries its own estimate (Coefficient.Digits). The
// estimates are bounds of the usual kind, not guarantees: on the NIST StRD
// linear datasets the digits reached were never fewer than those promised
// by a trustworthy verdict. A float64 factor cannot reach 7 digits on
// every such dataset (Wampler5's coefficients are a millionth of their
// standard errors); its verdict then says so, and the precise path reaches
// at least 13 digits on all of them but Filip.
//
// The verdict covers the arithmetic on the data as stored. Values rounded
// before they reached the accumulator (decimal fractions, powers computed
// in float64) are a perturbation of the problem that ill-conditioning
// amplifies like any other: on Filip the precise path agrees with the exact
// least-squares solution of its float64 data to 15 digits and with the
// certified values, computed from the decimal data, to 7.9.
package diagnostics
