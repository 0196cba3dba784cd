package diagnostics

import (
	"encoding/json"
	"errors"
	"math"
	"math/rand/v2"
	"slices"
	"strconv"
	"strings"
	"testing"

	"plumb/stream"
)

// expandRows turns rows of text cells (header names the cells) into the
// accumulator's columns for the model columns use, in order: a numeric
// column by its own name, a factor (levels given, in byte order) in place
// as one indicator column per level, the full set. A cell "NA" is
// missing (NaN in every column it expands to).
func expandRows(t *testing.T, header []string, factors map[string][]string, cells [][]string, use []string) ([]string, [][]float64) {
	t.Helper()
	at := map[string]int{}
	for j, h := range header {
		at[h] = j
	}
	var names []string
	for _, u := range use {
		if _, ok := at[u]; !ok {
			t.Fatalf("column %q not in header %v", u, header)
		}
		if lv, ok := factors[u]; ok {
			for _, l := range lv {
				names = append(names, stream.IndicatorName(u, l))
			}
		} else {
			names = append(names, u)
		}
	}
	rows := make([][]float64, len(cells))
	for i, c := range cells {
		row := make([]float64, 0, len(names))
		for _, u := range use {
			s := c[at[u]]
			if s == "NA" {
				// Missing, as R writes it: the accumulator drops the row.
				n := 1
				if lv, ok := factors[u]; ok {
					n = len(lv)
				}
				for range n {
					row = append(row, math.NaN())
				}
				continue
			}
			if lv, ok := factors[u]; ok {
				k := slices.Index(lv, s)
				if k < 0 {
					t.Fatalf("row %d: %q is not a level of %s %v", i+1, s, u, lv)
				}
				for x := range lv {
					row = append(row, boolFloat(x == k))
				}
				continue
			}
			v, err := strconv.ParseFloat(s, 64)
			if err != nil {
				t.Fatalf("row %d column %s: %v", i+1, u, err)
			}
			row = append(row, v)
		}
		rows[i] = row
	}
	return names, rows
}

// levelsOf returns the distinct values of a column in byte order, NA left
// out.
func levelsOf(header []string, cells [][]string, col string) []string {
	j := slices.Index(header, col)
	var lv []string
	for _, c := range cells {
		if c[j] != "NA" && !slices.Contains(lv, c[j]) {
			lv = append(lv, c[j])
		}
	}
	slices.Sort(lv)
	return lv
}

var districtHeader = []string{"temperature", "population_served", "pipe_age", "supply_source", "tariff_band",
	"district_code", "district", "pipe_material", "roughness", "head_loss", "day_type", "district_letter"}

// districtCells generates n district-days of the project's scenario as
// text cells, from a fixed seed. By construction: the supply source leans
// on the temperature (rivers in warm weather) and the tariff band on the
// population served, so their GVIFs exceed 1; district_code N1, N2 lie in
// district north, S1, S2 in south, E1 in east; roughness is fixed by
// pipe_material (cast_iron 0.26, pvc 0.0015, steel 0.045); head_loss is
// 0.5·pipe_age plus an offset per pipe_material (cast_iron 3, pvc 1,
// steel 2); day_type is always "weekday"; district_letter is E, N or S,
// the district's initial.
func districtCells(seed uint64, n int) [][]string {
	r := rand.New(rand.NewPCG(seed, 0xd157))
	codes := []string{"E1", "N1", "N2", "S1", "S2"}
	district := map[string]string{"E1": "east", "N1": "north", "N2": "north", "S1": "south", "S2": "south"}
	rough := map[string]float64{"cast_iron": 0.26, "pvc": 0.0015, "steel": 0.045}
	offset := map[string]float64{"cast_iron": 3, "pvc": 1, "steel": 2}
	mats := []string{"cast_iron", "pvc", "steel"}
	g := func(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }
	var out [][]string
	for i := 0; i < n; i++ {
		temp := 15 + 8*math.Sin(2*math.Pi*float64(i)/365) + 2*r.NormFloat64()
		pop := math.Round(40000 + 8000*r.NormFloat64())
		age := math.Round(10 + 30*r.Float64())
		src := "groundwater"
		switch u := r.Float64() + (temp-15)/40; {
		case u > 0.8:
			src = "river"
		case u > 0.45:
			src = "reservoir"
		}
		band := string(rune('A' + min(3, max(0, int((pop-28000)/6000+r.NormFloat64())))))
		code := codes[r.IntN(len(codes))]
		mat := mats[r.IntN(len(mats))]
		out = append(out, []string{g(temp), g(pop), g(age), src, band, code, district[code], mat,
			g(rough[mat]), g(0.5*age + offset[mat]), "weekday", strings.ToUpper(district[code][:1])})
	}
	return out
}

