package main

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"
)

// factorTable writes a district feature table with categorical columns to
// a new SQLite file, from a fixed seed: supply_source (TEXT, NULL in every
// 37th row) leaning on the temperature, its hand-built dummies
// src_groundwater, src_reservoir, src_river (NULL where it is NULL),
// district_code (N1, N2, S1, E1) inside district (north, south, east), a
// free-text note, and demand. It returns the path and the rows per source.
func factorTable(t *testing.T, n int) (string, map[string]int) {
	t.Helper()
	rows, count := factorRows(n)
	path := sqliteTable(t, `CREATE TABLE district_daily (temperature_c REAL, population_served INTEGER,
		supply_source TEXT, src_groundwater INTEGER, src_reservoir INTEGER, src_river INTEGER,
		district_code TEXT, district TEXT, note TEXT, demand_m3 REAL)`, rows)
	return path, count
}

// factorRows generates factorTable's rows.
func factorRows(n int) ([][]any, map[string]int) {
	r := rand.New(rand.NewPCG(11, 0xfac))
	codes := []string{"E1", "N1", "N2", "S1"}
	district := map[string]string{"E1": "east", "N1": "north", "N2": "north", "S1": "south"}
	count := map[string]int{}
	var rows [][]any
	for i := 0; i < n; i++ {
		temp := 15 + 8*math.Sin(2*math.Pi*float64(i)/365) + 2*r.NormFloat64()
		pop := math.Round(40000 + 5000*r.NormFloat64())
		src := "groundwater"
		switch u := r.Float64() + (temp-15)/30; {
		case u > 0.75:
			src = "river"
		case u > 0.4:
			src = "reservoir"
		}
		var srcCell any = src
		dummy := func(l string) any { return boolInt(src == l) }
		gw, rs, rv := dummy("groundwater"), dummy("reservoir"), dummy("river")
		if i%37 == 5 {
			srcCell, gw, rs, rv = nil, nil, nil, nil
		} else {
			count[src]++
		}
		code := codes[r.IntN(len(codes))]
		demand := 0.004*pop + 12*temp + 8*r.NormFloat64()
		rows = append(rows, []any{temp, pop, srcCell, gw, rs, rv, code, district[code], fmt.Sprintf("inspection %d", i%5), demand})
	}
	return rows, count
}

type factorScanJSON struct {
	RowsUsed    int64            `json:"rows_used"`
	RowsDropped int64            `json:"rows_dropped"`
	DroppedBy   map[string]int64 `json:"dropped_by_column"`
	Columns     []struct {
		Name string   `json:"name"`
		VIF  *float64 `json:"vif"`
	} `json:"columns"`
	Dependencies []struct {
		Kind      string `json:"kind"`
		Dependent string `json:"dependent"`
		Equation  string `json:"equation"`
		Words     string `json:"words"`
	} `json:"dependencies"`
	Groups []struct {
		Name         string    `json:"name"`
		Kind         string    `json:"kind"`
		Columns      []string  `json:"columns"`
		DF           int       `json:"df"`
		GVIF         *float64  `json:"gvif"`
		GVIFAdjusted *float64  `json:"gvif_adjusted"`
		Levels       []string  `json:"levels"`
		Counts       []float64 `json:"level_counts"`
		Base         string    `json:"base"`
		Absent       []string  `json:"absent"`
	} `json:"groups"`
	Skipped []struct {
		Name   string `json:"name"`
		Type   string `json:"type"`
		Levels int    `json:"levels"`
		Factor bool   `json:"usable_as_factor"`
	} `json:"skipped_columns"`
}

