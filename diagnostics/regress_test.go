package diagnostics

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"
)

func splitOf(t *testing.T, rep *Report, name string) (VarianceSplit, Coefficient) {
	t.Helper()
	var c Coefficient
	for _, x := range rep.Regression.Coefficients {
		if x.Name == name {
			c = x
		}
	}
	for _, vs := range rep.Regression.Attribution {
		if vs.Name == name {
			return vs, c
		}
	}
	t.Fatalf("no variance split for %q", name)
	return VarianceSplit{}, c
}

// The variance split speaks only when a coefficient's variance is in fact
// large (the package's documented rule: |t| below the 5% two-sided t
// quantile and a factor at its alarm level), and then names the dominant
// cause with its remedy, σ and the column's SD in their units: a near copy
// (redundancy), a sensor that barely moves against its reference SD
// (little variation), a target that is mostly noise (poor fit). It stays
// silent, with its reason, for a coefficient that stands clear of zero
// despite a VIF in the thousands and for a small |t| with no factor at
// alarm; Dominant and Remedy are then empty (never "nothing to fix").
func TestVarianceSplit(t *testing.T) {
	r := rand.New(rand.NewPCG(81, 82))
	names := []string{"temperature", "rainfall", "population_served", "households", "pressure_z1",
		"metered_volume", "billed_volume", "demand_m3", "night_flow"}
	var rows [][]float64
	for i := 0; i < 3000; i++ {
		temp := 15 + 8*r.NormFloat64()
		rain := 6 * r.ExpFloat64()
		pop := 48000 + 1500*r.NormFloat64()
		hh := pop/2.6 + 5*r.NormFloat64()      // near copy of population
		press := 52.3 + 0.0002*r.NormFloat64() // barely moves (its usual SD is 0.05)
		metered := 300*temp + 0.2*pop + 2e4*press + 400*r.NormFloat64()
		billed := 100*temp + 0.2*pop + 1e5*r.NormFloat64() // mostly noise
		demand := 300*temp + 50*pop + 400*r.NormFloat64()  // population clear despite its VIF
		night := 300*temp + 400*r.NormFloat64()            // no effect of rainfall, good fit
		rows = append(rows, []float64{temp, rain, pop, hh, press, metered, billed, demand, night})
	}
	m, q := feedRows(names, rows, 512)
	ref := map[string]float64{"pressure_z1": 0.05, "temperature": 8, "rainfall": 6, "population_served": 1500, "households": 580}
	type want struct {
		inflated bool
		dominant string
		text     []string // in Remedy when inflated, in Reason otherwise
	}
	cases := []struct {
		target string
		cols   []string
		want   map[string]want
	}{
		{"metered_volume", []string{"temperature", "population_served", "households", "pressure_z1"}, map[string]want{
			"population_served": {true, CauseRedundancy, []string{"VIF", "explained by households"}},
			"households":        {true, CauseRedundancy, []string{"explained by population_served"}},
			"pressure_z1":       {true, CauseLittleVariation, []string{"SD 0.0002", "0.05 in its reference sample (in pressure_z1's units)"}},
			"temperature":       {false, "", []string{"stands clear of zero"}},
		}},
		{"billed_volume", []string{"temperature", "rainfall"}, map[string]want{
			"temperature": {true, CausePoorFit, []string{"in billed_volume's units against its SD of"}},
		}},
		{"demand_m3", []string{"temperature", "population_served", "households"}, map[string]want{
			"population_served": {false, "", []string{"stands clear of zero although redundancy"}},
		}},
		{"night_flow", []string{"temperature", "rainfall"}, map[string]want{
			"rainfall": {false, "", []string{"no clear effect of rainfall"}},
		}},
	}
	for _, tc := range cases {
		qr, cp := analyzeBoth(t, m, q, Options{Columns: tc.cols, Target: tc.target, ReferenceSD: ref})
		for _, rep := range []*Report{qr, cp} {
			for _, vs := range rep.Regression.Attribution {
				_, coef := splitOf(t, rep, vs.Name)
				if w, ok := tc.want[vs.Name]; ok {
					if vs.Inflated != w.inflated || vs.Dominant != w.dominant {
						t.Errorf("%s path, target %s: %s inflated %v dominant %q (|t| %.3g), want %v %q; reason %q",
							rep.Path, tc.target, vs.Name, vs.Inflated, vs.Dominant, math.Abs(coef.T), w.inflated, w.dominant, vs.Reason)
					}
					text := vs.Reason
					if w.inflated {
						text = vs.Remedy
					}
					for _, s := range w.text {
						if !strings.Contains(text, s) {
							t.Errorf("%s path, target %s: %s: %q lacks %q", rep.Path, tc.target, vs.Name, text, s)
						}
					}
				}
				// The rule itself, on every coefficient.
				top := max(vs.FitSeverity, vs.VariationSeverity, vs.RedundancySeverity)
				if rule := math.Abs(coef.T) < vs.TCritical && top >= 1; vs.Inflated != rule {
					t.Errorf("%s: inflated %v, rule says %v (|t| %g, t_crit %g, top %g)", vs.Name, vs.Inflated, rule, coef.T, vs.TCritical, top)
				}
				if !vs.Inflated && (vs.Dominant != "" || vs.Remedy != "" || vs.Caution != "") {
					t.Errorf("%s: silent split speaks: %+v", vs.Name, vs)
				}
				if strings.Contains(vs.Remedy+vs.Reason, "nothing to fix") || vs.Reason == "" {
					t.Errorf("%s: remedy %q reason %q", vs.Name, vs.Remedy, vs.Reason)
				}
				if vs.Dominant == CauseRedundancy && !strings.Contains(vs.Caution, "omitted-variable bias") {
					t.Errorf("%s: redundancy without the caution", vs.Name)
				}
				// Var(b_j) = σ²/(SST_j·(1−R_j²)) and the reported SE agree.
				if v := vs.Sigma2 / (vs.SST * vs.OneMinusR2); relErr(v, coef.StdError*coef.StdError) > 1e-10 || relErr(v, vs.Variance) > 1e-10 {
					t.Errorf("%s: split %g, variance %g, SE² %g", vs.Name, v, vs.Variance, coef.StdError*coef.StdError)
				}
				if c := colByName(t, rep, vs.Name); relErr(1/vs.OneMinusR2, *c.VIF) > 1e-9 {
					t.Errorf("%s: 1/(1−R²) %g, VIF %g", vs.Name, 1/vs.OneMinusR2, *c.VIF)
				}
			}
		}
		// t_crit: the 0.975 quantile of Student's t on 2996 or so degrees
		// of freedom is 1.9607 (recalled from memory: 1.960 for df → ∞,
		// 1.962 for df = 1000).
		if tc := qr.Regression.Attribution[0].TCritical; math.Abs(tc-1.9607) > 5e-4 {
			t.Errorf("t_crit %g on %d df", tc, qr.Regression.DF)
		}
	}
	// Without a reference SD the sensor's variation is not judged.
	rep, err := Analyze(m, q, Options{Columns: []string{"temperature", "population_served", "households", "pressure_z1"}, Target: "metered_volume"})
	if err != nil {
		t.Fatal(err)
	}
	vs, _ := splitOf(t, rep, "pressure_z1")
	if vs.VariationSeverity != 0 || vs.ReferenceSD != nil || vs.Inflated || !strings.Contains(vs.Reason, "no reference SD") {
		t.Errorf("pressure_z1 without a reference: %+v", vs)
	}
}