// districtFrame accumulates the generated table for the model columns use.
func districtFrame(t *testing.T, n int, use []string) (*stream.Moments, *stream.QR, map[string][]string) {
	t.Helper()
	cells := districtCells(7, n)
	facs := map[string][]string{}
	for _, c := range []string{"supply_source", "tariff_band", "district_code", "district", "pipe_material", "day_type", "district_letter"} {
		facs[c] = levelsOf(districtHeader, cells, c)
	}
	names, rows := expandRows(t, districtHeader, facs, cells, use)
	m, q := feedRows(names, rows, 97)
	return m, q, facs
}

func groupByName(t *testing.T, rep *Report, name string) GroupReport {
	t.Helper()
	for _, g := range rep.GVIF {
		if g.Name == name {
			return g
		}
	}
	t.Fatalf("%s path: no group %q in %+v", rep.Path, name, rep.GVIF)
	return GroupReport{}
}

// Fox & Monette (1992): the GVIF of a factor does not depend on which
// level is its base, nor do the VIFs of the numeric columns (identity,
// generated data; the R datasets repeat it in TestRCarVIF).
func TestFactorBaseInvariance(t *testing.T) {
	use := []string{"temperature", "supply_source", "population_served", "tariff_band", "pipe_age"}
	m, q, facs := districtFrame(t, 900, use)
	for _, fname := range []string{"supply_source", "tariff_band"} {
		var ref *Report
		for _, base := range facs[fname] {
			var fs []Factor
			for _, f := range []string{"supply_source", "tariff_band"} {
				fs = append(fs, Factor{Name: f, Levels: facs[f]})
			}
			fs[slices.Index([]string{"supply_source", "tariff_band"}, fname)].Base = base
			qr, cp := analyzeBoth(t, m, q, Options{Factors: fs})
			for _, rep := range []*Report{qr, cp} {
				g := groupByName(t, rep, fname)
				if g.Base != base || g.BaseRule != BaseNamed {
					t.Fatalf("%s: base %q (%s), want %q named", fname, g.Base, g.BaseRule, base)
				}
				if g.GVIF == nil || *g.GVIF <= 1.01 {
					t.Fatalf("%s path: %s GVIF %v; the data make it exceed 1", rep.Path, fname, g.GVIF)
				}
				if ref == nil {
					ref = qr
				}
				for _, other := range ref.GVIF {
					h := groupByName(t, rep, other.Name)
					if h.DF != other.DF || relErr(*h.GVIF, *other.GVIF) > 1e-10 || relErr(*h.GVIFAdjusted, *other.GVIFAdjusted) > 1e-10 {
						t.Errorf("%s path, %s base %q: %s GVIF %.15g df %d, with the first base %.15g df %d",
							rep.Path, fname, base, other.Name, *h.GVIF, h.DF, *other.GVIF, other.DF)
					}
				}
				for _, c := range []string{"temperature", "population_served", "pipe_age"} {
					if a, b := *colByName(t, rep, c).VIF, *colByName(t, ref, c).VIF; relErr(a, b) > 1e-10 {
						t.Errorf("%s path, %s base %q: VIF(%s) %.15g, with the first base %.15g", rep.Path, fname, base, c, a, b)
					}
				}
			}
		}
	}
}