// A text column named in --columns is a factor: groups[] has its entry
// (the contract: name, df, gvif, gvif_adjusted, levels, base), equal to
// the generalized VIF of hand-built dummies declared with --group
// (identity: one design built two ways), whatever the base.
func TestScanFactor(t *testing.T) {
	path, count := factorTable(t, 400)
	db := "sqlite:" + path
	got := scanAs[factorScanJSON](t, "--db", db, "--table", "district_daily", "--columns", "temperature_c,supply_source,population_served")
	if len(got.Groups) != 1 {
		t.Fatalf("groups %+v", got.Groups)
	}
	g := got.Groups[0]
	if g.Name != "supply_source" || g.Kind != "factor" || g.DF != 2 || g.GVIF == nil || g.GVIFAdjusted == nil {
		t.Fatalf("group %+v", g)
	}
	if !slices.Equal(g.Levels, []string{"groundwater", "reservoir", "river"}) || len(g.Absent) != 0 {
		t.Errorf("levels %v absent %v", g.Levels, g.Absent)
	}
	// The base is the most frequent level; counts are rows per level.
	most := ""
	for _, l := range g.Levels {
		if most == "" || count[l] > count[most] {
			most = l
		}
	}
	if g.Base != most {
		t.Errorf("base %q, want the most frequent %q (%v)", g.Base, most, count)
	}
	for i, l := range g.Levels {
		if g.Counts[i] != float64(count[l]) {
			t.Errorf("level %s: %g rows, want %d", l, g.Counts[i], count[l])
		}
	}
	// NULL in the factor drops the row and is counted on the column.
	nulls := int64((400 - 5 + 36) / 37)
	if got.RowsDropped != nulls || got.DroppedBy["supply_source"] != nulls || got.RowsUsed != 400-nulls {
		t.Errorf("rows used %d dropped %d, by supply_source %d; want %d NULL rows dropped", got.RowsUsed, got.RowsDropped, got.DroppedBy["supply_source"], nulls)
	}
	if *g.GVIF <= 1.05 {
		t.Errorf("GVIF %g: the data make the source lean on the temperature", *g.GVIF)
	}

	// Hand-built dummies without the base, declared as a group.
	var dummies []string
	for _, l := range g.Levels {
		if l != g.Base {
			dummies = append(dummies, "src_"+l)
		}
	}
	hand := scanAs[factorScanJSON](t, "--db", db, "--table", "district_daily",
		"--columns", "temperature_c,"+strings.Join(dummies, ",")+",population_served",
		"--group", "supply="+strings.Join(dummies, ","))
	h := hand.Groups[0]
	if h.Kind != "declared" || h.DF != g.DF {
		t.Fatalf("hand-built group %+v", h)
	}
	if relDiff(*g.GVIF, *h.GVIF) > 1e-12 || relDiff(*g.GVIFAdjusted, *h.GVIFAdjusted) > 1e-12 {
		t.Errorf("factor GVIF %.15g (adjusted %.15g), hand-built dummies %.15g (%.15g)", *g.GVIF, *g.GVIFAdjusted, *h.GVIF, *h.GVIFAdjusted)
	}
	for _, c := range []int{0, 3} {
		if a, b := *got.Columns[c].VIF, *hand.Columns[c].VIF; got.Columns[c].Name != hand.Columns[c].Name || relDiff(a, b) > 1e-12 {
			t.Errorf("VIF(%s) %.15g, beside hand-built dummies VIF(%s) %.15g", got.Columns[c].Name, a, hand.Columns[c].Name, b)
		}
	}

	// Every other base gives the same GVIF (Fox & Monette 1992).
	for _, l := range g.Levels {
		o := scanAs[factorScanJSON](t, "--db", db, "--table", "district_daily", "--columns", "temperature_c,supply_source,population_served", "--base", "supply_source="+l)
		og := o.Groups[0]
		if og.Base != l || relDiff(*og.GVIF, *g.GVIF) > 1e-10 {
			t.Errorf("--base supply_source=%s: base %q GVIF %.15g, default base %.15g", l, og.Base, *og.GVIF, *g.GVIF)
		}
	}
}

func relDiff(a, b float64) float64 {
	if a == b {
		return 0
	}
	return math.Abs(a-b) / math.Max(math.Abs(a), math.Abs(b))
}

// The text report: the factor table, the skipped text columns with their
// number of values and the hint, and the dependency of two factors that
// encode one partition in words.
func TestScanFactorText(t *testing.T) {
	path, _ := factorTable(t, 300)
	db := "sqlite:" + path
	code, out, errs := runCLI(t, "scan", "--quiet", "--db", db, "--table", "district_daily", "--target", "demand_m3")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	for _, want := range []string{
		"skipped columns: ", "supply_source (TEXT, 3 values)", "district (TEXT, 3 values)", "note (TEXT, 5 values)",
		"a text column named in --columns joins as a categorical factor",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q:\n%s", want, out)
		}
	}
	code, out, errs = runCLI(t, "scan", "--quiet", "--db", db, "--table", "district_daily",
		"--columns", "temperature_c,supply_source,district_code,district", "--target", "demand_m3")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	for _, want := range []string{
		"Categorical columns",
		"base level (rows)",
		"GVIF^(1/(2·df))",
		"supply_source  3       ",
		"district_code determines district: each district_code level lies in one district level (east: E1; north: N1 and N2; south: S1)",
		"district: no GVIF: column ",
		"Dropping the categorical column district (all its dummies) would bring every VIF under 10.",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q:\n%s", want, out)
		}
	}
	if strings.Contains(out, "skipped columns: supply_source") || strings.Contains(strings.ReplaceAll(out, "NULL, NaN or ±Inf", ""), "NaN") {
		t.Errorf("output:\n%s", out)
	}
	// JSON: the words beside the equation.
	j := scanAs[factorScanJSON](t, "--db", db, "--table", "district_daily", "--columns", "district_code,district,temperature_c")
	found := false
	for _, d := range j.Dependencies {
		if d.Kind == "exact" {
			found = true
			if !strings.HasPrefix(d.Words, "district_code determines district: ") {
				t.Errorf("%s: words %q", d.Equation, d.Words)
			}
		}
	}
	if !found {
		t.Errorf("no exact dependency: %+v", j.Dependencies)
	}
}

