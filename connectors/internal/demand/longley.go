package demand

import (
	"bufio"
	"fmt"
	"gonum.org/v1/gonum/mat"
	"os"
	"strconv"
	"strings"
)

// LongleyColumns name the Longley data's columns: the predictors x1…x6,
// then the response y last (the target goes last in a request).
var LongleyColumns = []string{"x1", "x2", "x3", "x4", "x5", "x6", "y"}

// LongleyCertified are NIST's certified estimates B0…B6 (certified, NIST
// StRD Longley.dat, lines 31 to 51).
var LongleyCertified = []float64{
	-3482258.63459582, 15.0618722713733, -0.358191792925910e-01, -2.02022980381683,
	-1.03322686717359, -0.511041056535807e-01, 1829.15146461355,
}

// ReadLongley reads NIST's Longley.dat (data on lines 61 to 76: y x1 … x6)
// and returns rows ordered as LongleyColumns.
func ReadLongley(path string) ([][]float64, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	var rows [][]float64
	sc := bufio.NewScanner(f)
	for line := 1; sc.Scan(); line++ {
		if line < 61 || line > 76 {
			continue
		}
		fs := strings.Fields(sc.Text())
		if len(fs) != 7 {
			return nil, fmt.Errorf("%s:%d: %d fields, want 7", path, line, len(fs))
		}
		r := make([]float64, 7)
		for i, s := range fs {
			v, err := strconv.ParseFloat(s, 64)
			if err != nil {
				return nil, fmt.Errorf("%s:%d: %w", path, line, err)
			}
			if i == 0 {
				r[6] = v
			} else {
				r[i-1] = v
			}
		}
		rows = append(rows, r)
	}
	if len(rows) != 16 {
		return nil, fmt.Errorf("%s: %d data rows, want 16", path, len(rows))
	}
	return rows, sc.Err()
}

// Coefficients solves the least-squares fit of the last column on the
// others with an intercept from a QR accumulator over LongleyColumns-like
// columns (target last): back substitution on the R factor, so the
// condition number is not squared. It returns B0 (intercept) then one slope
// per predictor, in the data's own units.
func Coefficients(q interface {
	P() int
	Origin(int) float64
	Scale(int) float64
	R(dst *mat.TriDense) *mat.TriDense
}) []float64 {
	r := q.R(nil)
	n := q.P() // intercept + predictors; column n is the target
	beta := make([]float64, n)
	for i := n - 1; i >= 0; i-- {
		s := r.At(i, n)
		for k := i + 1; k < n; k++ {
			s -= r.At(i, k) * beta[k]
		}
		beta[i] = s / r.At(i, i)
	}
	// R is the factor of the columns (x − c)/s: (y − c_y)/s_y = β0 +
	// Σ β_j (x_j − c_j)/s_j, so b_j = β_j·s_y/s_j and
	// B0 = c_y + s_y·β0 − Σ b_j c_j.
	sy := q.Scale(n - 1)
	b0 := q.Origin(n-1) + sy*beta[0]
	for j := 1; j < n; j++ {
		beta[j] *= sy / q.Scale(j-1)
		b0 -= beta[j] * q.Origin(j-1)
	}
	beta[0] = b0
	return beta
}
