package main

import (
	"bufio"
	"math"
	"os"
	"strconv"
	"strings"
	"testing"
)

// nistRows reads the data block of a NIST StRD linear dataset
// (testdata/nist, public domain): y and x per row.
func nistRows(t *testing.T, name string) [][2]float64 {
	t.Helper()
	f, err := os.Open("../../testdata/nist/" + name + ".dat")
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	var rows [][2]float64
	data := false
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		fs := strings.Fields(sc.Text())
		if len(fs) == 3 && fs[0] == "Data:" {
			data = true
			continue
		}
		if !data || len(fs) != 2 {
			continue
		}
		y, err1 := strconv.ParseFloat(fs[0], 64)
		x, err2 := strconv.ParseFloat(fs[1], 64)
		if err1 != nil || err2 != nil {
			t.Fatalf("%s: bad data line %q", name, sc.Text())
		}
		rows = append(rows, [2]float64{y, x})
	}
	return rows
}

func lre(got, want float64) float64 {
	if got == want {
		return 15
	}
	if want == 0 {
		return math.Min(15, -math.Log10(math.Abs(got)))
	}
	return math.Min(15, -math.Log10(math.Abs(got-want)/math.Abs(want)))
}

// TestScanPrecisionLadder reads Wampler5 (NIST StRD: y = 1 + x + … + x⁵
// plus large errors, certified coefficients all exactly 1) from a SQLite
// table with the powers of x as columns. In auto precision the scan must
// climb to the double-double QR factor and reproduce the certified
// coefficients to at least 7 digits; with --precision fast it must stay on
// the cross-products and say that they cannot be trusted.
func TestScanPrecisionLadder(t *testing.T) {
	var rows [][]any
	for _, r := range nistRows(t, "Wampler5") {
		x := r[1]
		rows = append(rows, []any{x, x * x, x * x * x, x * x * x * x, x * x * x * x * x, r[0]})
	}
	path := sqliteTable(t, "CREATE TABLE w5 (x REAL, x2 REAL, x3 REAL, x4 REAL, x5 REAL, y REAL)", rows)

	code, out, errs := runCLI(t, "scan", "--format", "json", "--db", "sqlite:"+path, "--table", "w5", "--target", "y")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var s struct {
		Path  string `json:"path"`
		Trust struct {
			Trustworthy bool `json:"trustworthy"`
		} `json:"numerical_trust"`
		Regression struct {
			Coefficients []struct {
				Name     string  `json:"name"`
				Estimate float64 `json:"estimate"`
			} `json:"coefficients"`
		} `json:"regression"`
	}
	decode(t, out, &s)
	if s.Path != "qr-precise" || !s.Trust.Trustworthy {
		t.Errorf("path %q trustworthy %v, want qr-precise and trusted; stderr: %s", s.Path, s.Trust.Trustworthy, errs)
	}
	if !strings.Contains(errs, "reading again") {
		t.Errorf("the climb up the ladder was not announced on stderr: %q", errs)
	}
	if len(s.Regression.Coefficients) != 6 {
		t.Fatalf("coefficients %+v", s.Regression.Coefficients)
	}
	for _, c := range s.Regression.Coefficients {
		if d := lre(c.Estimate, 1); d < 7 {
			t.Errorf("%s = %.15g: LRE %.2f against the certified 1, want ≥ 7", c.Name, c.Estimate, d)
		}
	}

	code, out, errs = runCLI(t, "scan", "--format", "json", "--precision", "fast", "--db", "sqlite:"+path, "--table", "w5", "--target", "y")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	decode(t, out, &s)
	if s.Path != "cross-product" || s.Trust.Trustworthy {
		t.Errorf("--precision fast: path %q trustworthy %v, want cross-product and not trusted", s.Path, s.Trust.Trustworthy)
	}
}
