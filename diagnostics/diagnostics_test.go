package diagnostics

import (
	"encoding/json"
	"errors"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"

	"plumb/stream"
)

// Longley: VIF_j = SE_j²·SST_j/σ² with NIST's certified standard errors and
// residual SD (certified, NIST StRD Longley) must match the tool's VIF to 9
// digits.
func TestLongleyVIFFromCertifiedSE(t *testing.T) {
	d := readNIST(t, "Longley")
	names, rows := d.columns(0)
	m, q := feedRows(names, rows, 5)
	qr, cp := analyzeBoth(t, m, q, Options{Target: "y"})
	for j := 0; j < len(names)-1; j++ {
		// SST_j by two passes over the data, in float64 (the data have at
		// most 6 significant digits, so this is exact to ~1e-15).
		mean := 0.0
		for _, r := range rows {
			mean += r[j]
		}
		mean /= float64(len(rows))
		sst := 0.0
		for _, r := range rows {
			sst += (r[j] - mean) * (r[j] - mean)
		}
		want := d.sd[j+1] * d.sd[j+1] * sst / (d.resSD * d.resSD)
		for _, rep := range []*Report{qr, cp} {
			c := colByName(t, rep, names[j])
			if c.VIF == nil {
				t.Fatalf("%s path: %s: VIF undefined (%s)", rep.Path, names[j], c.Undefined)
			}
			if l := lre(*c.VIF, want); l < 9 {
				t.Errorf("%s path: %s: VIF %.15g, from certified SE %.15g: LRE %.2f < 9", rep.Path, names[j], *c.VIF, want, l)
			}
		}
	}
}

// Merge invariance (property, common practice): a random split into k
// partitions, each fed in random blocks and merged in random order, gives
// the diagnostics of one pass to 1e-12 relative.
func TestMergeInvariance(t *testing.T) {
	names, rows := waterTable(11, 3000)
	cols := []string{"temperature", "rainfall", "population_served", "residential_connections",
		"commercial_connections", "pipe_age", "pressure_z1", "billed_volume"}
	opt := Options{Columns: cols, Target: "metered_volume"}
	m0, q0 := feedRows(names, rows, stream.DefaultBlockRows)
	ref, refCP := analyzeBoth(t, m0, q0, opt)
	r := rand.New(rand.NewPCG(12, 34))
	for trial := 0; trial < 6; trial++ {
		k := 2 + r.IntN(6)
		cuts := []int{0, len(rows)}
		for len(cuts) < k+1 {
			c := 1 + r.IntN(len(rows)-1)
			if !slices.Contains(cuts, c) {
				cuts = append(cuts, c)
			}
		}
		slices.Sort(cuts)
		var ms []*stream.Moments
		var qs []*stream.QR
		for i := 0; i < k; i++ {
			m, q := feedSplit(names, rows[cuts[i]:cuts[i+1]], r, 200)
			ms = append(ms, m)
			qs = append(qs, q)
		}
		perm := r.Perm(k)
		m, q := ms[perm[0]], qs[perm[0]]
		for _, i := range perm[1:] {
			m.Merge(ms[i])
			q.Merge(qs[i])
		}
		got, gotCP := analyzeBoth(t, m, q, opt)
		compareReports(t, "QR", ref, got, 1e-12)
		compareReports(t, "cross-product", refCP, gotCP, 1e-12)
	}
}

// compareReports checks VIFs, condition indices, proportions (both
// conventions) and the coefficients to tol relative. Proportions are shares
// of a total of 1 per column, so they are compared relative to that total
// (tol absolute).
func compareReports(t *testing.T, label string, a, b *Report, tol float64) {
	t.Helper()
	for i := range a.Columns {
		va, vb := a.Columns[i].VIF, b.Columns[i].VIF
		if (va == nil) != (vb == nil) {
			t.Fatalf("%s: %s: VIF defined in one report only", label, a.Columns[i].Name)
		}
		if va != nil && relErr(*va, *vb) > tol {
			t.Errorf("%s: %s: VIF %.17g vs %.17g", label, a.Columns[i].Name, *va, *vb)
		}
	}
	cmp := func(what string, x, y []float64) {
		if len(x) != len(y) {
			t.Fatalf("%s: %s: lengths %d, %d", label, what, len(x), len(y))
		}
		floor := 0.0
		if strings.Contains(what, "proportions") {
			floor = 1
		}
		for i := range x {
			if math.Abs(x[i]-y[i]) > tol*math.Max(floor, math.Max(math.Abs(x[i]), math.Abs(y[i]))) {
				t.Errorf("%s: %s[%d]: %.17g vs %.17g", label, what, i, x[i], y[i])
			}
		}
	}
	cmp("condition indices", a.ConditionIndices, b.ConditionIndices)
	cmp("centered condition indices", a.CenteredConditionIndices, b.CenteredConditionIndices)
	for k := range a.Proportions {
		cmp("proportions", a.Proportions[k], b.Proportions[k])
	}
	for k := range a.CenteredProportions {
		cmp("centered proportions", a.CenteredProportions[k], b.CenteredProportions[k])
	}
	if a.Regression != nil {
		for i, c := range a.Regression.Coefficients {
			if relErr(c.Estimate, b.Regression.Coefficients[i].Estimate) > tol*10 {
				t.Errorf("%s: coefficient %s: %.17g vs %.17g", label, c.Name, c.Estimate, b.Regression.Coefficients[i].Estimate)
			}
		}
	}
	if a.Rank != b.Rank {
		t.Errorf("%s: rank %d vs %d", label, a.Rank, b.Rank)
	}
}

