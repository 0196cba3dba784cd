package stream

import (
	"math"
	"math/big"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// This file holds the references and helpers the accumulator tests share.
// The reference values are computed in the test with exact rational
// arithmetic (math/big.Rat): every float64 input converts to a rational
// exactly, so the two-pass mean and co-moments below carry no rounding error
// until their final conversion to float64.

// exactRef is the exact two-pass result for a set of rows.
type exactRef struct {
	sw   float64     // Σw
	mean []float64   // Σw·x / Σw
	co   [][]float64 // Σw·(x − x̄)(x − x̄)ᵀ
}

func rat(x float64) *big.Rat {
	r := new(big.Rat)
	if r.SetFloat64(x) == nil {
		panic("rat: non-finite value")
	}
	return r
}

func ratFloat(r *big.Rat) float64 {
	f, _ := r.Float64()
	return f
}

// exactMoments is the two-pass reference, in exact rational arithmetic
// computed in the test. w nil means unit weights.
func exactMoments(rows [][]float64, w []float64) exactRef { return exactMomentsIn(rows, w, nil) }

// exactMomentsIn is exactMoments with column j measured in units of
// 2^unit[j] (unit nil: all 0), so that references beyond the range of
// float64 in the columns' own units can be compared: mean_j/2^unit[j] and
// co_ab/2^(unit[a]+unit[b]), rounded once.
func exactMomentsIn(rows [][]float64, w []float64, unit []int) exactRef {
	p := len(rows[0])
	pow2 := func(k int) *big.Rat {
		one := big.NewInt(1)
		if k >= 0 {
			return new(big.Rat).SetInt(new(big.Int).Lsh(one, uint(k)))
		}
		return new(big.Rat).SetFrac(one, new(big.Int).Lsh(one, uint(-k)))
	}
	u := func(j int) int {
		if unit == nil {
			return 0
		}
		return unit[j]
	}
	sw := new(big.Rat)
	sum := make([]*big.Rat, p)
	for j := range sum {
		sum[j] = new(big.Rat)
	}
	t := new(big.Rat)
	for i, row := range rows {
		wi := big.NewRat(1, 1)
		if w != nil {
			wi = rat(w[i])
		}
		sw.Add(sw, wi)
		for j, v := range row {
			sum[j].Add(sum[j], t.Mul(wi, rat(v)))
		}
	}
	mean := make([]*big.Rat, p)
	for j := range mean {
		mean[j] = new(big.Rat).Quo(sum[j], sw)
	}
	co := make([][]*big.Rat, p)
	for a := range co {
		co[a] = make([]*big.Rat, p)
		for b := range co[a] {
			co[a][b] = new(big.Rat)
		}
	}
	da := make([]*big.Rat, p)
	for j := range da {
		da[j] = new(big.Rat)
	}
	for i, row := range rows {
		wi := big.NewRat(1, 1)
		if w != nil {
			wi = rat(w[i])
		}
		for j, v := range row {
			da[j].Sub(rat(v), mean[j])
		}
		for a := 0; a < p; a++ {
			for b := a; b < p; b++ {
				t.Mul(da[a], da[b])
				t.Mul(t, wi)
				co[a][b].Add(co[a][b], t)
			}
		}
	}
	ref := exactRef{sw: ratFloat(sw), mean: make([]float64, p), co: make([][]float64, p)}
	for a := 0; a < p; a++ {
		ref.mean[a] = ratFloat(t.Mul(mean[a], pow2(-u(a))))
		ref.co[a] = make([]float64, p)
	}
	for a := 0; a < p; a++ {
		for b := a; b < p; b++ {
			ref.co[a][b] = ratFloat(t.Mul(co[a][b], pow2(-u(a)-u(b))))
			ref.co[b][a] = ref.co[a][b]
		}
	}
	return ref
}

// exactGram returns Σw·a·aᵀ with a = (1, x − c), in exact rational
// arithmetic computed in the test: the cross-products of the design whose R
// factor the QR accumulator holds.
func exactGram(rows [][]float64, w []float64, c []float64) [][]float64 {
	p := len(c)
	n := p + 1
	g := make([][]*big.Rat, n)
	for a := range g {
		g[a] = make([]*big.Rat, n)
		for b := range g[a] {
			g[a][b] = new(big.Rat)
		}
	}
	v := make([]*big.Rat, n)
	t := new(big.Rat)
	for i, row := range rows {
		wi := big.NewRat(1, 1)
		if w != nil {
			wi = rat(w[i])
		}
		v[0] = big.NewRat(1, 1)
		for j, x := range row {
			v[j+1] = new(big.Rat).Sub(rat(x), rat(c[j]))
		}
		for a := 0; a < n; a++ {
			for b := a; b < n; b++ {
				t.Mul(v[a], v[b])
				t.Mul(t, wi)
				g[a][b].Add(g[a][b], t)
			}
		}
	}
	out := make([][]float64, n)
	for a := range out {
		out[a] = make([]float64, n)
	}
	for a := 0; a < n; a++ {
		for b := a; b < n; b++ {
			out[a][b] = ratFloat(g[a][b])
			out[b][a] = out[a][b]
		}
	}
	return out
}

// column describes one generated column: x = mean + sd·(z + mix·z₀), where
// z and z₀ are standard normal and z₀ is shared by all columns, so columns
// with mix ≠ 0 are correlated.
type column struct {
	name string
	mean float64
	sd   float64
	mix  float64
}

// waterColumns is a small daily district-demand feature set on its natural
// scales.
var waterColumns = []column{
	{"temperature", 18, 6, 0.3},
	{"rainfall", 2.5, 4, -0.2},
	{"population_served", 48000, 900, 0.9},
	{"pipe_age", 31, 7, 0},
	{"pressure_north", 4.2, 0.35, 0.5},
}

func genRows(rng *rand.Rand, n int, cols []column) [][]float64 {
	rows := make([][]float64, n)
	for i := range rows {
		z0 := rng.NormFloat64()
		row := make([]float64, len(cols))
		for j, c := range cols {
			row[j] = c.mean + c.sd*(rng.NormFloat64()+c.mix*z0)
		}
		rows[i] = row
	}
	return rows
}

func names(cols []column) []string {
	s := make([]string, len(cols))
	for j, c := range cols {
		s[j] = c.name
	}
	return s
}

// adder is what both accumulators have in common for feeding.
type adder interface{ Add(*Block) }

// feed adds rows to acc in blocks of blockRows rows. w (weights) and null
// (per-cell NULL marks) may be nil.
func feed(acc adder, rows [][]float64, w []float64, null [][]bool, blockRows int) {
	p := len(rows[0])
	b := NewBlock(p, blockRows, w != nil)
	for i, row := range rows {
		vals, nulls := b.AppendRow()
		copy(vals, row)
		if null != nil {
			copy(nulls, null[i])
		}
		if w != nil {
			b.SetWeight(w[i])
		}
		if b.Full() {
			acc.Add(b)
			b.Reset()
		}
	}
	if b.Rows > 0 {
		acc.Add(b)
	}
}

// relErr is the error of got against want relative to scale, where scale is
// the size the quantity is naturally measured against (for a co-moment
// entry, √(M_aa·M_bb); for a mean, the larger of |mean| and the standard
// deviation): the usual scale-aware comparison, common practice, no source.
func relErr(got, want, scale float64) float64 {
	if got == want {
		return 0
	}
	if scale == 0 {
		return math.Inf(1)
	}
	return math.Abs(got-want) / scale
}

// checkMomentsRef compares m against an exact reference.
func checkMomentsRef(t *testing.T, m *Moments, ref exactRef, tol float64) {
	t.Helper()
	p := m.P()
	if got := m.SumWeights(); relErr(got, ref.sw, ref.sw) > tol {
		t.Errorf("SumWeights = %v, want %v", got, ref.sw)
	}
	for a := 0; a < p; a++ {
		sd := math.Sqrt(ref.co[a][a] / ref.sw)
		if e := relErr(m.Mean(a), ref.mean[a], math.Max(math.Abs(ref.mean[a]), sd)); e > tol {
			t.Errorf("Mean(%d) = %v, want %v (rel err %.2g > %.0g)", a, m.Mean(a), ref.mean[a], e, tol)
		}
		for b := 0; b < p; b++ {
			scale := math.Sqrt(ref.co[a][a] * ref.co[b][b])
			if e := relErr(m.At(a, b), ref.co[a][b], scale); e > tol {
				t.Errorf("At(%d,%d) = %v, want %v (rel err %.2g > %.0g)", a, b, m.At(a, b), ref.co[a][b], e, tol)
			}
		}
	}
}

// checkMomentsSame compares two accumulators of the same data.
func checkMomentsSame(t *testing.T, got, want *Moments, tol float64) {
	t.Helper()
	p := want.P()
	if got.N() != want.N() {
		t.Errorf("N = %d, want %d", got.N(), want.N())
	}
	if e := relErr(got.SumWeights(), want.SumWeights(), want.SumWeights()); e > tol {
		t.Errorf("SumWeights = %v, want %v", got.SumWeights(), want.SumWeights())
	}
	gc, wc := got.Counts(), want.Counts()
	if gc.Dropped != wc.Dropped || gc.BadWeights != wc.BadWeights {
		t.Errorf("Dropped, BadWeights = %d, %d; want %d, %d", gc.Dropped, gc.BadWeights, wc.Dropped, wc.BadWeights)
	}
	for j := 0; j < p; j++ {
		if gc.Null[j] != wc.Null[j] || gc.NaN[j] != wc.NaN[j] || gc.Inf[j] != wc.Inf[j] {
			t.Errorf("column %d: NULL/NaN/Inf = %d/%d/%d, want %d/%d/%d", j,
				gc.Null[j], gc.NaN[j], gc.Inf[j], wc.Null[j], wc.NaN[j], wc.Inf[j])
		}
		if got.Min(j) != want.Min(j) || got.Max(j) != want.Max(j) {
			t.Errorf("column %d: min, max = %v, %v; want %v, %v", j, got.Min(j), got.Max(j), want.Min(j), want.Max(j))
		}
		sd := math.Sqrt(want.At(j, j) / want.SumWeights())
		if e := relErr(got.Mean(j), want.Mean(j), math.Max(math.Abs(want.Mean(j)), sd)); e > tol {
			t.Errorf("Mean(%d) = %v, want %v (rel err %.2g)", j, got.Mean(j), want.Mean(j), e)
		}
		for k := 0; k < p; k++ {
			scale := math.Sqrt(want.At(j, j) * want.At(k, k))
			if e := relErr(got.At(j, k), want.At(j, k), scale); e > tol {
				t.Errorf("At(%d,%d) = %v, want %v (rel err %.2g)", j, k, got.At(j, k), want.At(j, k), e)
			}
		}
	}
}

// ownR returns q's R factor in the columns' own units: column j+1 times
// Scale(j), which is exact (a power of two).
func ownR(q *QR) *mat.TriDense { return unscaleR(q, q.R(nil)) }

// ownRLo is ownR for the low parts of an extended factor.
func ownRLo(q *QR) *mat.TriDense { return unscaleR(q, q.RLo(nil)) }

func unscaleR(q *QR, r *mat.TriDense) *mat.TriDense {
	for i := 0; i <= q.P(); i++ {
		for j := max(i, 1); j <= q.P(); j++ {
			r.SetTri(i, j, r.At(i, j)*q.Scale(j-1))
		}
	}
	return r
}

// qrSummary is what a QR accumulator says independently of its origin and
// scales: √Σw, the means (c + R₀ⱼ/R₀₀) and the trailing block R₂₂, the R
// factor of the centered data, in units of 2^k.
type qrSummary struct {
	r00  float64
	mean []float64
	r22  *mat.TriDense
}

func summarizeQR(q *QR, k int) qrSummary {
	r := q.R(nil)
	for i := 0; i <= q.P(); i++ {
		for j := max(i, 1); j <= q.P(); j++ {
			r.SetTri(i, j, r.At(i, j)*math.Ldexp(q.Scale(j-1), -k))
		}
	}
	p := q.P()
	s := qrSummary{r00: r.At(0, 0), mean: make([]float64, p), r22: mat.NewTriDense(p, mat.Upper, nil)}
	for j := 0; j < p; j++ {
		s.mean[j] = math.Ldexp(q.Origin(j), -k) + r.At(0, j+1)/r.At(0, 0)
		for k := j; k < p; k++ {
			s.r22.SetTri(j, k, r.At(j+1, k+1))
		}
	}
	return s
}

// checkQRSame compares two QR accumulators of the same data through their
// origin-free summaries; an entry of R is measured against the norm of its
// column (scale-aware, common practice, no source).
func checkQRSame(t *testing.T, got, want *QR, tol float64) {
	t.Helper()
	if got.N() != want.N() {
		t.Errorf("N = %d, want %d", got.N(), want.N())
	}
	g, w := summarizeQR(got, 0), summarizeQR(want, 0)
	if e := relErr(g.r00, w.r00, w.r00); e > tol {
		t.Errorf("R00 = %v, want %v", g.r00, w.r00)
	}
	p := want.P()
	for j := 0; j < p; j++ {
		var norm float64
		for i := 0; i <= j; i++ {
			norm = math.Hypot(norm, w.r22.At(i, j))
		}
		sd := norm / w.r00
		if e := relErr(g.mean[j], w.mean[j], math.Max(math.Abs(w.mean[j]), sd)); e > tol {
			t.Errorf("mean %d = %v, want %v (rel err %.2g)", j, g.mean[j], w.mean[j], e)
		}
		for i := 0; i <= j; i++ {
			if e := relErr(g.r22.At(i, j), w.r22.At(i, j), norm); e > tol {
				t.Errorf("R22(%d,%d) = %v, want %v (rel err %.2g)", i, j, g.r22.At(i, j), w.r22.At(i, j), e)
			}
		}
	}
}
