package web

import (
	"math"
	"strings"
	"testing"
	"time"
)

func pointSeries(vals []float64) []Point {
	t0 := time.Date(2026, 7, 1, 0, 0, 0, 0, time.UTC)
	out := make([]Point, len(vals))
	for i, v := range vals {
		out[i] = Point{At: t0.AddDate(0, 0, i), ConditionNumber: v, Judged: v, MaxVIF: v, Rank: 5, Columns: 4}
	}
	return out
}

func TestTrendForecastExponential(t *testing.T) {
	// 10·1.05^day: the log is a straight line, every pairwise slope equals
	// log 1.05, so the band has no width (exact arithmetic, no source).
	var vals []float64
	for i := range 14 {
		vals = append(vals, 10*math.Pow(1.05, float64(i)))
	}
	tl := pointSeries(vals)
	fc, ok := TrendForecast(tl, MetricMaxVIF, 14, 20*24*time.Hour, 30)
	if !ok {
		t.Fatal("no forecast")
	}
	if len(fc.Points) != 21 || !fc.Points[0].At.Equal(tl[13].At) {
		t.Fatalf("forecast has %d points from %v", len(fc.Points), fc.Points[0].At)
	}
	for k, p := range fc.Points {
		want := vals[13] * math.Pow(1.05, float64(k))
		for _, got := range []float64{p.Value, p.Low, p.High} {
			if math.Abs(got-want) > 1e-9*want {
				t.Errorf("day %d: %v, want %v", k, got, want)
			}
		}
	}
	// 10·1.05^13 = 18.856 reaches 30 after log(30/18.856)/log(1.05) = 9.52 days.
	cross := fc.Crosses.Sub(tl[13].At).Hours() / 24
	if math.Abs(cross-math.Log(30/vals[13])/math.Log(1.05)) > 1e-6 {
		t.Errorf("crossing after %.4f days", cross)
	}
	if !strings.Contains(fc.Message, "reaches 30 in about 10 days") || !strings.Contains(fc.Message, "rising 5 %/day") {
		t.Errorf("message %q", fc.Message)
	}
}

func TestSenInterval(t *testing.T) {
	// Hand computation from the rank formula (Gilbert 1987, §16.5): the
	// ten pairwise slopes of y = 0, 1, 1.5, 3, 3.2 at x = 0…4, sorted, are
	// .2 .5 .7333 .75 .8 .85 1 1 1 1.5; C = 1.645·√(5·4·15/18) = 6.71568;
	// the bounds sit at ranks 1.64216 and 9.35784.
	x := []float64{0, 1, 2, 3, 4}
	y := []float64{0, 1, 1.5, 3, 3.2}
	v := make([]float64, len(y))
	for i := range y {
		v[i] = math.Exp(y[i])
	}
	lo, hi := senInterval(x, v, 1.645)
	if math.Abs(lo-0.39264734) > 1e-7 || math.Abs(hi-1.17892109) > 1e-7 {
		t.Errorf("interval [%.8f, %.8f], want [0.39264734, 1.17892109]", lo, hi)
	}
}

func TestTrendForecastAfterSingularStretch(t *testing.T) {
	inf := math.Inf(1)
	tl := pointSeries([]float64{50, 60, inf, inf, 8, 8.4, 8.8, 9.3, 9.7})
	fc, ok := TrendForecast(tl, MetricMaxVIF, 14, 7*24*time.Hour, 10)
	if !ok {
		t.Fatal("no forecast")
	}
	// Only the five points after the unbounded ones count: 8 → 9.7 rises
	// about 4.9 %/day, never near 50 or 60.
	if !strings.Contains(fc.Message, "over the last 5 points") {
		t.Errorf("message %q", fc.Message)
	}
	if fc.Crosses.IsZero() {
		t.Errorf("a rise from 9.7 at ~5%%/day reaches 10 within the week: %q", fc.Message)
	}
	for _, p := range fc.Points {
		if !(p.Low <= p.Value && p.Value <= p.High) {
			t.Errorf("%v: band [%v, %v] does not hold %v", p.At, p.Low, p.High, p.Value)
		}
	}
	if _, ok := TrendForecast(pointSeries([]float64{5, inf, 6, 7}), MetricMaxVIF, 14, time.Hour, 10); ok {
		t.Errorf("two points after the break should give no forecast")
	}
}
