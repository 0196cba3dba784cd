package web

import (
	"fmt"
	"math"
	"slices"
	"time"

	"plumb/diagnostics"
)

// TrendForecast projects metric (MetricCondition or MetricMaxVIF) of the
// last n points of tl over horizon, one point a day, for a View whose
// store keeps no forecast of its own. The central line is
// diagnostics.LogTrend, the Theil–Sen line on the logarithm that the
// agent's trend rule fits, started at its fitted level at the last point.
// The band uses the two-sided 90 % confidence interval of the Theil–Sen
// slope (Sen 1968; the rank formula as given by Gilbert, "Statistical
// Methods for Environmental Pollution Monitoring", 1987, §16.5):
// with N' pairwise slopes sorted and C = 1.645·√(n(n−1)(2n+5)/18), the
// bounds are the slopes of rank (N'−C)/2 and (N'+C)/2 + 1, interpolated.
// Unbounded points (an exact dependency) break the series: only the
// points after the last one are fitted. ok is false with fewer than
// diagnostics.MinTrendPoints usable points.
func TrendForecast(tl []Point, metric string, n int, horizon time.Duration, critical float64) (Forecast, bool) {
	recent := tl[max(0, len(tl)-n):]
	for i := len(recent) - 1; i >= 0; i-- {
		if v := metricOf(recent[i], metric); math.IsInf(v, 0) || math.IsNaN(v) {
			recent = recent[i+1:]
			break
		}
	}
	if len(recent) < diagnostics.MinTrendPoints {
		return Forecast{}, false
	}
	last := recent[len(recent)-1]
	x := make([]float64, len(recent))
	v := make([]float64, len(recent))
	for i, p := range recent {
		x[i] = p.At.Sub(last.At).Hours() / 24
		v[i] = metricOf(p, metric)
	}
	tr, ok := diagnostics.LogTrend(x, v)
	if !ok {
		return Forecast{}, false
	}
	lo, hi := senInterval(x, v, 1.645)
	lo, hi = math.Min(lo, tr.Slope), math.Max(hi, tr.Slope)
	level := math.Exp(tr.Intercept) // fitted value at x = 0, the last point
	fc := Forecast{Metric: metric}
	days := int(math.Ceil(horizon.Hours() / 24))
	for k := 0; k <= days; k++ {
		fk := float64(k)
		fc.Points = append(fc.Points, ForecastPoint{
			At:    last.At.Add(time.Duration(k) * 24 * time.Hour),
			Value: level * math.Exp(tr.Slope*fk),
			Low:   level * math.Exp(lo*fk),
			High:  level * math.Exp(hi*fk),
		})
	}
	name := "condition number"
	if metric == MetricMaxVIF {
		name = "max VIF"
	}
	fc.Message = fmt.Sprintf("%s %s, %s over the last %d points", name, fmtNum(level), fmtRate(tr.Rate), tr.N)
	if cx, ok := tr.Crossing(critical); ok && level < critical && cx <= float64(days) {
		fc.Crosses = last.At.Add(time.Duration(cx * float64(24*time.Hour)))
		fc.Message += fmt.Sprintf(": reaches %s in about %.0f days", fmtNum(critical), math.Max(1, math.Round(cx)))
	}
	return fc, true
}

// senInterval returns the confidence bounds of the Theil–Sen slope of
// log(v) against x for the normal quantile z (see TrendForecast). Ties in
// the data are ignored in the variance, which widens nothing and is the
// usual simplification.
func senInterval(x, v []float64, z float64) (lo, hi float64) {
	var xs, ls []float64
	for i := range v {
		if v[i] > 0 && !math.IsInf(v[i], 0) {
			xs = append(xs, x[i])
			ls = append(ls, math.Log(v[i]))
		}
	}
	var slopes []float64
	for i := range xs {
		for j := i + 1; j < len(xs); j++ {
			if xs[j] != xs[i] {
				slopes = append(slopes, (ls[j]-ls[i])/(xs[j]-xs[i]))
			}
		}
	}
	if len(slopes) == 0 {
		return math.NaN(), math.NaN()
	}
	slices.Sort(slopes)
	n := float64(len(xs))
	c := z * math.Sqrt(n*(n-1)*(2*n+5)/18)
	np := float64(len(slopes))
	// Ranks are 1-based in the formula.
	return rankAt(slopes, (np-c)/2), rankAt(slopes, (np+c)/2+1)
}

// rankAt interpolates the sorted values at the 1-based rank r, clamped to
// the ends.
func rankAt(sorted []float64, r float64) float64 {
	i := r - 1
	if i <= 0 {
		return sorted[0]
	}
	if i >= float64(len(sorted)-1) {
		return sorted[len(sorted)-1]
	}
	f := math.Floor(i)
	return sorted[int(f)] + (i-f)*(sorted[int(f)+1]-sorted[int(f)])
}
