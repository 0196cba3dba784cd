package main

import (
	"bytes"
	"context"
	"database/sql"
	"encoding/json"
	"math"
	"math/rand/v2"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"plumb/agent/demo"
)

// runCLI runs plumb with args and returns its exit code, stdout and stderr.
func runCLI(t *testing.T, args ...string) (int, string, string) {
	t.Helper()
	var out, errb bytes.Buffer
	code := run(context.Background(), args, &out, &errb)
	return code, out.String(), errb.String()
}

// sqliteTable writes a table into a new SQLite file and returns its path.
func sqliteTable(t *testing.T, ddl string, rows [][]any) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), "t.db")
	db, err := sql.Open("sqlite", "file:"+path+"?mode=rwc")
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if _, err := db.Exec(ddl); err != nil {
		t.Fatal(err)
	}
	if len(rows) > 0 {
		marks := strings.TrimSuffix(strings.Repeat("?,", len(rows[0])), ",")
		name := strings.Fields(ddl)[2]
		tx, err := db.Begin()
		if err != nil {
			t.Fatal(err)
		}
		for _, r := range rows {
			if _, err := tx.Exec("INSERT INTO "+name+" VALUES ("+marks+")", r...); err != nil {
				t.Fatal(err)
			}
		}
		if err := tx.Commit(); err != nil {
			t.Fatal(err)
		}
	}
	return path
}

type scanJSON struct {
	RowsUsed    int64 `json:"rows_used"`
	RowsDropped int64 `json:"rows_dropped"`
	Columns     []struct {
		Name      string   `json:"name"`
		VIF       *float64 `json:"vif"`
		Tolerance *float64 `json:"tolerance"`
		R2        *float64 `json:"r2"`
		Constant  bool     `json:"constant"`
	} `json:"columns"`
	ConditionNumber         float64   `json:"condition_number"`
	ConditionIndices        []float64 `json:"condition_indices"`
	CenteredConditionNumber float64   `json:"centered_condition_number"`
	Rank                    int       `json:"rank"`
	Dependencies            []struct {
		Kind           string             `json:"kind"`
		Columns        []string           `json:"columns"`
		Dependent      string             `json:"dependent"`
		Coefficients   map[string]float64 `json:"coefficients"`
		Intercept      *float64           `json:"intercept"`
		Equation       string             `json:"equation"`
		ConditionIndex float64            `json:"condition_index"`
		Proportions    map[string]float64 `json:"proportions"`
		WithIntercept  bool               `json:"includes_intercept"`
	} `json:"dependencies"`
	ProportionNames []string `json:"proportion_names"`
	Regression      *struct {
		Coefficients []struct {
			Name        string  `json:"name"`
			IsIntercept bool    `json:"is_intercept"`
			Estimate    float64 `json:"estimate"`
			StdError    float64 `json:"std_error"`
			T           float64 `json:"t"`
		} `json:"coefficients"`
		Sigma float64 `json:"sigma"`
		R2    float64 `json:"r2"`
	} `json:"regression"`
	Skipped []struct{ Name, Type string } `json:"skipped_columns"`
}

// scanAs runs plumb scan --format json with args and decodes its report
// into a T; the scan must succeed and its output be JSON.
func scanAs[T any](t *testing.T, args ...string) T {
	t.Helper()
	code, out, errs := runCLI(t, append([]string{"scan", "--format", "json", "--quiet"}, args...)...)
	if code != 0 {
		t.Fatalf("plumb scan %v: exit %d: %s", args, code, errs)
	}
	var s T
	decode(t, out, &s)
	return s
}

func decode(t *testing.T, out string, v any) {
	t.Helper()
	if err := json.Unmarshal([]byte(out), v); err != nil {
		t.Fatalf("plumb output is not JSON: %v\n%s", err, out)
	}
}

func TestScanSampleText(t *testing.T) {
	code, out, errs := runCLI(t, "scan", "--quiet")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	for _, want := range []string{"rows used 480", "billed_volume_m3", "Condition number", "Least-squares fit of demand_m3", "omitted-variable bias"} {
		if !strings.Contains(out, want) {
			t.Errorf("report lacks %q:\n%s", want, out)
		}
	}
}

