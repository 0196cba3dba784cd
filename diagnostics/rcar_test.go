package diagnostics

import (
	"encoding/csv"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

// The goldens of testdata/rcar at the module root: car::vif on models with
// factors fitted to R's own datasets; README.md there names the versions,
// vif.R is the script that wrote them.
var rcarDir = filepath.Join("..", "testdata", "rcar")

// rcarTol is the acceptance level against car::vif: relative.
const rcarTol = 1e-9

type rcarModel struct {
	name, response string
	columns        []string
	factors        map[string]bool
}

type rcarTerm struct {
	df            int
	gvif, gvifAdj float64
}

func readTSV(t *testing.T, name string) [][]string {
	t.Helper()
	f, err := os.Open(filepath.Join(rcarDir, name))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	r := csv.NewReader(f)
	r.Comma = '\t'
	recs, err := r.ReadAll()
	if err != nil {
		t.Fatalf("%s: %v", name, err)
	}
	return recs[1:]
}

func readRCar(t *testing.T) ([]rcarModel, map[string]map[string]rcarTerm) {
	t.Helper()
	var models []rcarModel
	for _, r := range readTSV(t, "models.tsv") {
		m := rcarModel{name: r[0], response: r[1], columns: strings.Split(r[2], ","), factors: map[string]bool{}}
		if r[3] != "" {
			for _, f := range strings.Split(r[3], ",") {
				m.factors[f] = true
			}
		}
		models = append(models, m)
	}
	want := map[string]map[string]rcarTerm{}
	for _, r := range readTSV(t, "vif.tsv") {
		df, err := strconv.Atoi(r[2])
		if err != nil {
			t.Fatal(err)
		}
		g, err1 := strconv.ParseFloat(r[3], 64)
		a, err2 := strconv.ParseFloat(r[4], 64)
		if err1 != nil || err2 != nil {
			t.Fatalf("vif.tsv %v: %v %v", r, err1, err2)
		}
		if want[r[0]] == nil {
			want[r[0]] = map[string]rcarTerm{}
		}
		want[r[0]][r[1]] = rcarTerm{df, g, a}
	}
	return models, want
}

// TestRCarVIF compares plumb's GVIF, GVIF^(1/(2·df)) and the numeric
// columns' VIF and √VIF with R's car::vif (R 4.2.2, car 3.1-1, script
// testdata/rcar/vif.R) on R's own datasets, to 1e-9 relative, on the three
// paths, and for every choice of base level of every factor (Fox &
// Monette 1992: GVIF does not depend on the base; R's values come from its
// first level, or polynomial contrasts for esoph's ordered factors).
func TestRCarVIF(t *testing.T) {
	models, want := readRCar(t)
	if len(models) < 5 {
		t.Fatalf("%d models in models.tsv", len(models))
	}
	worst := map[string]*maxDiff{PathCrossProduct: {}, PathQR: {}, PathQRPrecise: {}}
	for _, md := range models {
		t.Run(md.name, func(t *testing.T) {
			f, err := os.Open(filepath.Join(rcarDir, md.name+".csv"))
			if err != nil {
				t.Fatal(err)
			}
			recs, err := csv.NewReader(f).ReadAll()
			f.Close()
			if err != nil {
				t.Fatal(err)
			}
			header, cells := recs[0], recs[1:]
			levels := map[string][]string{}
			var fnames []string
			for _, c := range md.columns {
				if md.factors[c] {
					levels[c] = levelsOf(header, cells, c)
					fnames = append(fnames, c)
				}
			}
			// The model's columns in term order, the response last (its
			// NA drop rows as lm's do).
			names, rows := expandRows(t, header, levels, cells, append(append([]string{}, md.columns...), md.response))
			m, q := feedRows(names, rows, 16)
			x := feedExtended(names, rows, 16)
			terms := want[md.name]
			if len(terms) != len(md.columns) {
				t.Fatalf("vif.tsv has %d terms for %d columns", len(terms), len(md.columns))
			}
			// Every base of every factor; the other factors on their
			// default base.
			type choice struct{ factor, base string }
			choices := []choice{{}}
			for _, fn := range fnames {
				for _, l := range levels[fn] {
					choices = append(choices, choice{fn, l})
				}
			}
			for _, ch := range choices {
				var fs []Factor
				for _, fn := range fnames {
					fac := Factor{Name: fn, Levels: levels[fn]}
					if fn == ch.factor {
						fac.Base = ch.base
					}
					fs = append(fs, fac)
				}
				opt := Options{Target: md.response, Factors: fs}
				qr, cp := analyzeBoth(t, m, q, opt)
				pr, err := Analyze(m, x, opt)
				if err != nil {
					t.Fatal(err)
				}
				for _, rep := range []*Report{qr, cp, pr} {
					label := rep.Path
					if ch.factor != "" {
						label += ", base " + ch.factor + "=" + ch.base
					}
					for _, term := range md.columns {
						w := terms[term]
						var df int
						var g, a *float64
						if md.factors[term] {
							gr := groupByName(t, rep, term)
							df, g, a = gr.DF, gr.GVIF, gr.GVIFAdjusted
							if ch.factor == term && gr.Base != ch.base {
								t.Errorf("%s: %s base %q", label, term, gr.Base)
							}
						} else {
							c := colByName(t, rep, term)
							df, g, a = 1, c.VIF, c.SEInflation
						}
						if g == nil || a == nil {
							t.Errorf("%s: %s undefined", label, term)
							continue
						}
						if df != w.df {
							t.Errorf("%s: %s df %d, car::vif %d", label, term, df, w.df)
						}
						// car::vif (R 4.2.2, car 3.1-1), testdata/rcar/vif.tsv.
						for _, x := range []struct {
							what      string
							got, want float64
						}{{"GVIF", *g, w.gvif}, {"GVIF^(1/(2df))", *a, w.gvifAdj}} {
							rel := relDiff(x.got, x.want)
							worst[rep.Path].note(rel, md.name+" "+term+" "+x.what+" ("+label+")")
							if !(rel <= rcarTol) {
								t.Errorf("%s: %s %s %.17g, car::vif %.17g (relative %.2g)", label, term, x.what, x.got, x.want, rel)
							}
						}
					}
				}
			}
		})
	}
	for _, p := range []string{PathCrossProduct, PathQR, PathQRPrecise} {
		w := worst[p]
		t.Logf("%s path: worst relative difference against car::vif %.3g (%s)", p, w.rel, w.what)
		if math.IsNaN(w.rel) || w.what == "" {
			t.Errorf("%s path: no comparison, or a NaN", p)
		}
	}
}