// Offset robustness (property, common practice): columns with mean 1e9 and
// sd about 1, and the same scaled by powers of two from 2⁻¹⁰⁰⁰ to 2⁹⁸⁰
// (values from about 1e-292 to 1e304, whose squares underflow or overflow
// float64), give the VIFs of the unshifted data to 1e-9 on every path. The
// base values are multiples of 2⁻²⁰ below 2⁸ in magnitude, so adding 1e9
// (and scaling by a power of two) is exact.
func TestOffsetRobustness(t *testing.T) {
	r := rand.New(rand.NewPCG(21, 22))
	q20 := func(v float64) float64 { return math.Round(v*(1<<20)) / (1 << 20) }
	const n = 2000
	names := []string{"pressure_z1", "pressure_z2", "pressure_z4", "temperature"}
	base := make([][]float64, n)
	for i := range base {
		a := r.NormFloat64()
		b := 0.6*a + 0.8*r.NormFloat64()
		c := a - b + 0.1*r.NormFloat64()
		base[i] = []float64{q20(a), q20(b), q20(c), q20(r.NormFloat64())}
	}
	shift := func(scale float64) [][]float64 {
		out := make([][]float64, n)
		for i, row := range base {
			out[i] = make([]float64, len(row))
			for j, v := range row {
				out[i][j] = (v + 1e9) * scale
				if (out[i][j]/scale)-1e9 != v {
					t.Fatalf("shift not exact")
				}
			}
		}
		return out
	}
	analyze := func(m *stream.Moments, q, x *stream.QR) []*Report {
		qr, cp := analyzeBoth(t, m, q, Options{})
		pr, err := Analyze(m, x, Options{})
		if err != nil {
			t.Fatal(err)
		}
		return []*Report{qr, cp, pr}
	}
	m0, q0 := feedRows(names, base, 256)
	refs := analyze(m0, q0, feedExtended(names, base, 256))
	for _, scale := range []float64{1, 0x1p-30, 0x1p-700, 0x1p-1000, 0x1p600, 0x1p980} {
		rows := shift(scale)
		m, q := feedRows(names, rows, 256)
		gots := analyze(m, q, feedExtended(names, rows, 256))
		for i, got := range gots {
			for k, c := range refs[i].Columns {
				g := got.Columns[k]
				if g.VIF == nil || g.NearConstant || g.Constant {
					t.Fatalf("scale %g, %s path: %s: VIF undefined (%s)", scale, got.Path, g.Name, g.Undefined)
				}
				if e := relErr(*c.VIF, *g.VIF); e > 1e-9 {
					t.Errorf("scale %g, %s path: %s: VIF %.15g, unshifted %.15g (rel %.2g)", scale, got.Path, c.Name, *g.VIF, *c.VIF, e)
				}
				if e := relErr(g.SD/scale, c.SD); e > 1e-6 {
					t.Errorf("scale %g, %s path: %s: sd %g, unshifted %g times the scale", scale, got.Path, c.Name, g.SD, c.SD)
				}
			}
			if got.Rank != 5 {
				t.Errorf("scale %g, %s path: rank %d, want 5", scale, got.Path, got.Rank)
			}
		}
	}
	// The VIFs are not trivially 1: the data were built collinear.
	if v := *colByName(t, refs[0], "pressure_z4").VIF; v < 50 {
		t.Fatalf("pressure_z4 VIF %g: the test data lost their collinearity", v)
	}
}

