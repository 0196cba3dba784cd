package diagnostics

import (
	"math"
	"math/rand/v2"
	"slices"
	"sort"
	"testing"

	"plumb/stream"
)

// goldenDrivers is golden_drivers.json, written by
// testdata/ref/drivers_statsmodels.py (statsmodels OLS of each regressor
// on the others, Pratt's shares β_k·r_jk/R²_j).
type goldenDrivers struct {
	Versions map[string]string `json:"versions"`
	Datasets map[string]struct {
		Rows       int      `json:"rows"`
		Regressors []string `json:"regressors"`
		Columns    map[string]struct {
			R2     float64            `json:"r2"`
			Shares map[string]float64 `json:"shares"`
		} `json:"columns"`
	} `json:"datasets"`
}

// Tolerance of the drivers' reference comparison: relative, or absolute
// for shares near 0, whichever is looser (the acceptance level for
// reference libraries).
const refDriverTol = 1e-9

// collinFor runs Analyze's preparation and collinearity core and returns
// the analysis, so that a test can read every partner's share (the report
// keeps only the largest).
func collinFor(t *testing.T, m *stream.Moments, q QRFactor, opt Options) *collin {
	t.Helper()
	opt = withDefaults(opt)
	idx, names, k, err := resolve(m, opt)
	if err != nil {
		t.Fatal(err)
	}
	var d *design
	if isNil(q) {
		d = designFromMoments(m, idx, names, k, opt.Target != "")
	} else {
		d = designFromQR(m, q, idx, names, k, opt.Target != "")
	}
	regs := make([]int, d.k)
	for j := range regs {
		regs[j] = j
	}
	return analyzeCols(d, regs, d.flo.d != nil)
}

func closeTo(got, want, tol float64) bool {
	return math.Abs(got-want) <= tol || relDiff(got, want) <= tol
}