// Mistakes with factors: the target, --base, the limit on levels.
func TestScanFactorErrors(t *testing.T) {
	path, _ := factorTable(t, 120)
	db := "sqlite:" + path
	cases := []struct {
		args []string
		code int
		msg  string
	}{
		{[]string{"--columns", "temperature_c", "--target", "supply_source"}, exitError, "ordinary least-squares"},
		{[]string{"--columns", "temperature_c,supply_source", "--base", "district=north"}, exitUsage, `column "district" is not a categorical column of this scan (categorical here: supply_source)`},
		{[]string{"--columns", "temperature_c,supply_source", "--base", "supply_source"}, exitUsage, "want COLUMN=LEVEL"},
		{[]string{"--columns", "temperature_c,supply_source", "--base", "supply_source=canal", "--base", "supply_source=river"}, exitUsage, "twice"},
		{[]string{"--columns", "temperature_c,supply_source", "--base", "supply_source=canal"}, exitError, `factor "supply_source" has no level "canal"`},
		{[]string{"--columns", "temperature_c,note", "--max-levels", "3"}, exitError, `"note" has more than 3 distinct values`},
		{[]string{"--columns", "temperature_c,note", "--max-levels", "3"}, exitError, "the limit is --max-levels, now 3"},
		{[]string{"--columns", "temperature_c,note", "--max-levels", "1"}, exitUsage, "--max-levels 1: want 2 or more"},
	}
	for _, tc := range cases {
		code, _, errs := runCLI(t, append([]string{"scan", "--quiet", "--db", db, "--table", "district_daily"}, tc.args...)...)
		if code != tc.code || !strings.Contains(errs, tc.msg) {
			t.Errorf("%v: exit %d, %s; want exit %d and %q", tc.args, code, errs, tc.code, tc.msg)
		}
	}
}

// A factor with one level in the rows read has no dummies: the report says
// so in words and has no GVIF, never a NaN.
func TestScanFactorOneLevel(t *testing.T) {
	path, _ := factorTable(t, 200)
	db := "sqlite:" + path
	args := []string{"--db", db, "--table", "district_daily", "--where", "supply_source = 'river'", "--columns", "temperature_c,supply_source,population_served"}
	j := scanAs[factorScanJSON](t, args...)
	if len(j.Groups) != 1 || j.Groups[0].DF != 0 || j.Groups[0].GVIF != nil || j.Groups[0].Base != "river" || len(j.Columns) != 2 {
		t.Fatalf("groups %+v columns %+v", j.Groups, j.Columns)
	}
	code, out, errs := runCLI(t, append([]string{"scan", "--quiet"}, args...)...)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	if !strings.Contains(out, `supply_source: no GVIF: only level "river" occurs in these rows`) {
		t.Errorf("output:\n%s", out)
	}
}

// FuzzParseBases: any --base text either parses into trimmed, non-empty
// column names with the level as given after the first "=", or is a usage
// error; never a panic.
func FuzzParseBases(f *testing.F) {
	for _, s := range []string{"supply_source=river", " tariff_band =B", "=x", "district", "a=b=c", "day_type=", "x=y\x00z"} {
		f.Add(s, "tariff_band=A")
	}
	f.Fuzz(func(t *testing.T, a, b string) {
		got, err := parseBases([]string{a, b})
		if err != nil {
			var u usageError
			if !errors.As(err, &u) {
				t.Fatalf("%q, %q: error %v is not a usage error", a, b, err)
			}
			return
		}
		for _, s := range []string{a, b} {
			col, level, _ := strings.Cut(s, "=")
			col = strings.TrimSpace(col)
			if col == "" || got[col] != level {
				t.Fatalf("%q: parsed %v", s, got)
			}
		}
	})
}