// Scale invariance (property): the water table with each column multiplied
// by its own power of two, from 2⁻⁹⁹⁰ to 2⁹⁹⁰ (values from about 1e-297 to
// 1e303), gives on every path the diagnostics of the table as it is: the
// same VIFs, condition indices, proportions, rank, trust verdict and
// t statistics, and means, standard deviations, equations of the exact
// dependencies and regression coefficients in the columns' own units, each
// the unscaled one times its power of two. Each column is divided by a
// power of two from its own magnitude before any product is formed, so the
// computations are those of the unscaled table; 1e-13 leaves room for
// norms that round differently at another scale. The report marshals to
// JSON even where a value (σ² of a target near 1e300) overflows float64.
func TestScaleInvariance(t *testing.T) {
	names, rows := waterTable(41, 1500)
	// Wide apart, but so that every result in the columns' own units stays
	// within float64 (a coefficient scales with the ratio of two scales).
	exp := map[string]int{
		"temperature": 700, "rainfall": -300, "population_served": -400, "residential_connections": 980,
		"commercial_connections": 700, "total_connections": 990, "pipe_age": 512, "pressure_z1": -380,
		"pressure_z2": 0, "pressure_z3": -990, "metered_volume": 600, "billed_volume": -400,
	}
	scaled := make([][]float64, len(rows))
	for i, r := range rows {
		scaled[i] = make([]float64, len(r))
		for j, v := range r {
			scaled[i][j] = math.Ldexp(v, exp[names[j]])
			if math.Ldexp(scaled[i][j], -exp[names[j]]) != v {
				t.Fatalf("%s: %v times 2^%d is not exact", names[j], v, exp[names[j]])
			}
		}
	}
	cols := []string{"temperature", "rainfall", "population_served", "residential_connections", "commercial_connections",
		"total_connections", "pipe_age", "pressure_z1", "pressure_z2", "pressure_z3", "billed_volume"}
	opt := Options{Columns: cols, Target: "metered_volume",
		Groups: map[string][]string{"weather": {"temperature", "rainfall"}}}
	// Reference SDs in the columns' own units: a fifth of the sample's for
	// rainfall and pipe age (so that they vary too little by the rule), as
	// much for the others.
	refSD := func(k func(string) int) map[string]float64 {
		sd := map[string]float64{}
		for j, name := range names {
			mean, ss := 0.0, 0.0
			for _, r := range rows {
				mean += r[j] / float64(len(rows))
			}
			for _, r := range rows {
				ss += (r[j] - mean) * (r[j] - mean)
			}
			f := 1.0
			if name == "rainfall" || name == "pipe_age" {
				f = 5
			}
			sd[name] = math.Ldexp(f*math.Sqrt(ss/float64(len(rows)-1)), k(name))
		}
		return sd
	}
	analyze := func(rows [][]float64, k func(string) int) []*Report {
		opt := opt
		opt.ReferenceSD = refSD(k)
		m, q := feedRows(names, rows, 200)
		qr, cp := analyzeBoth(t, m, q, opt)
		pr, err := Analyze(m, feedExtended(names, rows, 200), opt)
		if err != nil {
			t.Fatal(err)
		}
		if _, err := json.Marshal(pr); err != nil {
			t.Fatalf("precise path: report does not marshal: %v", err)
		}
		return []*Report{qr, cp, pr}
	}
	const tol = 1e-13
	refs := analyze(rows, func(string) int { return 0 })
	gots := analyze(scaled, func(name string) int { return exp[name] })
	for i, ref := range refs {
		got := gots[i]
		label := got.Path
		compareReports(t, label, &Report{Columns: ref.Columns, ConditionIndices: ref.ConditionIndices,
			CenteredConditionIndices: ref.CenteredConditionIndices, Proportions: ref.Proportions,
			CenteredProportions: ref.CenteredProportions, Rank: ref.Rank}, got, tol)
		if got.Trust.Trustworthy != ref.Trust.Trustworthy || relErr(got.Trust.ExpectedDigits, ref.Trust.ExpectedDigits) > tol {
			t.Errorf("%s: trust %+v, unscaled %+v", label, got.Trust, ref.Trust)
		}
		for k, c := range ref.Columns {
			g := got.Columns[k]
			u := math.Ldexp(1, exp[c.Name])
			if g.Constant != c.Constant || g.NearConstant != c.NearConstant || g.Undefined != c.Undefined {
				t.Errorf("%s: %s: constant %v, near %v, undefined %q; unscaled %v, %v, %q", label, c.Name,
					g.Constant, g.NearConstant, g.Undefined, c.Constant, c.NearConstant, c.Undefined)
			}
			if relErr(g.Mean/u, c.Mean) > tol || relErr(g.SD/u, c.SD) > tol || g.Min/u != c.Min || g.Max/u != c.Max {
				t.Errorf("%s: %s: mean %g, sd %g, min %g, max %g; unscaled %g, %g, %g, %g times 2^%d", label, c.Name,
					g.Mean, g.SD, g.Min, g.Max, c.Mean, c.SD, c.Min, c.Max, exp[c.Name])
			}
		}
		if len(got.Dependencies) != len(ref.Dependencies) {
			t.Fatalf("%s: %d dependencies, unscaled %d", label, len(got.Dependencies), len(ref.Dependencies))
		}
		exact := 0
		for k, d := range ref.Dependencies {
			g := got.Dependencies[k]
			if g.Kind != d.Kind || g.Dependent != d.Dependent || !slices.Equal(g.Columns, d.Columns) {
				t.Errorf("%s: dependency %+v, unscaled %+v", label, g, d)
				continue
			}
			if d.Kind != KindExact {
				continue
			}
			exact++
			ud := math.Ldexp(1, exp[d.Dependent])
			if relErr(*g.Intercept/ud, *d.Intercept) > 1e-9 && math.Abs(*g.Intercept/ud-*d.Intercept) > 1e-9 {
				t.Errorf("%s: %s: intercept %g, unscaled %g times 2^%d", label, d.Dependent, *g.Intercept, *d.Intercept, exp[d.Dependent])
			}
			for term, b := range d.Coefficients {
				if gb := g.Coefficients[term] / ud * math.Ldexp(1, exp[term]); relErr(gb, b) > 1e-9 {
					t.Errorf("%s: %s: coefficient of %s %g, unscaled %g times 2^(%d − %d)", label, d.Dependent, term,
						g.Coefficients[term], b, exp[d.Dependent], exp[term])
				}
			}
		}
		if exact != 3 {
			t.Errorf("%s: %d exact dependencies, want the total, the pressure relation and the constant", label, exact)
		}
		if len(got.GVIF) != 1 || got.GVIF[0].GVIF == nil || relErr(*got.GVIF[0].GVIF, *ref.GVIF[0].GVIF) > tol {
			t.Errorf("%s: groups %+v, unscaled %+v", label, got.GVIF, ref.GVIF)
		}
		rg, rr := got.Regression, ref.Regression
		uy := math.Ldexp(1, exp[rr.Target])
		if rg == nil || len(rg.Coefficients) != len(rr.Coefficients) {
			t.Fatalf("%s: regression %+v, unscaled %+v", label, rg, rr)
		}
		for k, c := range rr.Coefficients {
			g := rg.Coefficients[k]
			u := uy
			if c.Name != InterceptName {
				u = uy / math.Ldexp(1, exp[c.Name])
			}
			if g.Name != c.Name || relErr(g.Estimate/u, c.Estimate) > 1e-10 || relErr(g.StdError/u, c.StdError) > 1e-10 || relErr(g.T, c.T) > 1e-10 {
				t.Errorf("%s: coefficient %+v, unscaled %+v times %g", label, g, c, u)
			}
		}
		if relErr(rg.Sigma/uy, rr.Sigma) > tol || relErr(rg.R2, rr.R2) > tol {
			t.Errorf("%s: σ %g, R² %g; unscaled %g, %g", label, rg.Sigma, rg.R2, rr.Sigma, rr.R2)
		}
		for k, a := range rr.Attribution {
			g := rg.Attribution[k]
			uj := math.Ldexp(1, exp[a.Name])
			if g.Name != a.Name || g.Inflated != a.Inflated || g.Dominant != a.Dominant ||
				relErr(g.VariationSeverity, a.VariationSeverity) > 1e-10 || relErr(g.FitSeverity, a.FitSeverity) > 1e-10 ||
				relErr(g.RedundancySeverity, a.RedundancySeverity) > 1e-10 ||
				!sameOrCapped(g.SST, a.SST*uj*uj, 1e-10) || !sameOrCapped(g.Variance, a.Variance*(uy/uj)*(uy/uj), 1e-10) {
				t.Errorf("%s: variance split %+v, unscaled %+v", label, g, a)
			}
		}
		if a := rr.Attribution; !slices.ContainsFunc(a, func(v VarianceSplit) bool { return v.VariationSeverity > 1 }) {
			t.Errorf("%s: no column varies too little against its reference SD: %+v", label, a)
		}
		// σ² of metered volume at 2^600 is about 1e365: beyond float64,
		// reported as the largest float64 with a note.
		if rg.Sigma2 != math.MaxFloat64 || !slices.ContainsFunc(got.Notes, func(n string) bool { return strings.Contains(n, "regression.sigma2") }) {
			t.Errorf("%s: σ² %g, notes %q: want the overflow capped and noted", label, rg.Sigma2, got.Notes)
		}
	}
}

