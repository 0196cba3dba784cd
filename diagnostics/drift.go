package diagnostics

import (
	"fmt"
	"math"
	"slices"
)

// Drift math on a history of diagnostics: robust trends of the log
// condition number (or log max VIF) over time, when the trend reaches a
// limit, and whether the latest change is far outside the recent spread.
// Like the rest of the package, functions panic on shape mistakes and
// report numerical failure with ok.

// TheilSen returns the Theil–Sen line through (x, y): the slope is the
// median of the pairwise slopes (y_j − y_i)/(x_j − x_i) over the pairs with
// x_i ≠ x_j (Theil 1950, Sen 1968), the intercept the median of the
// residuals y_i − slope·x_i (the "joint" intercept). ok is false when no
// pair has distinct x. Points with a NaN or infinite coordinate are
// skipped. It panics when x and y differ in length.
func TheilSen(x, y []float64) (slope, intercept float64, ok bool) {
	if len(x) != len(y) {
		panic(fmt.Sprintf("diagnostics: TheilSen: %d x values, %d y values", len(x), len(y)))
	}
	xs, ys := finitePairs(x, y)
	n := len(xs)
	slopes := make([]float64, 0, n*(n-1)/2)
	for i := 0; i < n; i++ {
		for j := i + 1; j < n; j++ {
			if dx := xs[j] - xs[i]; dx != 0 {
				slopes = append(slopes, (ys[j]-ys[i])/dx)
			}
		}
	}
	if len(slopes) == 0 {
		return 0, 0, false
	}
	slope = median(slopes)
	res := make([]float64, n)
	for i := range xs {
		res[i] = ys[i] - slope*xs[i]
	}
	return slope, median(res), true
}

func finitePairs(x, y []float64) ([]float64, []float64) {
	xs := make([]float64, 0, len(x))
	ys := make([]float64, 0, len(y))
	for i := range x {
		if isFinite(x[i]) && isFinite(y[i]) {
			xs = append(xs, x[i])
			ys = append(ys, y[i])
		}
	}
	return xs, ys
}

func isFinite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

// median returns the median of v, reordering v.
func median(v []float64) float64 {
	slices.Sort(v)
	n := len(v)
	if n%2 == 1 {
		return v[n/2]
	}
	return (v[n/2-1] + v[n/2]) / 2
}

// MannKendallZ returns the normal score of the Mann–Kendall trend test of y
// against x: S = Σ_{i<j} sign(x_j − x_i)·sign(y_j − y_i), divided by its
// standard deviation under no trend, sqrt((n(n−1)(2n+5) − Σ t(t−1)(2t+5))/18)
// with t the sizes of groups of tied y (Kendall 1975), without continuity
// correction. x must have no ties. z above 1.645 rejects "no upward trend"
// at the one-sided 5 % level. ok is false with fewer than 3 finite points or
// when every y is equal.
func MannKendallZ(x, y []float64) (z float64, ok bool) {
	if len(x) != len(y) {
		panic(fmt.Sprintf("diagnostics: MannKendallZ: %d x values, %d y values", len(x), len(y)))
	}
	xs, ys := finitePairs(x, y)
	n := len(xs)
	if n < 3 {
		return 0, false
	}
	s := 0.0
	for i := 0; i < n; i++ {
		for j := i + 1; j < n; j++ {
			s += sign(xs[j]-xs[i]) * sign(ys[j]-ys[i])
		}
	}
	sorted := slices.Clone(ys)
	slices.Sort(sorted)
	nf := float64(n)
	v := nf * (nf - 1) * (2*nf + 5)
	for i := 0; i < n; {
		j := i
		for j < n && sorted[j] == sorted[i] {
			j++
		}
		t := float64(j - i)
		v -= t * (t - 1) * (2*t + 5)
		i = j
	}
	v /= 18
	if v <= 0 {
		return 0, false
	}
	return s / math.Sqrt(v), true
}

func sign(v float64) float64 {
	switch {
	case v > 0:
		return 1
	case v < 0:
		return -1
	}
	return 0
}

// Trend is a Theil–Sen line fitted to the logarithm of a positive series.
type Trend struct {
	Slope     float64 // change of log(value) per unit of x
	Intercept float64 // log(value) at x = 0
	Last      float64 // the latest x fitted
	Level     float64 // the fitted value at Last: exp(Intercept + Slope·Last)
	Rate      float64 // relative change per unit of x: exp(Slope) − 1
	Z         float64 // Mann–Kendall normal score of the series
	N         int     // points used
	// SlopeLo and SlopeHi bound Slope with 90 % confidence (Sen 1968,
	// eq. 2.6: ranks of the pairwise slopes around the median, from the
	// variance of Kendall's S with ties).
	SlopeLo, SlopeHi float64
}

// MinTrendPoints is the fewest points LogTrend fits.
const MinTrendPoints = 3