// Drivers against statsmodels (golden_drivers.json, drivers_statsmodels.py
// in testdata/ref): every partner's share of R²_j on Longley and the two
// generated district sets, on the cross-product, QR and precise QR paths,
// to 1e-9; and the report keeps exactly the partners with |share| ≥ 0.05
// (at most five), largest share first.
func TestDriversReference(t *testing.T) {
	var specs map[string]refSpec
	readJSON(t, "datasets.json", &specs)
	var g goldenDrivers
	readJSON(t, "golden_drivers.json", &g)
	t.Logf("golden_drivers.json: numpy %s, statsmodels %s", g.Versions["numpy"], g.Versions["statsmodels"])
	names := make([]string, 0, len(specs))
	for n := range specs {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, ds := range names {
		spec := specs[ds]
		gd, ok := g.Datasets[ds]
		if !ok {
			t.Fatalf("golden_drivers.json has no dataset %q", ds)
		}
		header, rows := readRefCSV(t, spec.CSV)
		if len(rows) != gd.Rows {
			t.Fatalf("%s: %d rows in CSV, golden says %d", ds, len(rows), gd.Rows)
		}
		m, q := accumulate(t, header, rows, spec.Regressors, 7)
		x := stream.NewQRExtended(spec.Regressors)
		idx := make([]int, len(spec.Regressors))
		for k, n := range spec.Regressors {
			idx[k] = slices.Index(header, n)
		}
		sub := make([][]float64, len(rows))
		for i, r := range rows {
			sub[i] = make([]float64, len(idx))
			for k, j := range idx {
				sub[i][k] = r[j]
			}
		}
		feedInto(sub, 7, x)
		opt := Options{Columns: spec.Regressors}
		for _, f := range []struct {
			path string
			q    QRFactor
		}{{PathCrossProduct, nil}, {PathQR, q}, {PathQRPrecise, x}} {
			t.Run(ds+"/"+f.path, func(t *testing.T) {
				rep, err := Analyze(m, f.q, opt)
				if err != nil {
					t.Fatal(err)
				}
				if rep.Path != f.path {
					t.Fatalf("path %q, want %q", rep.Path, f.path)
				}
				c := collinFor(t, m, f.q, opt)
				var md maxDiff
				for j, name := range spec.Regressors {
					want := gd.Columns[name]
					all := c.pratt(j)
					if len(all) != len(want.Shares) {
						t.Fatalf("%s: %d partners, statsmodels %d", name, len(all), len(want.Shares))
					}
					for _, dr := range all {
						w, ok := want.Shares[dr.Column]
						if !ok {
							t.Fatalf("%s: partner %q not in golden", name, dr.Column)
						}
						md.note(math.Min(relDiff(dr.Share, w), math.Abs(dr.Share-w)), name+"/"+dr.Column)
						if !closeTo(dr.Share, w, refDriverTol) {
							t.Errorf("%s: share of %s = %.17g, statsmodels %.17g", name, dr.Column, dr.Share, w)
						}
					}
					cr, _ := rep.Column(name)
					if cr.R2 == nil || !closeTo(*cr.R2, want.R2, refDriverTol) {
						t.Errorf("%s: R² %v, statsmodels %.17g", name, cr.R2, want.R2)
					}
					// The report keeps the partners with |share| ≥ 0.05,
					// at most five by |share|, ordered by share.
					var exp []Driver
					for col, s := range want.Shares {
						if math.Abs(s) >= 0.05 {
							exp = append(exp, Driver{col, s})
						}
					}
					sort.Slice(exp, func(a, b int) bool { return math.Abs(exp[a].Share) > math.Abs(exp[b].Share) })
					exp = exp[:min(len(exp), 5)]
					sort.Slice(exp, func(a, b int) bool { return exp[a].Share > exp[b].Share })
					if len(cr.Drivers) != len(exp) {
						t.Errorf("%s: drivers %v, want %v", name, cr.Drivers, exp)
						continue
					}
					for i := range exp {
						if cr.Drivers[i].Column != exp[i].Column || !closeTo(cr.Drivers[i].Share, exp[i].Share, refDriverTol) {
							t.Errorf("%s: driver %d = %+v, want %+v", name, i, cr.Drivers[i], exp[i])
						}
					}
				}
				t.Logf("shares vs statsmodels: max diff %.3g (%s)", md.rel, md.what)
			})
		}
	}
}

// Property: over all partners the shares sum to 1 (Σ_k β_k·r_jk = R²_j,
// with R²_j = 1 − 1/VIF_j computed apart), on random designs with random
// correlation structure, on both paths; and a column with an exact
// dependency or a constant column has no drivers.
func TestDriversSumToOne(t *testing.T) {
	r := rand.New(rand.NewPCG(301, 302))
	names := []string{"temperature", "rainfall", "population_served", "residential_connections", "pipe_age", "pressure_z1", "metered_volume"}
	for trial := 0; trial < 30; trial++ {
		p := len(names)
		mix := make([][]float64, p)
		for i := range mix {
			mix[i] = make([]float64, p)
			for k := range mix[i] {
				if k == i || r.Float64() < 0.4 {
					mix[i][k] = r.NormFloat64()
				}
			}
		}
		var rows [][]float64
		for n := 0; n < 200; n++ {
			z := make([]float64, p)
			for i := range z {
				z[i] = r.NormFloat64()
			}
			row := make([]float64, p)
			for i := range row {
				for k := range z {
					row[i] += mix[i][k] * z[k]
				}
				row[i] = 1000*float64(i) + math.Pow(10, float64(i%4))*row[i]
			}
			rows = append(rows, row)
		}
		m, q := feedRows(names, rows, 64)
		for _, f := range []QRFactor{nil, q} {
			c := collinFor(t, m, f, Options{})
			for j := range names {
				v, why := c.vifOf(j)
				all := c.pratt(j)
				if why != "" || 1-1/v < driverMinR2 {
					if all != nil {
						t.Errorf("trial %d %s: drivers %v without a defined R² (%s)", trial, names[j], all, why)
					}
					continue
				}
				sum := 0.0
				for _, dr := range all {
					sum += dr.Share
				}
				// Rounding: about eps·VIF relative in R²_j and the β.
				if tol := 1e-12 * v / (1 - 1/v); math.Abs(sum-1) > tol {
					t.Errorf("trial %d %s: shares sum to %.15g (VIF %.4g), want 1 ± %.2g", trial, names[j], sum, v, tol)
				}
			}
		}
	}
	// Exact dependency and constant column: no drivers for their columns,
	// and the dependent column is no partner of anyone.
	wn, wrows := waterTable(303, 400)
	m, q := feedRows(wn, wrows, 100)
	cols := []string{"temperature", "population_served", "residential_connections", "commercial_connections", "total_connections", "pressure_z3", "metered_volume", "billed_volume"}
	for _, f := range []QRFactor{nil, q} {
		rep, err := Analyze(m, f, Options{Columns: cols})
		if err != nil {
			t.Fatal(err)
		}
		for _, cr := range rep.Columns {
			if cr.VIF == nil && len(cr.Drivers) > 0 {
				t.Errorf("%s path: %s (%s) has drivers %v", rep.Path, cr.Name, cr.Undefined, cr.Drivers)
			}
			for _, dr := range cr.Drivers {
				if dr.Column == "total_connections" || dr.Column == "pressure_z3" {
					t.Errorf("%s path: %s driven by %s", rep.Path, cr.Name, dr.Column)
				}
			}
		}
		mv, _ := rep.Column("metered_volume")
		if len(mv.Drivers) == 0 || mv.Drivers[0].Column != "billed_volume" || mv.Drivers[0].Share < 0.9 {
			t.Errorf("%s path: metered_volume drivers %v, want billed_volume first with most of R²", rep.Path, mv.Drivers)
		}
	}
}