// sameOrCapped reports whether got is want to tol relative, or the largest
// float64 where want overflowed.
func sameOrCapped(got, want, tol float64) bool {
	if math.IsInf(want, 1) {
		return got == math.MaxFloat64
	}
	return relErr(got, want) <= tol
}

// Exact dependencies built into the generated water table (by construction,
// see waterTable): each reported once, with its equation.
func TestExactDependencies(t *testing.T) {
	names, rows := waterTable(31, 2000)
	m, q := feedRows(names, rows, 500)
	cases := []struct {
		name    string
		cols    []string
		rank    int
		eqs     map[string]string             // dependent -> equation text
		coef    map[string]map[string]float64 // dependent -> term -> coefficient (by construction)
		icept   map[string]float64            // dependent -> intercept (by construction)
		defined []string                      // columns with a VIF
	}{
		{
			name: "sum, affine and constant",
			cols: []string{"temperature", "rainfall", "residential_connections", "commercial_connections",
				"total_connections", "pipe_age", "pressure_z1", "pressure_z2", "pressure_z3"},
			rank: 7,
			eqs: map[string]string{
				"total_connections": "total_connections = 1·residential_connections + 1·commercial_connections + 0",
				"pressure_z2":       "pressure_z2 = -0.75·pipe_age + 2.5·pressure_z1 + 3",
				"pressure_z3":       "pressure_z3 = 52.3",
			},
			coef: map[string]map[string]float64{
				"total_connections": {"residential_connections": 1, "commercial_connections": 1},
				"pressure_z2":       {"pressure_z1": 2.5, "pipe_age": -0.75},
				"pressure_z3":       {},
			},
			icept:   map[string]float64{"total_connections": 0, "pressure_z2": 3, "pressure_z3": 52.3},
			defined: []string{"temperature", "rainfall"},
		},
		{
			name: "full set of dummies beside the intercept",
			cols: []string{"temperature", "rainfall", "zone_a", "zone_b", "zone_c", "zone_d"},
			rank: 6,
			eqs: map[string]string{
				"zone_d": "zone_d = -1·zone_a - 1·zone_b - 1·zone_c + 1",
			},
			coef:    map[string]map[string]float64{"zone_d": {"zone_a": -1, "zone_b": -1, "zone_c": -1}},
			icept:   map[string]float64{"zone_d": 1},
			defined: []string{"temperature", "rainfall"},
		},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			qr, cp := analyzeBoth(t, m, q, Options{Columns: tc.cols})
			for _, rep := range []*Report{qr, cp} {
				if rep.Rank != tc.rank {
					t.Errorf("%s path: rank %d, want %d", rep.Path, rep.Rank, tc.rank)
				}
				found := map[string]bool{}
				for _, dep := range rep.Dependencies {
					if dep.Kind != KindExact {
						continue
					}
					want, ok := tc.eqs[dep.Dependent]
					if !ok {
						t.Errorf("%s path: unexpected dependency %q", rep.Path, dep.Equation)
						continue
					}
					found[dep.Dependent] = true
					if dep.Equation != want {
						t.Errorf("%s path: equation %q, want %q", rep.Path, dep.Equation, want)
					}
					wc := tc.coef[dep.Dependent]
					if len(dep.Coefficients) != len(wc) {
						t.Errorf("%s path: %s: coefficients %v, want %v", rep.Path, dep.Dependent, dep.Coefficients, wc)
					}
					for n, w := range wc {
						if math.Abs(dep.Coefficients[n]-w) > 1e-9*math.Max(1, math.Abs(w)) {
							t.Errorf("%s path: %s: coefficient of %s %.15g, want %g", rep.Path, dep.Dependent, n, dep.Coefficients[n], w)
						}
					}
					if dep.Intercept == nil || math.Abs(*dep.Intercept-tc.icept[dep.Dependent]) > 1e-7 {
						t.Errorf("%s path: %s: intercept %v, want %g", rep.Path, dep.Dependent, dep.Intercept, tc.icept[dep.Dependent])
					}
				}
				for dep := range tc.eqs {
					if !found[dep] {
						t.Errorf("%s path: no exact dependency for %s (got %+v)", rep.Path, dep, rep.Dependencies)
					}
				}
				for _, c := range rep.Columns {
					if slices.Contains(tc.defined, c.Name) {
						if c.VIF == nil {
							t.Errorf("%s path: %s: VIF undefined (%s)", rep.Path, c.Name, c.Undefined)
						}
					} else if c.VIF != nil {
						t.Errorf("%s path: %s: VIF %g, want undefined", rep.Path, c.Name, *c.VIF)
					} else if c.Undefined != UndefinedExact && c.Undefined != UndefinedConstant {
						t.Errorf("%s path: %s: reason %q", rep.Path, c.Name, c.Undefined)
					}
				}
				if rep.ConditionNumber < 1e10 {
					t.Errorf("%s path: condition number %g for an exactly singular design", rep.Path, rep.ConditionNumber)
				}
			}
			// The defined VIFs equal those of the independent columns alone
			// (property: the span is the same).
			var indep []string
			for _, n := range tc.cols {
				if _, dep := tc.eqs[n]; !dep {
					indep = append(indep, n)
				}
			}
			alone, err := Analyze(m, q, Options{Columns: indep})
			if err != nil {
				t.Fatal(err)
			}
			for _, n := range tc.defined {
				a, b := *colByName(t, qr, n).VIF, *colByName(t, alone, n).VIF
				if relErr(a, b) > 1e-10 {
					t.Errorf("%s: VIF %.15g beside the dependency, %.15g without it", n, a, b)
				}
			}
		})
	}
}