// LogTrend fits a Theil–Sen line to log(v) against x. Points whose value
// is not positive and finite are skipped; ok is false when fewer than
// MinTrendPoints remain or they share one x. It panics when x and v differ
// in length.
func LogTrend(x, v []float64) (Trend, bool) {
	if len(x) != len(v) {
		panic(fmt.Sprintf("diagnostics: LogTrend: %d x values, %d values", len(x), len(v)))
	}
	var xs, ls []float64
	for i := range v {
		if v[i] > 0 && isFinite(v[i]) && isFinite(x[i]) {
			xs = append(xs, x[i])
			ls = append(ls, math.Log(v[i]))
		}
	}
	if len(xs) < MinTrendPoints {
		return Trend{}, false
	}
	b, a, ok := TheilSen(xs, ls)
	if !ok {
		return Trend{}, false
	}
	last := slices.Max(xs)
	z, _ := MannKendallZ(xs, ls)
	lo, hi := senInterval(xs, ls, trendConfidenceZ)
	return Trend{
		Slope: b, Intercept: a, Last: last,
		Level: math.Exp(a + b*last), Rate: math.Expm1(b), Z: z, N: len(xs),
		SlopeLo: lo, SlopeHi: hi,
	}, true
}

// trendConfidenceZ is the standard normal quantile of a two-sided 90 %
// interval, Φ⁻¹(0.95).
const trendConfidenceZ = 1.6448536269514722

// senInterval returns the confidence bounds of the Theil–Sen slope (Sen
// 1968, eq. 2.6): with N pairwise slopes in ascending order and σ² the
// variance of Kendall's S corrected for ties in x and in y, the bounds are
// the slopes of rank round((N − zσ)/2) and round((N + zσ)/2) + 1 (1-based,
// rounding half to even), clamped to the slopes there are.
func senInterval(x, y []float64, z float64) (lo, hi float64) {
	n := len(x)
	var slopes []float64
	for i := 0; i < n; i++ {
		for j := 0; j < n; j++ {
			if dx := x[j] - x[i]; dx > 0 {
				slopes = append(slopes, (y[j]-y[i])/dx)
			}
		}
	}
	if len(slopes) == 0 {
		return math.NaN(), math.NaN()
	}
	slices.Sort(slopes)
	ties := func(v []float64) float64 {
		s := slices.Clone(v)
		slices.Sort(s)
		var t float64
		for i := 0; i < len(s); {
			j := i
			for j < len(s) && s[j] == s[i] {
				j++
			}
			if k := float64(j - i); k > 1 {
				t += k * (k - 1) * (2*k + 5)
			}
			i = j
		}
		return t
	}
	nf := float64(n)
	sigma := math.Sqrt((nf*(nf-1)*(2*nf+5) - ties(x) - ties(y)) / 18)
	nt := float64(len(slopes))
	upper := min(int(math.RoundToEven((nt+z*sigma)/2)), len(slopes)-1)
	lower := max(int(math.RoundToEven((nt-z*sigma)/2))-1, 0)
	return slopes[lower], slopes[upper]
}

// Crossing returns the x at which the fitted line reaches limit: the
// solution of Intercept + Slope·x = log(limit). ok is false when the line
// does not rise or limit is not positive. A result at or before Last means
// the fitted level is already at or above the limit.
func (t Trend) Crossing(limit float64) (x float64, ok bool) {
	if !(t.Slope > 0) || !(limit > 0) || math.IsInf(limit, 0) {
		return 0, false
	}
	return (math.Log(limit) - t.Intercept) / t.Slope, true
}

// RobustZ returns the modified z-score of x against sample,
// 0.6745·(x − median)/MAD with MAD the median absolute deviation from the
// median (Iglewicz & Hoaglin 1993; 0.6745 is the 0.75 quantile of the
// standard normal, so the score is on the scale of a normal z). When more
// than half the sample is equal the MAD is 0; the mean absolute deviation
// scaled by 1.253314 (√(π/2), its ratio to σ for normal data) stands in.
// With no spread at all the score is 0 for x at the median and ±Inf
// otherwise. NaN and infinite sample values are skipped; ok is false when
// fewer than 3 remain or x is not finite.
func RobustZ(sample []float64, x float64) (z float64, ok bool) {
	var s []float64
	for _, v := range sample {
		if isFinite(v) {
			s = append(s, v)
		}
	}
	if len(s) < 3 || !isFinite(x) {
		return 0, false
	}
	med := median(s)
	dev := make([]float64, len(s))
	mean := 0.0
	for i, v := range s {
		dev[i] = math.Abs(v - med)
		mean += dev[i]
	}
	mean /= float64(len(s))
	d := x - med
	if mad := median(dev); mad > 0 {
		return 0.6745 * d / mad, true
	}
	if mean > 0 {
		return d / (1.253314 * mean), true
	}
	switch {
	case d > 0:
		return math.Inf(1), true
	case d < 0:
		return math.Inf(-1), true
	}
	return 0, true
}