func TestScanSampleJSONContract(t *testing.T) {
	path := filepath.Join(t.TempDir(), "d.db")
	if err := demo.Default.WriteSQLite(context.Background(), path); err != nil {
		t.Fatal(err)
	}
	s := scanAs[scanJSON](t, "--db", "sqlite:"+path, "--table", demo.Table, "--target", demo.Target)
	if s.RowsUsed != int64(demo.Default.Days*len(demo.Default.Districts)) || s.RowsDropped != 0 {
		t.Errorf("rows used %d dropped %d", s.RowsUsed, s.RowsDropped)
	}
	// day, district and supply_source are text: skipped and listed.
	if len(s.Skipped) != 3 {
		t.Errorf("skipped %v, want day, district and supply_source", s.Skipped)
	}
	if len(s.Columns) != 11 {
		t.Fatalf("%d columns, want the 11 numeric features", len(s.Columns))
	}
	vif := map[string]float64{}
	for _, c := range s.Columns {
		if c.VIF == nil {
			t.Fatalf("column %s: VIF null on data without exact dependencies", c.Name)
		}
		// Tolerance is the reciprocal of VIF and R² = 1 − tolerance (definition).
		if math.Abs(*c.Tolerance**c.VIF-1) > 1e-12 || math.Abs(*c.R2-(1-*c.Tolerance)) > 1e-12 {
			t.Errorf("column %s: vif %v tolerance %v r2 %v inconsistent", c.Name, *c.VIF, *c.Tolerance, *c.R2)
		}
		vif[c.Name] = *c.VIF
	}
	// The scenario writes total_connections as its parts plus a few other
	// connections before the change and as their exact sum after it, so
	// the total and its parts must be the most inflated over the whole
	// period; rainfall is drawn independently of everything.
	if vif["total_connections"] < 10 || vif["residential_connections"] < 10 {
		t.Errorf("expected high VIFs for the total and its parts: %v", vif)
	}
	if vif["rainfall_mm"] > 5 {
		t.Errorf("rainfall VIF %v: rainfall is generated independently", vif["rainfall_mm"])
	}
	if s.Rank != 12 {
		t.Errorf("rank %d, want 12 (full rank: the total is exact only from day %d)", s.Rank, demo.Default.ChangeDay)
	}
	if len(s.ConditionIndices) != 12 || s.ConditionNumber < s.CenteredConditionNumber {
		t.Errorf("condition indices %v, number %v, centered %v", s.ConditionIndices, s.ConditionNumber, s.CenteredConditionNumber)
	}
	if s.Regression == nil || len(s.Regression.Coefficients) != 12 || s.Regression.Coefficients[0].Name != "intercept" || !s.Regression.Coefficients[0].IsIntercept {
		t.Fatalf("regression %+v", s.Regression)
	}
}

// TestScanExactDependencyEquation checks the equation of an exact total on
// the sample's days after the upstream change, where the scenario writes
// total_connections as the sum of its parts.
func TestScanExactDependencyEquation(t *testing.T) {
	path := filepath.Join(t.TempDir(), "d.db")
	if err := demo.Default.WriteSQLite(context.Background(), path); err != nil {
		t.Fatal(err)
	}
	from := demo.Default.Start.AddDate(0, 0, demo.Default.ChangeDay).Format("2006-01-02")
	s := scanAs[scanJSON](t, "--db", "sqlite:"+path, "--table", demo.Table, "--where", "day >= '"+from+"'",
		"--columns", "residential_connections,commercial_connections,total_connections,temperature_c")
	var found bool
	for _, d := range s.Dependencies {
		if d.Kind != "exact" {
			continue
		}
		found = true
		if d.Dependent != "total_connections" || d.Intercept == nil || math.Abs(*d.Intercept) > 1e-6 ||
			math.Abs(d.Coefficients["residential_connections"]-1) > 1e-9 || math.Abs(d.Coefficients["commercial_connections"]-1) > 1e-9 {
			t.Errorf("dependency %+v, want total_connections = 1·residential + 1·commercial + 0", d)
		}
		if !strings.HasPrefix(d.Equation, "total_connections = 1·") {
			t.Errorf("equation %q", d.Equation)
		}
	}
	if !found || s.Rank != 4 {
		t.Errorf("rank %d, dependencies %+v: want one exact dependency, rank 4 of 5", s.Rank, s.Dependencies)
	}
	for _, c := range s.Columns {
		if c.Name == "temperature_c" && c.VIF == nil {
			t.Errorf("temperature_c takes no part in the dependency: its VIF must be defined")
		}
		if c.Name == "total_connections" && c.VIF != nil {
			t.Errorf("total_connections VIF %v, want null (exact dependency)", *c.VIF)
		}
	}
}

func TestScanDropsMissingRows(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 7))
	var rows [][]any
	for i := 0; i < 50; i++ {
		a, b := rng.NormFloat64(), rng.NormFloat64()
		var c any = a + b + rng.NormFloat64()
		if i%10 == 3 {
			c = nil
		}
		rows = append(rows, []any{a, b, c})
	}
	path := sqliteTable(t, "CREATE TABLE readings (a REAL, b REAL, c REAL)", rows)
	s := scanAs[scanJSON](t, "--db", "sqlite:"+path, "--table", "readings")
	if s.RowsUsed != 45 || s.RowsDropped != 5 {
		t.Errorf("used %d dropped %d, want 45 and 5", s.RowsUsed, s.RowsDropped)
	}
}