// A factor's entry equals a declared group over the same hand-built
// dummies (identity: the same determinant formula on the same columns).
func TestFactorEqualsDeclaredGroup(t *testing.T) {
	use := []string{"temperature", "supply_source", "population_served", "tariff_band"}
	m, q, facs := districtFrame(t, 700, use)
	fs := []Factor{{Name: "supply_source", Levels: facs["supply_source"]}, {Name: "tariff_band", Levels: facs["tariff_band"]}}
	qr, cp := analyzeBoth(t, m, q, Options{Factors: fs})
	for _, rep := range []*Report{qr, cp} {
		groups := map[string][]string{}
		cols := []string{}
		for _, c := range rep.Columns {
			cols = append(cols, c.Name)
		}
		for _, f := range fs {
			g := groupByName(t, rep, f.Name)
			groups["hand_"+f.Name] = g.Columns
			if len(g.Columns) != len(f.Levels)-1 || slices.Contains(g.Columns, stream.IndicatorName(f.Name, g.Base)) {
				t.Fatalf("%s: dummies %v for levels %v, base %q", f.Name, g.Columns, f.Levels, g.Base)
			}
		}
		var qq QRFactor
		if rep.Path == PathQR {
			qq = q
		}
		hand, err := Analyze(m, qq, Options{Columns: cols, Groups: groups})
		if err != nil {
			t.Fatal(err)
		}
		for _, f := range fs {
			a, b := groupByName(t, rep, f.Name), groupByName(t, hand, "hand_"+f.Name)
			if a.Kind != GroupFactor || b.Kind != GroupDeclared {
				t.Errorf("kinds %q, %q", a.Kind, b.Kind)
			}
			if a.DF != b.DF || relErr(*a.GVIF, *b.GVIF) > 1e-14 || relErr(*a.GVIFAdjusted, *b.GVIFAdjusted) > 1e-14 {
				t.Errorf("%s path: %s: factor GVIF %.15g (df %d), declared group %.15g (df %d)", rep.Path, f.Name, *a.GVIF, a.DF, *b.GVIF, b.DF)
			}
		}
		for i, c := range rep.Columns {
			if relErr(*c.VIF, *hand.Columns[i].VIF) > 1e-14 {
				t.Errorf("%s path: VIF(%s) %.15g, hand-built %.15g", rep.Path, c.Name, *c.VIF, *hand.Columns[i].VIF)
			}
		}
	}
}

// facRows builds rows of one numeric column x and one factor from level
// names, for the base-choice cases.
func facRows(t *testing.T, levels []string, cells []string) (*stream.Moments, *stream.QR) {
	t.Helper()
	var rows [][]string
	r := rand.New(rand.NewPCG(3, 4))
	for _, c := range cells {
		rows = append(rows, []string{strconv.FormatFloat(r.NormFloat64(), 'g', -1, 64), c})
	}
	names, fl := expandRows(t, []string{"x", "supply_source"}, map[string][]string{"supply_source": levels}, rows, []string{"x", "supply_source"})
	return feedRows(names, fl, 5)
}

func repeat(s string, n int) []string {
	out := make([]string, n)
	for i := range out {
		out[i] = s
	}
	return out
}