// GVIF (Fox & Monette 1992): a group of one column has GVIF = VIF; a
// group's GVIF equals det(R11)·det(R22)/det(R) computed here from the
// report's correlation matrix with gonum.
func TestGVIF(t *testing.T) {
	names, rows := waterTable(41, 1500)
	m, q := feedRows(names, rows, 300)
	cols := []string{"temperature", "rainfall", "population_served", "residential_connections", "zone_a", "zone_b", "zone_c"}
	groups := map[string][]string{
		"weather": {"temperature"},
		"zone":    {"zone_a", "zone_b", "zone_c"},
		"size":    {"population_served", "residential_connections"},
	}
	qr, cp := analyzeBoth(t, m, q, Options{Columns: cols, Groups: groups})
	for _, rep := range []*Report{qr, cp} {
		if len(rep.GVIF) != 3 {
			t.Fatalf("%s path: %d groups", rep.Path, len(rep.GVIF))
		}
		for _, g := range rep.GVIF {
			if g.GVIF == nil {
				t.Fatalf("%s path: group %s undefined: %s", rep.Path, g.Name, g.Undefined)
			}
			want := detRatio(rep, g.Columns)
			if relErr(*g.GVIF, want) > 1e-10 {
				t.Errorf("%s path: group %s: GVIF %.15g, det ratio %.15g", rep.Path, g.Name, *g.GVIF, want)
			}
			if adj := math.Pow(*g.GVIF, 1/(2*float64(g.DF))); relErr(*g.GVIFAdjusted, adj) > 1e-14 {
				t.Errorf("%s path: group %s: adjusted %g, want %g", rep.Path, g.Name, *g.GVIFAdjusted, adj)
			}
			if g.Name == "weather" {
				v := *colByName(t, rep, "temperature").VIF
				if relErr(*g.GVIF, v) > 1e-12 {
					t.Errorf("%s path: one-column GVIF %.15g, VIF %.15g", rep.Path, *g.GVIF, v)
				}
			}
		}
	}
}

// detRatio computes det(R11)·det(R22)/det(R) from the report's correlation
// matrix.
func detRatio(rep *Report, group []string) float64 {
	var in, out []int
	for i, c := range rep.Columns {
		if slices.Contains(group, c.Name) {
			in = append(in, i)
		} else {
			out = append(out, i)
		}
	}
	det := func(idx []int) float64 {
		s := mat.NewSymDense(len(idx), nil)
		for a, i := range idx {
			for b, j := range idx {
				s.SetSym(a, b, rep.Correlation[i][j])
			}
		}
		return mat.Det(s)
	}
	all := append(append([]int(nil), in...), out...)
	return det(in) * det(out) / det(all)
}

// What-if (property): the VIFs after dropping a column equal a direct
// analysis without it.
func TestWhatIfMatchesRecomputation(t *testing.T) {
	names, rows := waterTable(51, 2500)
	m, q := feedRows(names, rows, 400)
	sets := [][]string{
		{"temperature", "rainfall", "population_served", "residential_connections", "commercial_connections", "pipe_age", "metered_volume", "billed_volume"},
		{"temperature", "residential_connections", "commercial_connections", "total_connections", "pressure_z1", "pressure_z3"},
	}
	for _, cols := range sets {
		qr, cp := analyzeBoth(t, m, q, Options{Columns: cols})
		for _, rep := range []*Report{qr, cp} {
			if len(rep.WhatIf) != len(cols) {
				t.Fatalf("%d what-ifs for %d columns", len(rep.WhatIf), len(cols))
			}
			var qq *stream.QR
			if rep.Path == PathQR {
				qq = q
			}
			for _, w := range rep.WhatIf {
				direct, err := Analyze(m, qq, Options{Columns: without2(cols, w.Dropped)})
				if err != nil {
					t.Fatal(err)
				}
				for _, c := range w.Columns {
					dc := colByName(t, direct, c.Name)
					if (c.VIF == nil) != (dc.VIF == nil) || c.Undefined != dc.Undefined {
						t.Errorf("%s path: drop %s: %s: %v (%s) vs direct %v (%s)", rep.Path, w.Dropped, c.Name, c.VIF, c.Undefined, dc.VIF, dc.Undefined)
						continue
					}
					if c.VIF != nil && relErr(*c.VIF, *dc.VIF) > 1e-9 {
						t.Errorf("%s path: drop %s: %s: VIF %.15g, direct %.15g", rep.Path, w.Dropped, c.Name, *c.VIF, *dc.VIF)
					}
				}
			}
		}
	}
}