func TestScanErrors(t *testing.T) {
	good := sqliteTable(t, "CREATE TABLE district_daily (day TEXT, temperature_c REAL, rainfall_mm REAL, pressure_bar REAL)",
		[][]any{{"2026-06-01", 14.2, 0.0, 3.4}, {"2026-06-02", 15.1, 2.5, 3.5}, {"2026-06-03", 13.0, 0.4, 3.3}})
	nulls := sqliteTable(t, "CREATE TABLE district_daily (temperature_c REAL, rainfall_mm REAL)",
		[][]any{{14.2, nil}, {15.1, nil}, {13.0, nil}, {12.0, nil}})
	empty := sqliteTable(t, "CREATE TABLE district_daily (temperature_c REAL, rainfall_mm REAL)", nil)
	blob := sqliteTable(t, "CREATE TABLE district_daily (temperature_c REAL, meter_image BLOB)",
		[][]any{{14.2, []byte{1}}, {15.1, []byte{2}}, {13.0, []byte{3}}})
	for _, tc := range []struct {
		name string
		args []string
		code int
		want []string // substrings of the one error line
	}{
		{"missing table", []string{"--db", "sqlite:" + good, "--table", "no_such_table"}, exitError, []string{"no_such_table"}},
		{"missing column", []string{"--db", "sqlite:" + good, "--table", "district_daily", "--columns", "temperature_c,flow"}, exitError, []string{"district_daily", `"flow"`}},
		{"blob column", []string{"--db", "sqlite:" + blob, "--table", "district_daily", "--columns", "temperature_c,meter_image"}, exitError, []string{"district_daily", `"meter_image"`, "BLOB"}},
		{"too few rows", []string{"--db", "sqlite:" + good, "--table", "district_daily"}, exitError, []string{"district_daily", "rows"}},
		{"all rows dropped", []string{"--db", "sqlite:" + nulls, "--table", "district_daily"}, exitError, []string{"district_daily", "rainfall_mm"}},
		{"zero rows", []string{"--db", "sqlite:" + empty, "--table", "district_daily"}, exitError, []string{"district_daily", "rows"}},
		{"missing database file", []string{"--db", "sqlite:" + filepath.Join(t.TempDir(), "none.db"), "--table", "t"}, exitError, []string{"none.db"}},
		{"quote in identifier", []string{"--db", "sqlite:" + good, "--table", `district_daily"; DROP TABLE district_daily; --`}, exitError, []string{"DROP TABLE"}},
		{"bad format", []string{"--db", "sqlite:" + good, "--table", "district_daily", "--format", "xml"}, exitUsage, []string{"--format"}},
		{"table and query", []string{"--db", "sqlite:" + good, "--table", "a", "--query", "SELECT 1"}, exitUsage, []string{"--table", "--query"}},
		{"unknown scheme", []string{"--db", "mysql://x/y", "--table", "a"}, exitError, []string{"mysql"}},
		{"bad group", []string{"--db", "sqlite:" + good, "--table", "district_daily", "--group", "nocolumns"}, exitUsage, []string{"--group"}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			code, out, errs := runCLI(t, append([]string{"scan", "--quiet"}, tc.args...)...)
			if code != tc.code {
				t.Fatalf("exit %d, want %d; stderr: %s", code, tc.code, errs)
			}
			if out != "" {
				t.Errorf("stdout not empty on error: %s", out)
			}
			first, _, _ := strings.Cut(errs, "\n")
			for _, w := range tc.want {
				if !strings.Contains(first, w) {
					t.Errorf("error %q lacks %q", first, w)
				}
			}
			if strings.Contains(errs, "goroutine ") || strings.Contains(errs, "panic") {
				t.Errorf("stack trace on stderr: %s", errs)
			}
		})
	}
	// The table survives the identifier with DROP TABLE in it.
	s := scanAs[scanJSON](t, "--db", "sqlite:"+good, "--table", "district_daily", "--columns", "temperature_c")
	if s.RowsUsed != 3 {
		t.Errorf("after the hostile identifier the table has %d rows, want 3", s.RowsUsed)
	}
}

func TestScanHelp(t *testing.T) {
	code, out, _ := runCLI(t, "scan", "--help")
	if code != 0 {
		t.Fatalf("exit %d", code)
	}
	for _, flag := range []string{"--db", "--table", "--query", "--columns", "--target", "--group", "--format"} {
		if !strings.Contains(out, flag) {
			t.Errorf("help lacks %s", flag)
		}
	}
}

