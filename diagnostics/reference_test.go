package diagnostics

import (
	"encoding/csv"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"testing"

	"plumb/stream"
)

// The reference files live in testdata/ref at the module root; README.md there
// names each file, the generating scripts and the library versions.
var refDir = filepath.Join("..", "testdata", "ref")

// Tolerances of the reference comparison (the acceptance levels for reference libraries).
const (
	refRelTol     = 1e-9  // VIFs, eigenvalues, condition indices: relative
	refPropRelTol = 1e-9  // proportions: relative ...
	refPropAbsTol = 1e-10 // ... or absolute, whichever is looser (proportions near 0)
)

type refSpec struct {
	CSV        string   `json:"csv"`
	Response   string   `json:"response"`
	Regressors []string `json:"regressors"`
}

// goldenCar is golden_car.json, written by testdata/ref/vif_car.R (R lm +
// car::vif).
type goldenCar struct {
	Versions map[string]string `json:"versions"`
	Datasets map[string]struct {
		Rows int                `json:"rows"`
		VIF  map[string]float64 `json:"vif"`
	} `json:"datasets"`
}

type goldenBKW struct {
	Names            []string    `json:"names"`
	SingularValues   []float64   `json:"singular_values"`
	ConditionIndices []float64   `json:"condition_indices"` // ascending
	ConditionNumber  float64     `json:"condition_number"`
	Proportions      [][]float64 `json:"proportions"` // [dimension][name], dimensions by ascending index
}

// goldenNumpy is golden_numpy.json, written by testdata/ref/bkw_numpy.py
// (numpy.linalg.svd, statsmodels variance_inflation_factor).
type goldenNumpy struct {
	Versions map[string]string `json:"versions"`
	Datasets map[string]struct {
		Rows                   int                `json:"rows"`
		Regressors             []string           `json:"regressors"`
		VIFStatsmodels         map[string]float64 `json:"vif_statsmodels"`
		VIFInverseCorrelation  map[string]float64 `json:"vif_inverse_correlation"`
		CorrelationEigenvalues []float64          `json:"correlation_eigenvalues"` // descending
		Uncentered             goldenBKW          `json:"uncentered"`
		Centered               goldenBKW          `json:"centered"`
	} `json:"datasets"`
}

func readJSON(t *testing.T, name string, v any) {
	t.Helper()
	b, err := os.ReadFile(filepath.Join(refDir, name))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, v); err != nil {
		t.Fatalf("%s: %v", name, err)
	}
}

// readRefCSV reads a reference CSV (header line, then numbers written with
// round-trip precision) into its header and rows.
func readRefCSV(t *testing.T, name string) ([]string, [][]float64) {
	t.Helper()
	f, err := os.Open(filepath.Join(refDir, name))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatalf("%s: %v", name, err)
	}
	if len(recs) < 2 {
		t.Fatalf("%s: no data rows", name)
	}
	rows := make([][]float64, len(recs)-1)
	for i, r := range recs[1:] {
		rows[i] = make([]float64, len(r))
		for j, s := range r {
			v, err := strconv.ParseFloat(s, 64)
			if err != nil {
				t.Fatalf("%s line %d column %q: %v", name, i+2, recs[0][j], err)
			}
			rows[i][j] = v
		}
	}
	return recs[0], rows
}

// accumulate feeds the named columns of rows through stream blocks of
// blockRows rows into a Moments and a QR accumulator.
func accumulate(t *testing.T, header []string, rows [][]float64, names []string, blockRows int) (*stream.Moments, *stream.QR) {
	t.Helper()
	idx := make([]int, len(names))
	for k, name := range names {
		idx[k] = -1
		for j, h := range header {
			if h == name {
				idx[k] = j
			}
		}
		if idx[k] < 0 {
			t.Fatalf("column %q not in CSV header %v", name, header)
		}
	}
	m := stream.NewMoments(names)
	q := stream.NewQR(names)
	b := stream.NewBlock(len(names), blockRows, false)
	flush := func() {
		if b.Rows > 0 {
			m.Add(b)
			q.Add(b)
			b.Reset()
		}
	}
	for _, r := range rows {
		vals, _ := b.AppendRow()
		for k, j := range idx {
			vals[k] = r[j]
		}
		if b.Full() {
			flush()
		}
	}
	flush()
	return m, q
}

func relDiff(got, want float64) float64 {
	if got == want {
		return 0
	}
	return math.Abs(got-want) / math.Abs(want)
}

// maxDiff tracks the largest relative difference seen in one comparison.
type maxDiff struct {
	rel  float64
	what string
}

func (d *maxDiff) note(rel float64, what string) {
	if rel > d.rel || math.IsNaN(rel) {
		d.rel, d.what = rel, what
	}
}

