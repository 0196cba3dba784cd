package diagnostics

import "encoding/json"

// Options selects the columns to analyze and the limits used to flag them.
type Options struct {
	// Target is the name of the target column ("" = none). It must be a
	// column of the accumulators.
	Target string
	// Columns are the regressors, in order; nil means every accumulator
	// column except Target.
	Columns []string
	// Groups are declared column groups for the generalized VIF
	// (group name -> columns).
	Groups map[string][]string
	// Factors are the categorical columns among the accumulator's
	// columns, each held as its full set of indicator columns (see
	// Factor). Each enters the design as treatment dummies (its base
	// level's indicator and those of absent levels left out) and gets a
	// generalized VIF of its own (Report.GVIF, kind "factor"). In Columns
	// a factor may be named by its own name, which stands for all its
	// indicators.
	Factors []Factor
	// VIFLimit flags a VIF at or above it (default 10, common practice).
	VIFLimit float64
	// CondLimit flags a condition index above it (default 30, common
	// practice after Belsley, Kuh & Welsch).
	CondLimit float64
	// PropLimit is the variance-decomposition proportion above which a
	// column takes part in a near dependency (default 0.5, BKW).
	PropLimit float64
	// NoIntercept fits the regression without an intercept. The
	// collinearity diagnostics still describe the design [1 X].
	NoIntercept bool
	// ReferenceSD gives, per column, its standard deviation in a broader
	// sample (the watch's whole history, the whole table) against which
	// the variance split judges whether the column varies too little here.
	// A column without one is not judged for little variation.
	ReferenceSD map[string]float64
}

// Default limits (common practice).
const (
	DefaultVIFLimit  = 10
	DefaultCondLimit = 30
	DefaultPropLimit = 0.5
)

// InterceptName names the intercept in proportions, dependencies and
// coefficients. A column may carry the same name: Coefficient.IsIntercept
// and Dependency.IncludesIntercept tell them apart.
const InterceptName = "intercept"

// Path names (Report.Path): the accumulator the diagnostics came from.
const (
	PathCrossProduct = "cross-product" // stream.Moments only
	PathQR           = "qr"            // a float64 stream.QR
	PathQRPrecise    = "qr-precise"    // an extended stream.QR (NewQRExtended), solved in double-double
)

// Reasons a VIF is undefined (ColumnReport.Undefined).
const (
	UndefinedConstant     = "constant"
	UndefinedNearConstant = "near constant"
	UndefinedExact        = "exact dependency"
)

// Dominant causes of a large coefficient variance (VarianceSplit.Dominant).
const (
	CausePoorFit         = "poor fit"
	CauseLittleVariation = "little variation"
	CauseRedundancy      = "redundancy"
)

// Report is the result of Analyze. Its JSON form is an outside contract.
type Report struct {
	RowsUsed    int64            `json:"rows_used"`
	RowsDropped int64            `json:"rows_dropped"`
	DroppedBy   map[string]int64 `json:"dropped_by_column"`
	Path        string           `json:"path"`
	Trust       Trust            `json:"numerical_trust"`
	Columns     []ColumnReport   `json:"columns"`

	// Correlation is the correlation matrix of the regressors in the
	// order of Columns. A constant or near-constant column has 1 on the
	// diagonal and 0 elsewhere in its row and column (its correlations
	// are undefined; the entry is never null or NaN).
	Correlation [][]float64 `json:"correlation"`
	// Eigenvalues of the correlation matrix of the columns that vary
	// (EigenNames), in descending order.
	Eigenvalues []float64   `json:"eigenvalues"`
	EigenNames  []string    `json:"eigen_names"`
	Components  []Component `json:"principal_components"`

	// Convention (a): the uncentered design [1 X], each column scaled to
	// unit length.
	ConditionNumber  float64     `json:"condition_number"`
	ConditionIndices []float64   `json:"condition_indices"` // ascending
	Proportions      [][]float64 `json:"proportions"`       // [dimension][variable], dimensions as ConditionIndices
	ProportionNames  []string    `json:"proportion_names"`  // "intercept" first
	// Convention (b): the centered columns that vary, scaled to unit
	// length, no intercept.
	CenteredConditionNumber  float64     `json:"centered_condition_number"`
	CenteredConditionIndices []float64   `json:"centered_condition_indices"`
	CenteredProportions      [][]float64 `json:"centered_proportions"`
	CenteredProportionNames  []string    `json:"centered_proportion_names"`

	Rank          int          `json:"rank"` // numerical rank of [1 X]
	RankTolerance float64      `json:"rank_tolerance"`
	Dependencies  []Dependency `json:"dependencies"`

	GVIF           []GroupReport `json:"groups,omitempty"`
	WhatIf         []DropReport  `json:"what_if"`
	SuggestedDrops []string      `json:"suggested_drops"`
	DropCaution    string        `json:"drop_caution,omitempty"`

	Regression *Regression `json:"regression,omitempty"`

	// Notes are remarks that did not stop the analysis (a constant
	// target, a regression that could not be fitted).
	Notes []string `json:"notes,omitempty"`

	// regErr is the largest estimated relative error of the regression's
	// coefficients, standard errors and σ, and regErrWhat names it.
	regErr     float64
	regErrWhat string
	condX      float64 // κ of the scaled centered independent regressors
}

