package main

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"
)

// extremeJSON is the part of plumb scan's JSON report the magnitude tests
// read.
type extremeJSON struct {
	Path    string `json:"path"`
	Columns []struct {
		Name         string   `json:"name"`
		VIF          *float64 `json:"vif"`
		Constant     bool     `json:"constant"`
		NearConstant bool     `json:"near_constant"`
		Undefined    string   `json:"vif_undefined"`
		Mean         float64  `json:"mean"`
		SD           float64  `json:"sd"`
	} `json:"columns"`
	ConditionIndices         []float64 `json:"condition_indices"`
	CenteredConditionIndices []float64 `json:"centered_condition_indices"`
	Rank                     int       `json:"rank"`
	Dependencies             []struct {
		Kind         string             `json:"kind"`
		Dependent    string             `json:"dependent"`
		Coefficients map[string]float64 `json:"coefficients"`
		Intercept    *float64           `json:"intercept"`
		Equation     string             `json:"equation"`
	} `json:"dependencies"`
	Trust struct {
		Trustworthy bool `json:"trustworthy"`
	} `json:"numerical_trust"`
}

// connectionsRows is a day per row of one supply district: residential and
// commercial connections and their exact total, the temperature, and
// metered and billed volume (billed a near copy of metered), every value
// multiplied by 2^k, which is exact.
func connectionsRows(k int) [][]any {
	rng := rand.New(rand.NewPCG(154, 200))
	var rows [][]any
	for range 240 {
		res := math.Round(18000 + 400*rng.NormFloat64())
		com := math.Round(1800 + 60*rng.NormFloat64())
		temp := math.Round((15+6*rng.NormFloat64())*64) / 64
		metered := math.Round(0.2*res+300*temp+500*rng.NormFloat64()) + 7000
		billed := math.Round(0.97*metered + 30*rng.NormFloat64())
		row := []any{}
		for _, v := range []float64{res, com, res + com, temp, metered, billed} {
			row = append(row, math.Ldexp(v, k))
		}
		rows = append(rows, row)
	}
	return rows
}

const connectionsDDL = `CREATE TABLE district_daily (residential_connections REAL, commercial_connections REAL,
	total_connections REAL, temperature_c REAL, metered_volume_m3 REAL, billed_volume_m3 REAL)`

// TestScanExtremeMagnitudes: the same district table at ordinary scale and
// multiplied by 2^520 (about 3e156: products overflow), 2^997 (about 1e300),
// 2^-664 (about 1e-200: products underflow) and 2^-997 (about 1e-300) gives
// on every precision the same VIFs, condition indices, rank and trust
// verdict, and the exact total as the same equation in the columns' own
// units (property: multiplying every column by one power of two changes
// none of these). Before the columns were scaled, 1e154 and above ended in
// NaN or a JSON encoding error, and 1e-200 in columns "nearly constant".
func TestScanExtremeMagnitudes(t *testing.T) {
	ref := map[string]extremeJSON{}
	for _, k := range []int{0, 520, 997, -664, -997} {
		path := sqliteTable(t, connectionsDDL, connectionsRows(k))
		for _, precision := range []string{"auto", "exact", "precise"} {
			what := fmt.Sprintf("2^%d, --precision %s", k, precision)
			s := scanAs[extremeJSON](t, "--db", "sqlite:"+path, "--table", "district_daily", "--precision", precision)
			if k == 0 {
				ref[precision] = s
				if s.Rank != 6 || len(s.Dependencies) == 0 || s.Dependencies[0].Kind != "exact" {
					t.Fatalf("%s: rank %d, dependencies %+v: want the exact total first", what, s.Rank, s.Dependencies)
				}
				continue
			}
			r := ref[precision]
			if s.Path != r.Path || s.Rank != r.Rank || s.Trust.Trustworthy != r.Trust.Trustworthy {
				t.Errorf("%s: path %s, rank %d, trustworthy %v; at ordinary scale %s, %d, %v", what,
					s.Path, s.Rank, s.Trust.Trustworthy, r.Path, r.Rank, r.Trust.Trustworthy)
			}
			for i, c := range r.Columns {
				g := s.Columns[i]
				if g.Name != c.Name || g.Constant || g.NearConstant || g.Undefined != c.Undefined {
					t.Errorf("%s: column %+v, at ordinary scale %+v", what, g, c)
					continue
				}
				if (g.VIF == nil) != (c.VIF == nil) || (c.VIF != nil && math.Abs(*g.VIF / *c.VIF - 1) > 1e-9) {
					t.Errorf("%s: %s: VIF %v, at ordinary scale %v", what, c.Name, deref(g.VIF), deref(c.VIF))
				}
				if math.Abs(math.Ldexp(g.SD, -k)/c.SD-1) > 1e-9 || math.Abs(math.Ldexp(g.Mean, -k)/c.Mean-1) > 1e-12 {
					t.Errorf("%s: %s: mean %g sd %g, want %g and %g times 2^%d", what, c.Name, g.Mean, g.SD, c.Mean, c.SD, k)
				}
			}
			for _, pair := range [][2][]float64{{s.ConditionIndices, r.ConditionIndices}, {s.CenteredConditionIndices, r.CenteredConditionIndices}} {
				if len(pair[0]) != len(pair[1]) {
					t.Errorf("%s: condition indices %v, at ordinary scale %v", what, pair[0], pair[1])
					continue
				}
				for i := range pair[1] {
					// The singular direction's index is rounding (about
					// 1/eps) and not compared.
					if pair[1][i] < 1e6 && math.Abs(pair[0][i]/pair[1][i]-1) > 1e-9 {
						t.Errorf("%s: condition index %d = %v, at ordinary scale %v", what, i, pair[0][i], pair[1][i])
					}
				}
			}
			if len(s.Dependencies) != len(r.Dependencies) {
				t.Errorf("%s: dependencies %+v, at ordinary scale %+v", what, s.Dependencies, r.Dependencies)
				continue
			}
			for i, d := range s.Dependencies[1:] {
				if d.Kind != r.Dependencies[i+1].Kind {
					t.Errorf("%s: dependency %+v, at ordinary scale %+v", what, d, r.Dependencies[i+1])
				}
			}
			d := s.Dependencies[0]
			if d.Kind != "exact" || d.Dependent != "total_connections" || d.Intercept == nil || *d.Intercept != 0 ||
				math.Abs(d.Coefficients["residential_connections"]-1) > 1e-9 || math.Abs(d.Coefficients["commercial_connections"]-1) > 1e-9 ||
				!strings.HasPrefix(d.Equation, "total_connections = 1·") || !strings.HasSuffix(d.Equation, " + 0") {
				t.Errorf("%s: dependency %+v, want total_connections = 1·residential_connections + 1·commercial_connections + 0", what, d)
			}
		}
	}
}