// TestScanRegressionPrintout pins plumb's own regression layout: a fit line
// with R² and the residual SD in the target's units, a header with units,
// and the intercept named "intercept" in text and JSON (is_intercept on its
// coefficient, first of proportion_names), distinguishable from a column of
// that name.
func TestScanRegressionPrintout(t *testing.T) {
	code, out, errs := runCLI(t, "scan", "--quiet")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	for _, want := range []string{
		"Least-squares fit of demand_m3 on 11 columns and an intercept, 480 rows: R² ",
		", residual SD ",
		"  coefficient ", " estimate ", " in units of ", " standard error ", " estimate ÷ SE\n",
		"demand_m3 (all columns 0)",
		"demand_m3 per temperature_c",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("report lacks %q:\n%s", want, out)
		}
	}
	for _, gone := range []string{"(intercept)", "std error", "degrees of freedom", "sigma "} {
		if strings.Contains(out, gone) {
			t.Errorf("report says %q:\n%s", gone, out)
		}
	}
	if !regexp.MustCompile(`(?m)^  intercept +-?[0-9]`).MatchString(out) {
		t.Errorf("no intercept row:\n%s", out)
	}

	// A column called "intercept" beside the real one, in a near
	// dependency with it: y = 2·intercept_col + noise, intercept_col ≈ 1000 ± 1.
	var rows [][]any
	for i := range 60 {
		x := 1000 + float64(i%7)/7
		z := float64((i * 37) % 11)
		rows = append(rows, []any{x, z, 2*x + z + float64(i%3)})
	}
	path := sqliteTable(t, "CREATE TABLE meters (intercept REAL, z REAL, y REAL)", rows)
	s := scanAs[scanJSON](t, "--db", "sqlite:"+path, "--table", "meters", "--target", "y")
	if s.Regression == nil || len(s.Regression.Coefficients) != 3 {
		t.Fatalf("regression %+v", s.Regression)
	}
	var real, col int
	for _, c := range s.Regression.Coefficients {
		if c.Name != "intercept" && c.Name != "z" {
			t.Errorf("coefficient named %q", c.Name)
		}
		if c.IsIntercept {
			real++
		} else if c.Name == "intercept" {
			col++
		}
	}
	if real != 1 || col != 1 || !s.Regression.Coefficients[0].IsIntercept {
		t.Errorf("want the intercept first with is_intercept and the column apart: %+v", s.Regression.Coefficients)
	}
	if len(s.ProportionNames) == 0 || s.ProportionNames[0] != "intercept" {
		t.Errorf("proportion_names %v: want intercept first", s.ProportionNames)
	}
	var near bool
	for _, d := range s.Dependencies {
		if d.Kind == "near" && d.WithIntercept {
			near = true
		}
	}
	if !near {
		t.Errorf("no near dependency marked includes_intercept (a column of mean 1000 and spread 0.3 is nearly the intercept): %+v", s.Dependencies)
	}
}

// TestScanUnusableGroupsOneLine: groups of --bucket and --segment that
// cannot be analysed are summed up in one line, not one line each (the
// sample's 120 days × 4 districts would be 480 lines).
func TestScanUnusableGroupsOneLine(t *testing.T) {
	code, out, errs := runCLI(t, "scan", "--quiet", "--time-column", "day", "--bucket", "day", "--segment", "district")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	want := "480 of 480 groups could not be analysed: 480 with too few usable rows (1 row each; first 2026-"
	if strings.Count(out, "could not be analysed") != 1 || !strings.Contains(out, want) || strings.Count(out, "\n") > 80 {
		t.Fatalf("want one summary line %q in a short report:\n%s", want, out)
	}
	// JSON keeps each group's error.
	code, out, _ = runCLI(t, "scan", "--quiet", "--format", "json", "--time-column", "day", "--bucket", "day", "--segment", "district")
	if code != 0 || strings.Count(out, "too few usable rows") != 480 {
		t.Fatalf("json: exit %d, %d group errors", code, strings.Count(out, "too few usable rows"))
	}
	// Monthly groups of two columns all have rows enough: a table, no
	// summary line.
	code, out, _ = runCLI(t, "scan", "--quiet", "--time-column", "day", "--bucket", "month", "--segment", "district", "--columns", "temperature_c,rainfall_mm")
	if code != 0 || strings.Contains(out, "could not be analysed") || strings.Count(out, " harbour ") != 4 {
		t.Fatalf("monthly groups: exit %d\n%s", code, out)
	}
}