// Trust is the numerical-trust verdict of the path used.
type Trust struct {
	Trustworthy bool `json:"trustworthy"`
	// EstimatedCondition is the 2-norm condition number the verdict rests
	// on: of the scaled centered cross-product matrix on the
	// cross-product path, of the scaled centered design on the QR path.
	EstimatedCondition float64 `json:"estimated_condition"`
	// ExpectedDigits is the number of correct significant digits the
	// path can promise for coefficients and VIFs: −log10(cond·eps).
	ExpectedDigits float64 `json:"expected_digits"`
	Reason         string  `json:"reason"`
}

// ColumnReport describes one regressor.
type ColumnReport struct {
	Name         string   `json:"name"`
	VIF          *float64 `json:"vif"`
	Tolerance    *float64 `json:"tolerance"`
	R2           *float64 `json:"r2"`
	SEInflation  *float64 `json:"se_inflation"` // √VIF
	Constant     bool     `json:"constant"`
	NearConstant bool     `json:"near_constant"`
	Undefined    string   `json:"vif_undefined,omitempty"`
	Mean         float64  `json:"mean"`
	SD           float64  `json:"sd"`
	Min          float64  `json:"min"`
	Max          float64  `json:"max"`
	Dropped      int64    `json:"dropped"`
	OverLimit    bool     `json:"over_limit"` // VIF ≥ VIFLimit, or undefined
	// Drivers are the partner columns that explain this column in its
	// regression on the others, largest share first: Pratt's product
	// measure β_k·r_jk/R²_j, whose shares over all partners sum to 1 (a
	// negative share marks a suppressor). Only partners with |share| ≥ 0.05
	// are listed, at most five; empty when the VIF is undefined or R²_j is
	// below 1e-6.
	Drivers []Driver `json:"drivers,omitempty"`
}

// Driver is one partner column's share of R²_j in column j's regression
// on the other columns.
type Driver struct {
	Column string  `json:"column"`
	Share  float64 `json:"share"`
}

// Component is one principal component of the correlation matrix.
type Component struct {
	Eigenvalue    float64   `json:"eigenvalue"`
	VarianceShare float64   `json:"variance_share"`
	Cumulative    float64   `json:"cumulative"`
	Names         []string  `json:"names"`
	Loadings      []float64 `json:"loadings"` // unit eigenvector; largest |entry| positive
}

// Dependency is an exact or a near linear dependency among the columns.
type Dependency struct {
	Kind    string   `json:"kind"` // "exact" or "near"
	Columns []string `json:"columns"`

	// Exact: Dependent = Σ Coefficients[c]·c + Intercept, original units.
	Dependent    string             `json:"dependent,omitempty"`
	Coefficients map[string]float64 `json:"coefficients,omitempty"`
	Intercept    *float64           `json:"intercept,omitempty"`
	Equation     string             `json:"equation,omitempty"`
	// Words says an exact dependency in plain words, e.g. "district_code
	// determines district: each district_code level lies in one district
	// level (…)" or "pipe_material determines roughness: roughness is
	// fixed within each pipe_material level (…)".
	Words string `json:"words,omitempty"`

	// Near: a condition index of convention (a) above the limit and the
	// proportions above PropLimit.
	ConditionIndex float64            `json:"condition_index,omitempty"`
	Proportions    map[string]float64 `json:"proportions,omitempty"`
	// IncludesIntercept is set when the intercept ("intercept" in Columns)
	// takes part in a near dependency.
	IncludesIntercept bool `json:"includes_intercept,omitempty"`
}

// Dependency kinds.
const (
	KindExact = "exact"
	KindNear  = "near"
)

// GroupReport is the generalized VIF of a declared group of columns or of
// a factor's treatment dummies.
type GroupReport struct {
	Name string `json:"name"`
	// Kind is "factor" for a factor (Options.Factors), "declared" for a
	// declared group (Options.Groups).
	Kind string `json:"kind"`
	// Columns are the group's columns in the design; for a factor its
	// dummies (the indicators of the levels present but the base).
	Columns []string `json:"columns"`
	// DF is the number of columns; for a factor, levels present − 1.
	DF   int      `json:"df"`
	GVIF *float64 `json:"gvif"`
	// GVIFAdjusted is GVIF^(1/(2·df)), comparable with √VIF.
	GVIFAdjusted *float64 `json:"gvif_adjusted"`
	Undefined    string   `json:"gvif_undefined,omitempty"`

	// For a factor: the levels present in the rows (the base among them)
	// with their row counts (sums of weights), the base level and how it
	// was chosen ("most frequent" or "named"), and the levels known but
	// absent from these rows.
	Levels   []string  `json:"levels,omitempty"`
	Counts   []float64 `json:"level_counts,omitempty"`
	Base     string    `json:"base,omitempty"`
	BaseRule string    `json:"base_rule,omitempty"`
	Absent   []string  `json:"absent,omitempty"`
}

