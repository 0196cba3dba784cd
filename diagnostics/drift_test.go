package diagnostics

import (
	"encoding/json"
	"math"
	"os"
	"testing"
)

func near(got, want, tol float64) bool {
	if math.IsInf(want, 0) || math.IsNaN(want) {
		return got == want || math.IsNaN(got) && math.IsNaN(want)
	}
	return math.Abs(got-want) <= tol*math.Max(1, math.Abs(want))
}

func TestTheilSenWorked(t *testing.T) {
	// Worked by hand: x = 0,1,2,3, y = 1,3,2,5. Pairwise slopes
	// 2, 1/2, 4/3, −1, 1, 3; sorted −1, 1/2, 1, 4/3, 2, 3; median
	// (1 + 4/3)/2 = 7/6. Residuals y − 7x/6: 1, 11/6, −1/3, 3/2; median
	// (1 + 3/2)/2 = 5/4.
	b, a, ok := TheilSen([]float64{0, 1, 2, 3}, []float64{1, 3, 2, 5})
	if !ok || !near(b, 7.0/6, 1e-15) || !near(a, 1.25, 1e-15) {
		t.Fatalf("TheilSen = %v, %v, %v; want 7/6, 5/4", b, a, ok)
	}
	// An outlier does not move it much: y = 2x + 1 exactly at 6 points and
	// one wild value. 15 pairwise slopes among the exact points are 2, the
	// 6 involving the outlier are not, so the median (11th of 21) is 2;
	// residuals are 1 at six points, so the intercept is 1 (by hand).
	b, a, ok = TheilSen([]float64{0, 1, 2, 3, 4, 5, 6}, []float64{1, 3, 5, 100, 9, 11, 13})
	if !ok || b != 2 || a != 1 {
		t.Fatalf("TheilSen with an outlier = %v, %v; want 2, 1", b, a)
	}
	if _, _, ok := TheilSen([]float64{1, 1, 1}, []float64{1, 2, 3}); ok {
		t.Error("TheilSen with one x value reported ok")
	}
	if _, _, ok := TheilSen([]float64{0, math.NaN(), 2}, []float64{1, 2, math.Inf(1)}); ok {
		t.Error("TheilSen with one finite point reported ok")
	}
}

func TestMannKendallWorked(t *testing.T) {
	// By hand for y = 1,3,2,5 at x = 0..3: signs of the 6 pairs
	// + + + − + +, S = 4; Var S = 4·3·13/18 = 26/3; z = 4/√(26/3) = 1.358732…
	z, ok := MannKendallZ([]float64{0, 1, 2, 3}, []float64{1, 3, 2, 5})
	if !ok || !near(z, 4/math.Sqrt(26.0/3), 1e-14) {
		t.Fatalf("z = %v, %v", z, ok)
	}
	// Ties in y: y = 1,1,2 at x = 0,1,2. S = 0 + 1 + 1 = 2; one tie group
	// of 2: Var S = (3·2·11 − 2·1·9)/18 = 48/18; z = 2/√(8/3) (by hand).
	z, ok = MannKendallZ([]float64{0, 1, 2}, []float64{1, 1, 2})
	if !ok || !near(z, 2/math.Sqrt(8.0/3), 1e-14) {
		t.Fatalf("tied z = %v, %v", z, ok)
	}
	if _, ok := MannKendallZ([]float64{0, 1, 2}, []float64{4, 4, 4}); ok {
		t.Error("constant series reported ok")
	}
}

func TestLogTrendWorked(t *testing.T) {
	// v = 10·1.08^x exactly: every pairwise slope of log v is ln 1.08, so
	// the rate is 8 %/unit and the line reaches 30 at x = ln 3/ln 1.08 =
	// 14.2749… (calculator: 1.0986123/0.0769610).
	var x, v []float64
	for i := 0; i < 10; i++ {
		x = append(x, float64(i))
		v = append(v, 10*math.Pow(1.08, float64(i)))
	}
	tr, ok := LogTrend(x, v)
	if !ok || !near(tr.Rate, 0.08, 1e-12) || !near(tr.Level, 10*math.Pow(1.08, 9), 1e-12) || tr.N != 10 || tr.Last != 9 {
		t.Fatalf("trend %+v, %v", tr, ok)
	}
	cx, ok := tr.Crossing(30)
	if !ok || !near(cx, math.Log(3)/math.Log(1.08), 1e-12) || !near(cx, 14.2749, 1e-5) {
		t.Fatalf("crossing %v, %v", cx, ok)
	}
	// A strictly rising series of 10 has S = 45, Var S = 10·9·25/18 = 125,
	// z = 45/√125 = 4.0249… (by hand).
	if !near(tr.Z, 45/math.Sqrt(125), 1e-12) {
		t.Errorf("z = %v", tr.Z)
	}
	// Non-positive and undefined values are skipped.
	tr2, ok := LogTrend([]float64{0, 1, 2, 3, 4}, []float64{10, 0, math.Inf(1), 10 * 1.08 * 1.08 * 1.08, 10 * math.Pow(1.08, 4)})
	if !ok || tr2.N != 3 || !near(tr2.Rate, 0.08, 1e-12) {
		t.Fatalf("trend with gaps %+v, %v", tr2, ok)
	}
	// A falling or flat line never crosses.
	if _, ok := (Trend{Slope: -0.01}).Crossing(30); ok {
		t.Error("falling trend crosses")
	}
	if _, ok := LogTrend([]float64{0, 1}, []float64{1, 2}); ok {
		t.Error("two points fitted")
	}
}