// The low-variation verdict does not depend on the column's origin: the
// same district-days with temperature in °C and in K (x + 273.15) give the
// same severities, the same verdict and the same dominant cause for every
// coefficient. Regression: the old rule measured the spread against the
// column's magnitude, so 2 K of spread around 290 K read as "little
// variation" (0.7%) while 2 °C around 15 °C did not.
func TestVarianceSplitOriginFree(t *testing.T) {
	r := rand.New(rand.NewPCG(83, 84))
	names := []string{"temperature", "population_served", "demand_m3"}
	var celsius, kelvin [][]float64
	for i := 0; i < 500; i++ {
		temp := 15 + 2*r.NormFloat64()
		pop := 48000 + 1500*r.NormFloat64()
		demand := 5*temp + 0.2*pop + 400*r.NormFloat64()
		celsius = append(celsius, []float64{temp, pop, demand})
		kelvin = append(kelvin, []float64{temp + 273.15, pop, demand})
	}
	// The reference SDs: the same temperature spread in either scale.
	for _, ref := range []map[string]float64{nil, {"temperature": 3, "population_served": 1500}, {"temperature": 9, "population_served": 1500}} {
		var got [2][2][]VarianceSplit // [°C, K][QR, cross-product path]
		for s, rows := range [][][]float64{celsius, kelvin} {
			m, q := feedRows(names, rows, 64)
			qr, cp := analyzeBoth(t, m, q, Options{Target: "demand_m3", ReferenceSD: ref})
			got[s] = [2][]VarianceSplit{qr.Regression.Attribution, cp.Regression.Attribution}
		}
		for p := range 2 {
			for i, c := range got[0][p] {
				k := got[1][p][i]
				if c.Inflated != k.Inflated || c.Dominant != k.Dominant ||
					relErr(c.VariationSeverity, k.VariationSeverity) > 1e-9 || relErr(c.FitSeverity, k.FitSeverity) > 1e-9 || relErr(c.RedundancySeverity, k.RedundancySeverity) > 1e-9 {
					t.Errorf("reference %v: %s in °C %+v, in K %+v", ref, c.Name, c, k)
				}
			}
		}
		tc, _ := func() (VarianceSplit, bool) {
			for _, vs := range got[0][0] {
				if vs.Name == "temperature" {
					return vs, true
				}
			}
			return VarianceSplit{}, false
		}()
		t.Logf("reference %v: temperature inflated %v dominant %q severities fit %.3g variation %.3g redundancy %.3g",
			ref, tc.Inflated, tc.Dominant, tc.FitSeverity, tc.VariationSeverity, tc.RedundancySeverity)
		// A usual spread of 9 against 2 here: (9/2)²/10 ≈ 2 is little
		// variation, in either scale.
		if ref != nil && ref["temperature"] == 9 && (!tc.Inflated || tc.Dominant != CauseLittleVariation) {
			t.Errorf("reference %v: temperature %+v, want little variation", ref, tc)
		}
	}
}