func without2(cols []string, drop string) []string {
	var out []string
	for _, c := range cols {
		if c != drop {
			out = append(out, c)
		}
	}
	return out
}

// Suggested drops (property): after them every VIF is defined and below the
// limit, each suggestion is needed, and the caution is attached.
func TestSuggestedDrops(t *testing.T) {
	names, rows := waterTable(61, 2500)
	m, q := feedRows(names, rows, 400)
	cols := []string{"temperature", "rainfall", "population_served", "residential_connections", "commercial_connections",
		"total_connections", "pipe_age", "pressure_z1", "pressure_z3", "metered_volume", "billed_volume"}
	qr, cp := analyzeBoth(t, m, q, Options{Columns: cols})
	for _, rep := range []*Report{qr, cp} {
		if len(rep.SuggestedDrops) == 0 || rep.DropCaution == "" || !strings.Contains(rep.DropCaution, "omitted-variable bias") {
			t.Fatalf("%s path: drops %v, caution %q", rep.Path, rep.SuggestedDrops, rep.DropCaution)
		}
		for _, must := range []string{"pressure_z3"} {
			if !slices.Contains(rep.SuggestedDrops, must) {
				t.Errorf("%s path: drops %v lack %s", rep.Path, rep.SuggestedDrops, must)
			}
		}
		rest := cols
		for _, d := range rep.SuggestedDrops {
			rest = without2(rest, d)
		}
		after, err := Analyze(m, q, Options{Columns: rest})
		if err != nil {
			t.Fatal(err)
		}
		for _, c := range after.Columns {
			if c.VIF == nil || *c.VIF >= DefaultVIFLimit {
				t.Errorf("%s path: after dropping %v, %s has VIF %v (%s)", rep.Path, rep.SuggestedDrops, c.Name, c.VIF, c.Undefined)
			}
		}
		// Every suggestion is needed: putting any one back breaks the
		// limit or leaves a VIF undefined.
		for _, d := range rep.SuggestedDrops {
			back, err := Analyze(m, q, Options{Columns: append(append([]string(nil), rest...), d)})
			if err != nil {
				t.Fatal(err)
			}
			ok := true
			for _, c := range back.Columns {
				ok = ok && c.VIF != nil && *c.VIF < DefaultVIFLimit
			}
			if ok {
				t.Errorf("%s path: drop %s of %v is not needed", rep.Path, d, rep.SuggestedDrops)
			}
		}
		t.Logf("%s path: suggested drops %v", rep.Path, rep.SuggestedDrops)
	}
}

// Constant and near-constant columns: VIF null with the reason, never NaN,
// and a constant reported as the equation "col = value".
func TestConstantColumns(t *testing.T) {
	names, rows := waterTable(71, 500)
	// A near-constant column: 1e6 plus variation at the level of its last
	// bits (spread about 10 ulp of its magnitude).
	names = append(append([]string(nil), names...), "pressure_z5")
	r := rand.New(rand.NewPCG(72, 73))
	for i := range rows {
		rows[i] = append(rows[i], 1e6+float64(r.IntN(10))*0x1p-32)
	}
	m, q := feedRows(names, rows, 128)
	qr, cp := analyzeBoth(t, m, q, Options{Columns: []string{"temperature", "pressure_z3", "rainfall", "pressure_z5"}, Target: "metered_volume"})
	for _, rep := range []*Report{qr, cp} {
		c := colByName(t, rep, "pressure_z3")
		if !c.Constant || c.VIF != nil || c.Undefined != UndefinedConstant {
			t.Errorf("%s path: pressure_z3: %+v", rep.Path, c)
		}
		nc := colByName(t, rep, "pressure_z5")
		if !nc.NearConstant || nc.VIF != nil || nc.Undefined != UndefinedNearConstant {
			t.Errorf("%s path: pressure_z5: %+v", rep.Path, nc)
		}
		if v := colByName(t, rep, "temperature").VIF; v == nil {
			t.Errorf("%s path: temperature VIF undefined", rep.Path)
		}
		var eq []string
		for _, d := range rep.Dependencies {
			eq = append(eq, d.Equation)
		}
		if !slices.Contains(eq, "pressure_z3 = 52.3") {
			t.Errorf("%s path: dependencies %q", rep.Path, eq)
		}
		if rep.Rank != 3 {
			t.Errorf("%s path: rank %d, want 3", rep.Path, rep.Rank)
		}
		if !slices.Contains(rep.Regression.NotEstimable, "pressure_z3") {
			t.Errorf("%s path: not estimable %v", rep.Path, rep.Regression.NotEstimable)
		}
		i := slices.Index(waterNames(rep), "pressure_z3")
		for j, v := range rep.Correlation[i] {
			if want := boolFloat(i == j); v != want {
				t.Errorf("%s path: correlation[%d][%d] = %g, want %g", rep.Path, i, j, v, want)
			}
		}
	}
}

func waterNames(rep *Report) []string {
	var out []string
	for _, c := range rep.Columns {
		out = append(out, c.Name)
	}
	return out
}

func boolFloat(b bool) float64 {
	if b {
		return 1
	}
	return 0
}