func TestRobustZWorked(t *testing.T) {
	cases := []struct {
		name   string
		sample []float64
		x      float64
		want   float64
		ok     bool
	}{
		// By hand: median 3, deviations 2,1,0,1,97, MAD 1; 0.6745·(10 − 3)/1.
		{"MAD", []float64{1, 2, 3, 4, 100}, 10, 0.6745 * 7, true},
		// By hand: median 5, deviations 0,0,0,1,4: MAD 0, mean deviation
		// 1; (7 − 5)/(1.253314·1).
		{"MAD zero, mean deviation", []float64{5, 5, 5, 6, 9}, 7, 2 / 1.253314, true},
		{"no spread, at the median", []float64{2, 2, 2}, 2, 0, true},
		{"no spread, above", []float64{2, 2, 2}, 2.5, math.Inf(1), true},
		{"no spread, below", []float64{2, 2, 2}, 1, math.Inf(-1), true},
		{"too few", []float64{1, 2}, 3, 0, false},
		{"undefined x", []float64{1, 2, 3}, math.NaN(), 0, false},
		{"undefined sample values skipped", []float64{1, math.NaN(), 2, 3, 4, 100, math.Inf(1)}, 10, 0.6745 * 7, true},
	}
	for _, c := range cases {
		z, ok := RobustZ(c.sample, c.x)
		if ok != c.ok || ok && !near(z, c.want, 1e-12) {
			t.Errorf("%s: RobustZ = %v, %v; want %v, %v", c.name, z, ok, c.want, c.ok)
		}
	}
}

type driftGolden struct {
	TheilSen []struct {
		Name       string    `json:"name"`
		X          []float64 `json:"x"`
		Value      []float64 `json:"value"`
		Slope      float64   `json:"slope"`
		Intercept  float64   `json:"intercept"`
		MannKendal float64   `json:"mann_kendall_z"`
		SlopeLo    float64   `json:"slope_low_90"`
		SlopeHi    float64   `json:"slope_high_90"`
	} `json:"theil_sen"`
	RobustZ []struct {
		Name   string    `json:"name"`
		Sample []float64 `json:"sample"`
		X      float64   `json:"x"`
		Z      float64   `json:"z"`
	} `json:"robust_z"`
}

// TestDriftAgainstScipy checks against scipy 1.10 (theilslopes with the
// joint intercept and its 90 % slope interval, kendalltau, median_abs_deviation); the generating
// script is testdata/drift_scipy.py.
func TestDriftAgainstScipy(t *testing.T) {
	b, err := os.ReadFile("testdata/drift_scipy.json")
	if err != nil {
		t.Fatal(err)
	}
	var g driftGolden
	if err := json.Unmarshal(b, &g); err != nil {
		t.Fatal(err)
	}
	if len(g.TheilSen) == 0 || len(g.RobustZ) == 0 {
		t.Fatal("golden file has no cases")
	}
	for _, c := range g.TheilSen {
		tr, ok := LogTrend(c.X, c.Value)
		if !ok {
			t.Errorf("%s: not fitted", c.Name)
			continue
		}
		// Slopes and intercepts are medians of the same float64 numbers:
		// agreement to rounding. z passes through scipy's p-value and its
		// inverse: 1e-8 relative.
		if !near(tr.Slope, c.Slope, 1e-12) || !near(tr.Intercept, c.Intercept, 1e-12) {
			t.Errorf("%s: slope %v intercept %v; scipy %v %v", c.Name, tr.Slope, tr.Intercept, c.Slope, c.Intercept)
		}
		// Sen's interval picks two of the same pairwise slopes: to rounding.
		if !near(tr.SlopeLo, c.SlopeLo, 1e-12) || !near(tr.SlopeHi, c.SlopeHi, 1e-12) {
			t.Errorf("%s: slope interval [%v, %v]; scipy [%v, %v]", c.Name, tr.SlopeLo, tr.SlopeHi, c.SlopeLo, c.SlopeHi)
		}
		if !near(tr.Z, c.MannKendal, 1e-8) {
			t.Errorf("%s: Mann-Kendall z %v; scipy %v", c.Name, tr.Z, c.MannKendal)
		}
	}
	for _, c := range g.RobustZ {
		z, ok := RobustZ(c.Sample, c.X)
		if !ok || !near(z, c.Z, 1e-12) {
			t.Errorf("%s: robust z %v, %v; scipy %v", c.Name, z, ok, c.Z)
		}
	}
}

func TestDriftPanicsOnShape(t *testing.T) {
	for name, f := range map[string]func(){
		"TheilSen":     func() { TheilSen([]float64{1}, nil) },
		"MannKendallZ": func() { MannKendallZ([]float64{1}, nil) },
		"LogTrend":     func() { LogTrend([]float64{1}, nil) },
	} {
		func() {
			defer func() {
				if recover() == nil {
					t.Errorf("%s: no panic on mismatched lengths", name)
				}
			}()
			f()
		}()
	}
}