// MarshalJSON writes a factor's levels, level_counts and absent as arrays
// even when empty, and leaves the factor keys out of a declared group's.
func (g GroupReport) MarshalJSON() ([]byte, error) {
	type plain GroupReport
	if g.Kind != GroupFactor {
		return json.Marshal(plain(g))
	}
	nz := func(s []string) []string {
		if s == nil {
			return []string{}
		}
		return s
	}
	counts := g.Counts
	if counts == nil {
		counts = []float64{}
	}
	return json.Marshal(struct {
		plain
		Levels []string  `json:"levels"`
		Counts []float64 `json:"level_counts"`
		Base   string    `json:"base"`
		Absent []string  `json:"absent"`
	}{plain(g), nz(g.Levels), counts, g.Base, nz(g.Absent)})
}

// DropReport gives the VIFs of the other columns after one column is
// dropped.
type DropReport struct {
	Dropped string    `json:"dropped"`
	Columns []DropVIF `json:"columns"`
	MaxVIF  *float64  `json:"max_vif"`         // over the defined VIFs; null when none
	AllOK   bool      `json:"all_below_limit"` // every VIF defined and below VIFLimit
}

// DropVIF is one column's VIF in a what-if.
type DropVIF struct {
	Name      string   `json:"name"`
	VIF       *float64 `json:"vif"`
	Undefined string   `json:"vif_undefined,omitempty"`
}

// Regression is the OLS fit of the target on the regressors.
type Regression struct {
	Target       string        `json:"target"`
	Intercept    bool          `json:"intercept"`
	Coefficients []Coefficient `json:"coefficients"` // intercept first, named "intercept"
	// NotEstimable lists regressors left out of the fit because they are
	// constant or the dependent column of an exact dependency.
	NotEstimable []string        `json:"not_estimable,omitempty"`
	Sigma        float64         `json:"sigma"`
	Sigma2       float64         `json:"sigma2"`
	R2           float64         `json:"r2"` // uncentered without an intercept
	DF           int             `json:"df"`
	Attribution  []VarianceSplit `json:"variance_split"`
}

// Coefficient is one estimated coefficient.
type Coefficient struct {
	Name string `json:"name"`
	// IsIntercept marks the intercept's coefficient (named "intercept"),
	// so that a column of that name stays distinguishable.
	IsIntercept bool    `json:"is_intercept"`
	Estimate    float64 `json:"estimate"`
	StdError    float64 `json:"std_error"`
	T           float64 `json:"t"`
	// Digits is the number of correct significant digits expected in
	// Estimate from a first-order rounding-error estimate (see Trust).
	Digits float64 `json:"expected_digits"`
}

// VarianceSplit splits Var(b_j) = σ² / (SST_j·(1 − R_j²)) into its three
// factors. It speaks (Inflated, Dominant, Remedy) only when the variance is
// in fact large: |t_j| below TCritical and at least one severity at its
// alarm level (see the package documentation for the rule).
type VarianceSplit struct {
	Name       string  `json:"name"`
	Sigma2     float64 `json:"sigma2"`
	SST        float64 `json:"sst"`
	OneMinusR2 float64 `json:"one_minus_r2"`
	Variance   float64 `json:"variance"`
	VIF        float64 `json:"vif"`
	// ReferenceSD is the column's SD in the broader sample it was judged
	// against (Options.ReferenceSD); null when none was given.
	ReferenceSD *float64 `json:"reference_sd"`
	// TCritical is the two-sided 5% quantile of Student's t on the
	// residual degrees of freedom: |t| below it leaves 0 inside the
	// coefficient's 95% interval.
	TCritical float64 `json:"t_critical"`

	// The three severities the rule compares; 1 is the alarm level.
	FitSeverity        float64 `json:"fit_severity"`        // (σ²/Var(y)) / 0.5
	VariationSeverity  float64 `json:"variation_severity"`  // (sd_ref/sd_j)² / VIFLimit; 0 without a reference
	RedundancySeverity float64 `json:"redundancy_severity"` // VIF_j / VIFLimit

	// Inflated reports that the coefficient's variance is in fact large:
	// |t| < TCritical and the largest severity is at least 1. Only then
	// are Dominant (the factor with the largest severity), Remedy and, for
	// redundancy, Caution set.
	Inflated bool   `json:"inflated"`
	Dominant string `json:"dominant"`
	Remedy   string `json:"remedy"`
	Caution  string `json:"caution,omitempty"`
	// Reason says in words which case of the rule holds.
	Reason string `json:"reason"`
}