// Bad data and options are errors naming the column, never panics.
func TestErrors(t *testing.T) {
	names := []string{"temperature", "rainfall", "metered_volume"}
	full := func(rows [][]float64, nulls [][]bool) *stream.Moments {
		m := stream.NewMoments(names)
		b := stream.NewBlock(len(names), 16, false)
		for i, r := range rows {
			v, nl := b.AppendRow()
			copy(v, r)
			if nulls != nil {
				copy(nl, nulls[i])
			}
		}
		if b.Rows > 0 {
			m.Add(b)
		}
		return m
	}
	good := full([][]float64{{20, 1, 300}, {22, 0, 310}, {19, 3, 290}, {25, 0, 350}, {18, 2, 280}}, nil)
	cases := []struct {
		name string
		m    *stream.Moments
		opt  Options
		is   error
		has  string
	}{
		{"unknown column", good, Options{Columns: []string{"temperature", "humidity"}}, ErrUnknownColumn, `"humidity"`},
		{"unknown target", good, Options{Target: "demand"}, ErrUnknownColumn, `"demand"`},
		{"target as regressor", good, Options{Target: "rainfall", Columns: []string{"rainfall"}}, ErrBadOptions, `"rainfall"`},
		{"group column", good, Options{Groups: map[string][]string{"weather": {"temperature", "wind"}}}, ErrUnknownColumn, `"wind"`},
		{"zero rows", full(nil, nil), Options{}, ErrNoRows, "temperature"},
		{"all rows dropped", full([][]float64{{1, math.NaN(), 2}, {3, 0, 4}}, [][]bool{{false, false, false}, {false, true, false}}), Options{}, ErrAllDropped, `"rainfall"`},
		{"too few rows", full([][]float64{{20, 1, 300}, {22, 0, 310}, {19, 3, math.Inf(1)}}, nil), Options{}, ErrTooFewRows, `"metered_volume"`},
		{"too few rows with target", full([][]float64{{20, 1, 300}, {22, 0, 310}, {19, 3, 290}}, nil), Options{Target: "metered_volume"}, ErrTooFewRows, "need at least 4"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			rep, err := Analyze(tc.m, nil, tc.opt)
			if err == nil {
				t.Fatalf("no error; report %+v", rep)
			}
			if !errors.Is(err, tc.is) || !strings.Contains(err.Error(), tc.has) {
				t.Errorf("error %q: want %v containing %s", err, tc.is, tc.has)
			}
		})
	}
}

// On well-conditioned data both paths agree and the cross-product path
// declares itself trustworthy.
func TestPathsAgreeWhenTrustworthy(t *testing.T) {
	names, rows := waterTable(91, 2000)
	m, q := feedRows(names, rows, 333)
	cols := []string{"temperature", "rainfall", "population_served", "commercial_connections", "pipe_age", "pressure_z1"}
	qr, cp := analyzeBoth(t, m, q, Options{Columns: cols, Target: "metered_volume"})
	if !cp.Trust.Trustworthy || !qr.Trust.Trustworthy {
		t.Fatalf("trust: cross-product %+v, QR %+v", cp.Trust, qr.Trust)
	}
	compareReports(t, "paths", qr, cp, 1e-9)
	if qr.Path != PathQR || cp.Path != PathCrossProduct {
		t.Errorf("paths %q %q", qr.Path, cp.Path)
	}
}

// Principal components and BKW proportions (properties of the
// decompositions): eigenvalues descending and summing to the number of
// varying columns (the trace of a correlation matrix), unit loadings,
// cumulative share ending at 1, proportions summing to 1 per variable,
// condition indices ascending from 1.
func TestDecompositionProperties(t *testing.T) {
	names, rows := waterTable(101, 1200)
	m, q := feedRows(names, rows, 256)
	cols := []string{"temperature", "rainfall", "population_served", "residential_connections", "pipe_age", "pressure_z3", "metered_volume", "billed_volume"}
	qr, cp := analyzeBoth(t, m, q, Options{Columns: cols})
	for _, rep := range []*Report{qr, cp} {
		if len(rep.Eigenvalues) != len(cols)-1 || len(rep.EigenNames) != len(cols)-1 {
			t.Fatalf("%s path: %d eigenvalues for %d varying columns", rep.Path, len(rep.Eigenvalues), len(cols)-1)
		}
		sum := 0.0
		for i, l := range rep.Eigenvalues {
			sum += l
			if i > 0 && l > rep.Eigenvalues[i-1] {
				t.Errorf("%s path: eigenvalues not descending: %v", rep.Path, rep.Eigenvalues)
			}
		}
		if math.Abs(sum-float64(len(cols)-1)) > 1e-12 {
			t.Errorf("%s path: eigenvalues sum to %.15g", rep.Path, sum)
		}
		for _, c := range rep.Components {
			n2 := 0.0
			for _, v := range c.Loadings {
				n2 += v * v
			}
			if math.Abs(n2-1) > 1e-12 {
				t.Errorf("%s path: loading norm² %g", rep.Path, n2)
			}
		}
		if last := rep.Components[len(rep.Components)-1].Cumulative; math.Abs(last-1) > 1e-12 {
			t.Errorf("%s path: cumulative share ends at %g", rep.Path, last)
		}
		for _, set := range []struct {
			ci    []float64
			props [][]float64
			names []string
		}{{rep.ConditionIndices, rep.Proportions, rep.ProportionNames}, {rep.CenteredConditionIndices, rep.CenteredProportions, rep.CenteredProportionNames}} {
			if math.Abs(set.ci[0]-1) > 1e-14 {
				t.Errorf("%s path: first condition index %g", rep.Path, set.ci[0])
			}
			for k := 1; k < len(set.ci); k++ {
				if set.ci[k] < set.ci[k-1] {
					t.Errorf("%s path: condition indices not ascending: %v", rep.Path, set.ci)
				}
			}
			for j := range set.names {
				s := 0.0
				for k := range set.props {
					s += set.props[k][j]
				}
				if math.Abs(s-1) > 1e-12 {
					t.Errorf("%s path: proportions of %s sum to %g", rep.Path, set.names[j], s)
				}
			}
		}
	}
}