// TestScanUniformHuge: a column uniform on [0, 1e300) beside one of
// ordinary size is neither constant nor part of an exact dependency (it was
// reported as `a = 4.8e+299`, or the scan ended with exit 70 "index out of
// range"), on every precision: both VIFs are about 1 (the columns are drawn
// independently) and the standard deviation about 1e300/√12 (uniform
// distribution).
func TestScanUniformHuge(t *testing.T) {
	rng := rand.New(rand.NewPCG(300, 1))
	var rows [][]any
	for range 400 {
		rows = append(rows, []any{rng.Float64() * 1e300, 15 + 6*rng.NormFloat64()})
	}
	path := sqliteTable(t, "CREATE TABLE district_daily (leakage_index REAL, temperature_c REAL)", rows)
	for _, precision := range []string{"auto", "fast", "exact", "precise"} {
		s := scanAs[extremeJSON](t, "--db", "sqlite:"+path, "--table", "district_daily", "--precision", precision)
		if len(s.Dependencies) != 0 || s.Rank != 3 {
			t.Errorf("--precision %s: rank %d, dependencies %+v: want full rank, none", precision, s.Rank, s.Dependencies)
		}
		for _, c := range s.Columns {
			if c.Constant || c.NearConstant || c.VIF == nil || *c.VIF < 1 || *c.VIF > 1.05 {
				t.Errorf("--precision %s: column %+v: want a VIF near 1", precision, c)
			}
		}
		if sd := s.Columns[0].SD; math.Abs(sd/(1e300/math.Sqrt(12))-1) > 0.1 {
			t.Errorf("--precision %s: sd %g, want about %g", precision, sd, 1e300/math.Sqrt(12))
		}
	}
}

// TestScanTinyNotConstant: values near 1e-200 (a flow in cubic kilometres
// per nanosecond, say) vary as much, relative to their size, as the same
// values near 1: they are not "nearly constant" with sd 0, their VIFs are
// those of the data at ordinary scale, and the text report says so too.
func TestScanTinyNotConstant(t *testing.T) {
	path := sqliteTable(t, connectionsDDL, connectionsRows(-664))
	s := scanAs[extremeJSON](t, "--db", "sqlite:"+path, "--table", "district_daily",
		"--columns", "residential_connections,temperature_c,metered_volume_m3,billed_volume_m3")
	for _, c := range s.Columns {
		if c.Constant || c.NearConstant || !(c.SD > 0) || c.VIF == nil {
			t.Errorf("column %+v: want a varying column with a VIF", c)
		}
	}
	code, out, errs := runCLI(t, "scan", "--quiet", "--db", "sqlite:"+path, "--table", "district_daily")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	if strings.Contains(out, "nearly constant") || strings.Contains(out, "NaN") {
		t.Errorf("text report of data near 1e-200:\n%s", out)
	}
	if !slices.ContainsFunc(strings.Split(out, "\n"), func(l string) bool {
		return strings.Contains(l, "total_connections = 1·residential_connections + 1·commercial_connections + 0")
	}) {
		t.Errorf("text report lacks the exact total:\n%s", out)
	}
}

func deref(p *float64) any {
	if p == nil {
		return nil
	}
	return *p
}