// The base: the most frequent level, ties to the first in byte order, or
// the named one; absent levels are reported and left out; one level
// present is reported as such, with no GVIF and no NaN (common practice,
// no source: these are plumb's rules).
func TestFactorBase(t *testing.T) {
	lv := []string{"groundwater", "reservoir", "river", "desalination_plant"}
	slices.Sort(lv)
	cases := []struct {
		name     string
		cells    []string
		base     string
		wantBase string
		wantRule string
		absent   []string
		note     bool
	}{
		{"most frequent", slices.Concat(repeat("river", 9), repeat("groundwater", 4), repeat("reservoir", 6)), "", "river", BaseMostFrequent, []string{"desalination_plant"}, false},
		{"tie to byte order", slices.Concat(repeat("river", 7), repeat("groundwater", 3), repeat("reservoir", 7)), "", "reservoir", BaseMostFrequent, []string{"desalination_plant"}, false},
		{"named", slices.Concat(repeat("river", 9), repeat("groundwater", 4), repeat("reservoir", 6)), "groundwater", "groundwater", BaseNamed, []string{"desalination_plant"}, false},
		{"named but absent", slices.Concat(repeat("river", 9), repeat("groundwater", 4), repeat("reservoir", 6)), "desalination_plant", "river", BaseMostFrequent, []string{"desalination_plant"}, true},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			m, q := facRows(t, lv, tc.cells)
			qr, cp := analyzeBoth(t, m, q, Options{Factors: []Factor{{Name: "supply_source", Levels: lv, Base: tc.base}}})
			for _, rep := range []*Report{qr, cp} {
				g := groupByName(t, rep, "supply_source")
				if g.Base != tc.wantBase || g.BaseRule != tc.wantRule {
					t.Errorf("%s path: base %q (%s), want %q (%s)", rep.Path, g.Base, g.BaseRule, tc.wantBase, tc.wantRule)
				}
				if !slices.Equal(g.Absent, tc.absent) || g.DF != 2 || len(g.Levels) != 3 {
					t.Errorf("%s path: absent %v df %d levels %v", rep.Path, g.Absent, g.DF, g.Levels)
				}
				for _, c := range rep.Columns {
					if c.Name == stream.IndicatorName("supply_source", g.Base) || c.Name == stream.IndicatorName("supply_source", "desalination_plant") {
						t.Errorf("%s path: column %s is in the design", rep.Path, c.Name)
					}
				}
				if len(rep.Columns) != 3 {
					t.Errorf("%s path: %d columns, want x and 2 dummies", rep.Path, len(rep.Columns))
				}
				hasNote := slices.ContainsFunc(rep.Notes, func(s string) bool { return strings.Contains(s, "desalination_plant") })
				if hasNote != tc.note {
					t.Errorf("%s path: notes %q", rep.Path, rep.Notes)
				}
				// Counts are the rows per level (exact: 0/1 means times n).
				for i, l := range g.Levels {
					want := 0
					for _, c := range tc.cells {
						if c == l {
							want++
						}
					}
					if math.Abs(g.Counts[i]-float64(want)) > 1e-9 {
						t.Errorf("%s path: count of %s %g, want %d", rep.Path, l, g.Counts[i], want)
					}
				}
			}
		})
	}

	t.Run("one level present", func(t *testing.T) {
		cells := repeat("river", 12)
		m, q := facRows(t, lv, cells)
		_, err := Analyze(m, q, Options{Columns: []string{"supply_source"}, Factors: []Factor{{Name: "supply_source", Levels: lv}}})
		if !errors.Is(err, ErrBadOptions) || !strings.Contains(err.Error(), `"supply_source" has only level "river"`) {
			t.Fatalf("only the factor as regressor: err %v", err)
		}
		// Beside a numeric column: reported with df 0 and no GVIF.
		m2, q2, _ := districtFrame(t, 50, []string{"temperature", "day_type", "pipe_age"})
		qr, cp := analyzeBoth(t, m2, q2, Options{Factors: []Factor{{Name: "day_type", Levels: []string{"holiday", "weekday", "weekend"}}}})
		for _, rep := range []*Report{qr, cp} {
			g := groupByName(t, rep, "day_type")
			if g.DF != 0 || g.GVIF != nil || g.GVIFAdjusted != nil || !strings.Contains(g.Undefined, `only level "weekday"`) {
				t.Errorf("%s path: %+v", rep.Path, g)
			}
			if !slices.Equal(g.Absent, []string{"holiday", "weekend"}) || len(g.Columns) != 0 {
				t.Errorf("%s path: absent %v, columns %v", rep.Path, g.Absent, g.Columns)
			}
			b, err := json.Marshal(g)
			if err != nil {
				t.Fatal(err)
			}
			if s := string(b); !strings.Contains(s, `"gvif":null`) || !strings.Contains(s, `"gvif_adjusted":null`) || !strings.Contains(s, `"df":0`) {
				t.Errorf("JSON %s", s)
			}
		}
	})
}