// Near dependency: billed_volume is a near copy of metered_volume (by
// construction in waterTable), so a condition index above 30 has both
// among its proportions above 0.5 (BKW reading rule).
func TestNearDependency(t *testing.T) {
	names, rows := waterTable(111, 1500)
	m, q := feedRows(names, rows, 256)
	qr, cp := analyzeBoth(t, m, q, Options{Columns: []string{"rainfall", "pressure_z1", "metered_volume", "billed_volume"}})
	for _, rep := range []*Report{qr, cp} {
		found := false
		for _, d := range rep.Dependencies {
			if d.Kind == KindNear && slices.Contains(d.Columns, "metered_volume") && slices.Contains(d.Columns, "billed_volume") {
				found = true
				if d.ConditionIndex <= DefaultCondLimit || d.Proportions["billed_volume"] <= 0.5 {
					t.Errorf("%s path: %+v", rep.Path, d)
				}
			}
		}
		if !found {
			t.Errorf("%s path: no near dependency of the volumes in %+v (indices %v)", rep.Path, rep.Dependencies, rep.ConditionIndices)
		}
		if v := colByName(t, rep, "billed_volume").VIF; v == nil || *v < 100 {
			t.Errorf("%s path: billed_volume VIF %v", rep.Path, v)
		}
	}
}

// Weights (property): integer weights give the coefficients, VIFs and
// residual sum of squares of the rows repeated that many times.
func TestWeightsAsRepeats(t *testing.T) {
	names, rows := waterTable(121, 400)
	r := rand.New(rand.NewPCG(122, 123))
	mw, qw := stream.NewMoments(names), stream.NewQR(names)
	bw := stream.NewBlock(len(names), 64, true)
	var rep [][]float64
	for _, row := range rows {
		w := 1 + r.IntN(3)
		v, _ := bw.AppendRow()
		copy(v, row)
		bw.SetWeight(float64(w))
		if bw.Full() {
			mw.Add(bw)
			qw.Add(bw)
			bw.Reset()
		}
		for range w {
			rep = append(rep, row)
		}
	}
	mw.Add(bw)
	qw.Add(bw)
	mr, qrr := feedRows(names, rep, 64)
	opt := Options{Columns: []string{"temperature", "rainfall", "population_served", "pipe_age"}, Target: "metered_volume"}
	a, ac := analyzeBoth(t, mw, qw, opt)
	b, bc := analyzeBoth(t, mr, qrr, opt)
	for _, pair := range [][2]*Report{{a, b}, {ac, bc}} {
		x, y := pair[0], pair[1]
		for i := range x.Columns {
			if relErr(*x.Columns[i].VIF, *y.Columns[i].VIF) > 1e-10 {
				t.Errorf("%s path: %s: weighted VIF %.15g, repeated %.15g", x.Path, x.Columns[i].Name, *x.Columns[i].VIF, *y.Columns[i].VIF)
			}
		}
		for i, c := range x.Regression.Coefficients {
			if relErr(c.Estimate, y.Regression.Coefficients[i].Estimate) > 1e-10 {
				t.Errorf("%s path: %s: %.15g vs %.15g", x.Path, c.Name, c.Estimate, y.Regression.Coefficients[i].Estimate)
			}
		}
		ssx := x.Regression.Sigma2 * float64(x.Regression.DF)
		ssy := y.Regression.Sigma2 * float64(y.Regression.DF)
		if relErr(ssx, ssy) > 1e-10 {
			t.Errorf("%s path: residual SS %.15g vs %.15g", x.Path, ssx, ssy)
		}
	}
}

// Degenerate inputs are reported, not panics or NaN (JSON marshals): every
// regressor constant, a duplicated column, a target that is a constant.
func TestDegenerateInputs(t *testing.T) {
	names := []string{"pressure_z3", "pressure_z4", "temperature", "temperature_copy", "metered_volume", "stuck_meter"}
	r := rand.New(rand.NewPCG(131, 132))
	var rows [][]float64
	for i := 0; i < 50; i++ {
		temp := 15 + 8*r.NormFloat64()
		rows = append(rows, []float64{52.3, -1.5, temp, temp, 300*temp + 100*r.NormFloat64(), 7})
	}
	m, q := feedRows(names, rows, 16)
	cases := []struct {
		name string
		opt  Options
		eqs  []string
		note string
	}{
		{"all constant", Options{Columns: []string{"pressure_z3", "pressure_z4"}, Target: "metered_volume"},
			[]string{"pressure_z3 = 52.3", "pressure_z4 = -1.5"}, ""},
		{"duplicate", Options{Columns: []string{"temperature", "temperature_copy"}, Target: "metered_volume"},
			[]string{"temperature_copy = 1·temperature + 0"}, ""},
		{"constant target", Options{Columns: []string{"temperature", "pressure_z3"}, Target: "stuck_meter"},
			[]string{"pressure_z3 = 52.3"}, "does not vary"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			qr, cp := analyzeBoth(t, m, q, tc.opt)
			for _, rep := range []*Report{qr, cp} {
				var eqs []string
				for _, d := range rep.Dependencies {
					if d.Kind == KindExact {
						eqs = append(eqs, d.Equation)
					}
				}
				if !slices.Equal(eqs, tc.eqs) {
					t.Errorf("%s path: equations %q, want %q", rep.Path, eqs, tc.eqs)
				}
				if tc.note != "" && (len(rep.Notes) == 0 || !strings.Contains(rep.Notes[0], tc.note)) {
					t.Errorf("%s path: notes %q", rep.Path, rep.Notes)
				}
				if tc.note == "" && rep.Regression == nil {
					t.Errorf("%s path: no regression", rep.Path)
				}
			}
		})
	}
}