// sortedBKW returns plumb's condition indices ascending with the proportion
// rows permuted alongside, so rows match the golden files' order.
func sortedBKW(indices []float64, props [][]float64) ([]float64, [][]float64) {
	perm := make([]int, len(indices))
	for i := range perm {
		perm[i] = i
	}
	sort.SliceStable(perm, func(a, b int) bool { return indices[perm[a]] < indices[perm[b]] })
	ci := make([]float64, len(perm))
	var pr [][]float64
	if props != nil {
		pr = make([][]float64, len(perm))
	}
	for k, i := range perm {
		ci[k] = indices[i]
		if props != nil && i < len(props) {
			pr[k] = props[i]
		}
	}
	return ci, pr
}

// compareBKW checks condition indices and proportions against one golden
// convention. names are plumb's proportion column names.
func compareBKW(t *testing.T, label string, want goldenBKW, condNumber float64, indices []float64, names []string, props [][]float64) {
	t.Helper()
	var ciDiff, prRel maxDiff
	var prAbs float64
	ci, pr := sortedBKW(indices, props)
	if len(ci) != len(want.ConditionIndices) {
		t.Errorf("%s: %d condition indices, want %d", label, len(ci), len(want.ConditionIndices))
		return
	}
	for k, w := range want.ConditionIndices {
		d := relDiff(ci[k], w)
		ciDiff.note(d, fmt.Sprintf("index %d", k))
		if !(d <= refRelTol) {
			t.Errorf("%s: condition index %d (ascending) = %.17g, want %.17g (rel diff %.3g)", label, k, ci[k], w, d)
		}
	}
	if d := relDiff(condNumber, want.ConditionNumber); !(d <= refRelTol) {
		t.Errorf("%s: condition number = %.17g, want %.17g (rel diff %.3g)", label, condNumber, want.ConditionNumber, d)
	}
	col := make(map[string]int, len(names))
	for j, n := range names {
		col[n] = j
	}
	for _, n := range want.Names {
		if _, ok := col[n]; !ok {
			t.Errorf("%s: proportions have no column %q (plumb names %v)", label, n, names)
			return
		}
	}
	if len(pr) != len(want.Proportions) {
		t.Errorf("%s: %d proportion rows, want %d", label, len(pr), len(want.Proportions))
		return
	}
	for k, wrow := range want.Proportions {
		for jw, n := range want.Names {
			j := col[n]
			if j >= len(pr[k]) {
				t.Errorf("%s: proportion row %d has %d entries, want column %q at %d", label, k, len(pr[k]), n, j)
				continue
			}
			got, w := pr[k][j], wrow[jw]
			abs := math.Abs(got - w)
			rel := relDiff(got, w)
			if abs > prAbs {
				prAbs = abs
			}
			prRel.note(rel, fmt.Sprintf("dim %d %s", k, n))
			if !(abs <= refPropAbsTol || rel <= refPropRelTol) {
				t.Errorf("%s: proportion [dim %d (index %.6g)][%s] = %.17g, want %.17g (abs %.3g, rel %.3g)",
					label, k, want.ConditionIndices[k], n, got, w, abs, rel)
			}
		}
	}
	t.Logf("%s: max rel diff condition indices %.3g (%s); proportions max abs %.3g, max rel %.3g (%s)",
		label, ciDiff.rel, ciDiff.what, prAbs, prRel.rel, prRel.what)
}