func TestFactorErrors(t *testing.T) {
	use := []string{"temperature", "supply_source", "pipe_age", "tariff_band"}
	m, q, facs := districtFrame(t, 200, use)
	src := Factor{Name: "supply_source", Levels: facs["supply_source"]}
	band := Factor{Name: "tariff_band", Levels: facs["tariff_band"]}
	cases := []struct {
		name string
		opt  Options
		want error
		msg  string
	}{
		{"target is a factor", Options{Target: "supply_source", Factors: []Factor{src, band}}, ErrBadOptions, "plumb fits ordinary least squares"},
		{"target is a dummy", Options{Target: "supply_source[river]", Factors: []Factor{src, band}}, ErrBadOptions, "target \"supply_source[river]\" is a factor"},
		{"unknown base", Options{Factors: []Factor{{Name: "supply_source", Levels: src.Levels, Base: "canal"}, band}}, ErrBadOptions, `no level "canal" to be its base`},
		{"twice", Options{Factors: []Factor{src, src, band}}, ErrBadOptions, "declared twice"},
		{"no levels", Options{Factors: []Factor{{Name: "supply_source"}, band}}, ErrBadOptions, "has no levels"},
		{"some dummies", Options{Columns: []string{"temperature", "supply_source[river]", "tariff_band"}, Factors: []Factor{src, band}}, ErrBadOptions, "name the factor itself"},
		{"not a regressor", Options{Columns: []string{"temperature", "tariff_band"}, Factors: []Factor{src, band}}, ErrUnknownColumn, "none of its indicator columns"},
		{"group with the base", Options{Factors: []Factor{{Name: "supply_source", Levels: src.Levels, Base: "river"}, band},
			Groups: map[string][]string{"src": {"supply_source[river]", "supply_source[reservoir]"}}}, ErrBadOptions, "is the base level of factor"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Analyze(m, q, tc.opt)
			if !errors.Is(err, tc.want) || !strings.Contains(err.Error(), tc.msg) {
				t.Errorf("err %v, want %v containing %q", err, tc.want, tc.msg)
			}
		})
	}
	// Naming the factor in Columns stands for its dummies.
	rep, err := Analyze(m, q, Options{Columns: []string{"temperature", "supply_source"}, Factors: []Factor{src}})
	if err != nil {
		t.Fatal(err)
	}
	if len(rep.Columns) != 3 || len(rep.GVIF) != 1 {
		t.Errorf("columns %v groups %v", waterNames(rep), rep.GVIF)
	}
}

// Exact dependencies involving factors are said in words (plumb's own
// wording; the generated data hold the relations by construction).
func TestFactorWords(t *testing.T) {
	cases := []struct {
		name    string
		use     []string
		bases   map[string]string
		dep     string
		words   []string // substrings of the dependency's words
		noGVIF  []string // factors whose GVIF is undefined (exact dependency)
		numeric string   // a numeric column in the dependency
	}{
		{"code within district", []string{"temperature", "district_code", "district"}, nil,
			"district[north]",
			[]string{"district_code determines district: each district_code level lies in one district level", "north: N1 and N2"},
			[]string{"district_code", "district"}, ""},
		{"code within district, other bases", []string{"temperature", "district_code", "district"}, map[string]string{"district_code": "N1", "district": "south"},
			"district[north]",
			[]string{"district_code determines district: each district_code level lies in one district level", "north: N1 and N2"},
			nil, ""},
		{"code within district, district first", []string{"temperature", "district", "district_code"}, nil,
			"district_code[S2]",
			[]string{"district_code determines district: each district_code level lies in one district level (east: E1; north: N1 and N2; south: S1 and S2)"},
			nil, ""},
		{"same grouping", []string{"district", "temperature", "district_letter"}, nil,
			"district_letter[N]",
			[]string{"district and district_letter encode the same grouping: each level of one is one level of the other (east = E, north = N and south = S)"},
			[]string{"district", "district_letter"}, ""},
		// The numeric column is the dependent one whichever comes first:
		// a dummy is written as dependent only when no other column can be.
		{"roughness before material", []string{"roughness", "temperature", "pipe_material"}, nil,
			"roughness",
			[]string{"pipe_material determines roughness: roughness is fixed within each pipe_material level (cast_iron 0.26, pvc 0.0015, steel 0.045)"},
			[]string{"pipe_material"}, ""},
		{"material fixes roughness", []string{"temperature", "pipe_material", "roughness"}, nil,
			"roughness",
			[]string{"pipe_material determines roughness: roughness is fixed within each pipe_material level (cast_iron 0.26, pvc 0.0015, steel 0.045)"},
			[]string{"pipe_material"}, "roughness"},
		{"offset per material", []string{"pipe_age", "pipe_material", "head_loss"}, nil,
			"head_loss",
			[]string{"head_loss = 0.5·pipe_age plus an offset fixed within each pipe_material level (cast_iron 3, pvc 1, steel 2)"},
			nil, "pipe_age"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			m, q, facs := districtFrame(t, 400, tc.use)
			var fs []Factor
			for _, u := range tc.use {
				if lv, ok := facs[u]; ok {
					fs = append(fs, Factor{Name: u, Levels: lv, Base: tc.bases[u]})
				}
			}
			qr, cp := analyzeBoth(t, m, q, Options{Factors: fs})
			for _, rep := range []*Report{qr, cp} {
				var got *Dependency
				for i, d := range rep.Dependencies {
					if d.Kind == KindExact && d.Dependent == tc.dep {
						got = &rep.Dependencies[i]
					}
				}
				if got == nil {
					t.Fatalf("%s path: no exact dependency of %s in %+v", rep.Path, tc.dep, rep.Dependencies)
				}
				for _, w := range tc.words {
					if !strings.Contains(got.Words, w) {
						t.Errorf("%s path: words %q, want %q in them (equation %s)", rep.Path, got.Words, w, got.Equation)
					}
				}
				for _, f := range tc.noGVIF {
					if g := groupByName(t, rep, f); g.GVIF != nil || !strings.Contains(g.Undefined, UndefinedExact) {
						t.Errorf("%s path: %s GVIF %v (%s) in an exact dependency", rep.Path, f, g.GVIF, g.Undefined)
					}
				}
				for _, d := range rep.Dependencies {
					if d.Kind == KindExact && d.Words == "" {
						t.Errorf("%s path: no words for %s", rep.Path, d.Equation)
					}
				}
			}
		})
	}
}

// Numeric dependencies get words too (exact arithmetic: the generated
// water table's total is the sum of its parts, pressure_z3 is stuck).
func TestNumericWords(t *testing.T) {
	names, rows := waterTable(5, 300)
	m, q := feedRows(names, rows, 64)
	qr, cp := analyzeBoth(t, m, q, Options{Columns: []string{"temperature", "residential_connections", "commercial_connections", "total_connections", "pressure_z3"}})
	for _, rep := range []*Report{qr, cp} {
		want := map[string]string{
			"total_connections": "total_connections is the sum of residential_connections and commercial_connections",
			"pressure_z3":       "pressure_z3 does not vary: every row holds 52.3",
		}
		for _, d := range rep.Dependencies {
			if w, ok := want[d.Dependent]; ok {
				if !strings.HasPrefix(d.Words, w) {
					t.Errorf("%s path: words %q, want %q", rep.Path, d.Words, w)
				}
				delete(want, d.Dependent)
			}
		}
		if len(want) > 0 {
			t.Errorf("%s path: missing dependencies %v", rep.Path, want)
		}
	}
}

// The JSON of a factor's entry carries the contract's keys.
func TestFactorJSON(t *testing.T) {
	m, q, facs := districtFrame(t, 300, []string{"temperature", "supply_source", "population_served"})
	rep, err := Analyze(m, q, Options{Factors: []Factor{{Name: "supply_source", Levels: append([]string{"desalination_plant"}, facs["supply_source"]...)}},
		Groups: map[string][]string{"size": {"temperature", "population_served"}}})
	if err != nil {
		t.Fatal(err)
	}
	b, err := json.Marshal(rep)
	if err != nil {
		t.Fatal(err)
	}
	var doc struct {
		Groups []map[string]any `json:"groups"`
	}
	if err := json.Unmarshal(b, &doc); err != nil {
		t.Fatal(err)
	}
	if len(doc.Groups) != 2 {
		t.Fatalf("groups %v", doc.Groups)
	}
	f, g := doc.Groups[0], doc.Groups[1]
	for _, k := range []string{"name", "kind", "df", "gvif", "gvif_adjusted", "levels", "base", "absent", "columns", "level_counts", "base_rule"} {
		if _, ok := f[k]; !ok {
			t.Errorf("factor entry lacks %q: %v", k, f)
		}
	}
	if f["name"] != "supply_source" || f["kind"] != "factor" || f["df"] != 2.0 || f["base"] != "groundwater" {
		t.Errorf("factor entry %v", f)
	}
	if a, ok := f["absent"].([]any); !ok || len(a) != 1 || a[0] != "desalination_plant" {
		t.Errorf("absent %v", f["absent"])
	}
	if g["kind"] != "declared" || g["name"] != "size" {
		t.Errorf("declared entry %v", g)
	}
	for _, k := range []string{"levels", "base", "absent"} {
		if _, ok := g[k]; ok {
			t.Errorf("declared group has %q: %v", k, g)
		}
	}
}