// TestReferenceLibraries compares plumb's VIFs, correlation eigenvalues,
// condition indices and variance-decomposition proportions with R's car::vif
// and with numpy/statsmodels on Longley (NIST StRD) and two generated
// district-demand datasets (testdata/ref/README.md). Each dataset is run on
// both paths (cross-product only, and with the QR accumulator) and both with
// the response inside the accumulators (Options.Target) and without it.
func TestReferenceLibraries(t *testing.T) {
	var specs map[string]refSpec
	readJSON(t, "datasets.json", &specs)
	var car goldenCar
	readJSON(t, "golden_car.json", &car)
	var np goldenNumpy
	readJSON(t, "golden_numpy.json", &np)
	t.Logf("golden_car.json: R %s, car %s; golden_numpy.json: numpy %s, statsmodels %s",
		car.Versions["R"], car.Versions["car"], np.Versions["numpy"], np.Versions["statsmodels"])

	names := make([]string, 0, len(specs))
	for n := range specs {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, ds := range names {
		spec := specs[ds]
		gc, ok := car.Datasets[ds]
		if !ok {
			t.Fatalf("golden_car.json has no dataset %q", ds)
		}
		gn, ok := np.Datasets[ds]
		if !ok {
			t.Fatalf("golden_numpy.json has no dataset %q", ds)
		}
		header, rows := readRefCSV(t, spec.CSV)
		if len(rows) != gc.Rows || len(rows) != gn.Rows {
			t.Fatalf("%s: %d rows in CSV, golden files say %d (car) and %d (numpy)", ds, len(rows), gc.Rows, gn.Rows)
		}
		for _, withTarget := range []bool{false, true} {
			cols := spec.Regressors
			opt := Options{Columns: spec.Regressors}
			variant := "regressors"
			if withTarget {
				cols = append(append([]string(nil), spec.Regressors...), spec.Response)
				opt.Target = spec.Response
				variant = "with-target"
			}
			m, q := accumulate(t, header, rows, cols, 7)
			for _, useQR := range []bool{false, true} {
				path := "cross-product"
				qq := q
				if !useQR {
					qq = nil
				} else {
					path = "qr"
				}
				t.Run(ds+"/"+variant+"/"+path, func(t *testing.T) {
					rep, err := Analyze(m, qq, opt)
					if err != nil {
						t.Fatalf("Analyze: %v", err)
					}
					t.Logf("report path %q, trust %+v", rep.Path, rep.Trust)
					if qq == nil && rep.Path != PathCrossProduct {
						t.Errorf("path = %q without a QR accumulator, want %q", rep.Path, PathCrossProduct)
					}
					if rep.RowsUsed != int64(len(rows)) {
						t.Errorf("rows used = %d, want %d", rep.RowsUsed, len(rows))
					}
					checkReferenceReport(t, spec, rep, gc.VIF, gn.VIFStatsmodels, gn.VIFInverseCorrelation,
						gn.CorrelationEigenvalues, gn.Uncentered, gn.Centered)
				})
			}
		}
	}
}

func checkReferenceReport(t *testing.T, spec refSpec, rep *Report,
	vifCar, vifSM, vifInv map[string]float64, eig []float64, unc, cen goldenBKW) {
	t.Helper()
	byName := make(map[string]ColumnReport, len(rep.Columns))
	for _, c := range rep.Columns {
		byName[c.Name] = c
	}
	if len(rep.Columns) != len(spec.Regressors) {
		t.Errorf("report has %d columns, want the %d regressors %v", len(rep.Columns), len(spec.Regressors), spec.Regressors)
	}

	// VIFs against three references:
	//   car      golden_car.json, R car::vif on lm(response ~ regressors) (vif_car.R)
	//   sm       golden_numpy.json, statsmodels variance_inflation_factor on [1 X] (bkw_numpy.py)
	//   inv-corr golden_numpy.json, diag(inv(corr(X))) by numpy (bkw_numpy.py)
	refs := []struct {
		name string
		vif  map[string]float64
	}{{"car::vif", vifCar}, {"statsmodels", vifSM}, {"numpy inv(corr)", vifInv}}
	for _, ref := range refs {
		var md maxDiff
		for _, name := range spec.Regressors {
			want, ok := ref.vif[name]
			if !ok {
				t.Fatalf("%s golden has no VIF for %q", ref.name, name)
			}
			c, ok := byName[name]
			if !ok {
				t.Errorf("report has no column %q", name)
				continue
			}
			if c.VIF == nil {
				t.Errorf("%s: VIF is null (undefined %q), %s says %.17g", name, c.Undefined, ref.name, want)
				continue
			}
			d := relDiff(*c.VIF, want)
			md.note(d, name)
			if !(d <= refRelTol) {
				t.Errorf("%s: VIF = %.17g, %s = %.17g (rel diff %.3g)", name, *c.VIF, ref.name, want, d)
			}
		}
		t.Logf("VIF vs %s: max rel diff %.3g (%s)", ref.name, md.rel, md.what)
	}

	// Correlation-matrix eigenvalues, descending: golden_numpy.json,
	// numpy.linalg.eigvalsh(corr(X)) (bkw_numpy.py).
	got := append([]float64(nil), rep.Eigenvalues...)
	sort.Sort(sort.Reverse(sort.Float64Slice(got)))
	if len(got) != len(eig) {
		t.Errorf("%d correlation eigenvalues, want %d", len(got), len(eig))
	} else {
		var md maxDiff
		for k, w := range eig {
			d := relDiff(got[k], w)
			md.note(d, fmt.Sprintf("eigenvalue %d", k))
			if !(d <= refRelTol) {
				t.Errorf("correlation eigenvalue %d (descending) = %.17g, numpy = %.17g (rel diff %.3g)", k, got[k], w, d)
			}
		}
		t.Logf("correlation eigenvalues vs numpy: max rel diff %.3g (%s)", md.rel, md.what)
	}

	// Convention (a), uncentered [1 X] with unit-length columns:
	// golden_numpy.json "uncentered", numpy.linalg.svd (bkw_numpy.py).
	compareBKW(t, "convention (a) uncentered", unc, rep.ConditionNumber, rep.ConditionIndices,
		rep.ProportionNames, rep.Proportions)

	// Convention (b), centered and scaled X without intercept:
	// golden_numpy.json "centered", numpy.linalg.svd (bkw_numpy.py).
	compareBKW(t, "convention (b) centered", cen, rep.CenteredConditionNumber, rep.CenteredConditionIndices,
		rep.CenteredProportionNames, rep.CenteredProportions)
}
