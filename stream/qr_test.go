package stream

import (
	"math"
	"math/big"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// TestQRGram: the factor satisfies RᵀR = Σw·a·aᵀ with a = (1, x − c), the
// cross-products of the shifted design, against exact rational arithmetic
// computed in the test (exactGram); R is upper triangular with a
// non-negative diagonal; and the trailing block R₂₂ᵀR₂₂ is the centered
// co-moment matrix, compared both with the exact two-pass reference
// (exactMoments) and with the Moments accumulator fed the same rows.
func TestQRGram(t *testing.T) {
	cases := []struct {
		name      string
		cols      []column
		n         int
		blockRows int
		weighted  bool
		seed      uint64
	}{
		{"one block", waterColumns, 200, 1024, false, 51},
		{"many blocks", waterColumns, 300, 17, false, 52},
		{"row by row", waterColumns[:3], 120, 1, false, 53},
		{"weighted", waterColumns, 300, 29, true, 54},
		{"one column", waterColumns[3:4], 100, 8, false, 55},
		{"fewer rows than columns per block", waterColumns, 60, 2, false, 56},
		{"large offsets", []column{{"metered_volume", 3.1e7, 2.5e3, 0.4}, {"billed_volume", 3.0e7, 2.5e3, 0.4}}, 300, 64, false, 57},
	}
	const tol = 1e-13
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(tc.seed, 0))
			rows := genRows(rng, tc.n, tc.cols)
			var w []float64
			if tc.weighted {
				w = make([]float64, tc.n)
				for i := range w {
					w[i] = 2 * rng.Float64()
				}
			}
			p := len(tc.cols)
			q := NewQR(names(tc.cols))
			feed(q, rows, w, nil, tc.blockRows)
			m := NewMoments(names(tc.cols))
			feed(m, rows, w, nil, tc.blockRows)
			if q.N() != int64(tc.n) || q.P() != p || len(q.Names()) != p {
				t.Fatalf("N %d, P %d, names %v", q.N(), q.P(), q.Names())
			}
			if q.Counts().SumWeights != m.SumWeights() { // the same sums in the same order
				t.Errorf("SumWeights %v, Moments says %v", q.Counts().SumWeights, m.SumWeights())
			}

			r := ownR(q)
			for i := 0; i <= p; i++ {
				if r.At(i, i) < 0 {
					t.Errorf("R(%d,%d) = %v < 0", i, i, r.At(i, i))
				}
			}
			var rtr mat.Dense
			rtr.Mul(r.T(), r)
			c := make([]float64, p)
			for j := range c {
				c[j] = q.Origin(j)
			}
			g := exactGram(rows, w, c)
			for a := 0; a <= p; a++ {
				for b := 0; b <= p; b++ {
					scale := math.Sqrt(g[a][a] * g[b][b])
					if e := relErr(rtr.At(a, b), g[a][b], scale); e > tol {
						t.Errorf("RᵀR(%d,%d) = %v, exact %v (rel err %.2g)", a, b, rtr.At(a, b), g[a][b], e)
					}
				}
			}

			ref := exactMoments(rows, w)
			var r22 mat.TriDense
			r22.ReuseAsTri(p, mat.Upper)
			for a := 0; a < p; a++ {
				for b := a; b < p; b++ {
					r22.SetTri(a, b, r.At(a+1, b+1))
				}
			}
			var cm mat.Dense
			cm.Mul(r22.T(), &r22)
			for a := 0; a < p; a++ {
				for b := 0; b < p; b++ {
					scale := math.Sqrt(ref.co[a][a] * ref.co[b][b])
					if e := relErr(cm.At(a, b), ref.co[a][b], scale); e > tol {
						t.Errorf("R22ᵀR22(%d,%d) = %v, exact co-moment %v (rel err %.2g)", a, b, cm.At(a, b), ref.co[a][b], e)
					}
					if e := relErr(cm.At(a, b), m.At(a, b), scale); e > tol {
						t.Errorf("R22ᵀR22(%d,%d) = %v, Moments %v (rel err %.2g)", a, b, cm.At(a, b), m.At(a, b), e)
					}
				}
			}
			// The means the factor implies.
			s := summarizeQR(q, 0)
			for j := 0; j < p; j++ {
				sd := math.Sqrt(ref.co[j][j] / ref.sw)
				if e := relErr(s.mean[j], ref.mean[j], math.Max(math.Abs(ref.mean[j]), sd)); e > tol {
					t.Errorf("mean %d = %v, exact %v", j, s.mean[j], ref.mean[j])
				}
			}
			if e := relErr(s.r00*s.r00, ref.sw, ref.sw); e > tol {
				t.Errorf("R00² = %v, Σw = %v", s.r00*s.r00, ref.sw)
			}
		})
	}
}

// TestQRWeightsReplicate: integer weights give the factor of the rows
// replicated that many times (definition of frequency weights; the factor
// with a non-negative diagonal is unique for full-rank data).
func TestQRWeightsReplicate(t *testing.T) {
	rng := rand.New(rand.NewPCG(61, 0))
	rows := genRows(rng, 150, waterColumns)
	w := make([]float64, len(rows))
	var rep [][]float64
	for i := range rows {
		w[i] = float64(rng.IntN(4))
		for range int(w[i]) {
			rep = append(rep, rows[i])
		}
	}
	weighted := NewQR(names(waterColumns))
	feed(weighted, rows, w, nil, 1024)
	replicated := NewQR(names(waterColumns))
	feed(replicated, rep, nil, nil, 1024)
	weighted.counts.Used = replicated.counts.Used // rows differ by design; compare the rest
	checkQRSame(t, weighted, replicated, 1e-13)
}

// TestQRConstantColumn: a column that never varies has an exactly zero
// column in R (exact by construction: it shifts to zeros, and Householder
// reflections map a zero column to zero).
func TestQRConstantColumn(t *testing.T) {
	cols := []column{waterColumns[0], {"pressure_south", 0.1, 0, 0}, waterColumns[3]}
	rng := rand.New(rand.NewPCG(62, 0))
	rows := genRows(rng, 400, cols)
	q := NewQR(names(cols))
	feed(q, rows[:200], nil, nil, 50)
	o := NewQR(names(cols))
	feed(o, rows[200:], nil, nil, 30)
	q.Merge(o)
	r := q.R(nil)
	for i := 0; i <= 2; i++ {
		if r.At(i, 2) != 0 {
			t.Errorf("R(%d,2) = %v, want exactly 0", i, r.At(i, 2))
		}
	}
	if q.Origin(1) != 0.1 {
		t.Errorf("origin %v, want 0.1", q.Origin(1))
	}
}

// TestQRCloneEmpty: a clone is independent; merging an empty factor either
// way changes nothing (property).
func TestQRCloneEmpty(t *testing.T) {
	rng := rand.New(rand.NewPCG(63, 0))
	rows := genRows(rng, 200, waterColumns)
	q := NewQR(names(waterColumns))
	feed(q, rows, nil, nil, 64)
	before, _ := q.MarshalBinary()
	c := q.Clone()
	feed(q, rows[:10], nil, nil, 64)
	if got, _ := c.MarshalBinary(); string(got) != string(before) {
		t.Error("clone changed when its source was fed")
	}
	c.Merge(NewQR(names(waterColumns)))
	if got, _ := c.MarshalBinary(); string(got) != string(before) {
		t.Error("merging an empty factor changed the factor")
	}
	e := NewQR(names(waterColumns))
	e.Merge(c)
	if got, _ := e.MarshalBinary(); string(got) != string(before) {
		t.Error("merging into an empty factor did not copy it")
	}
	empty := NewQR(names(waterColumns))
	r := empty.R(nil)
	if empty.N() != 0 || mat.Norm(r, 1) != 0 {
		t.Errorf("empty factor: N %d, R %v", empty.N(), mat.Formatted(r))
	}
}

// TestQRNearCollinear: for billed volume equal to metered volume plus a
// small independent error (condition number of the centered design about
// 1e6), the last diagonal entry of R, squared, is the residual sum of
// squares of billed volume regressed on an intercept and metered volume (a
// standard least-squares identity). The reference is
// M_bb − M_ab²/M_aa from the exact co-moments, in exact rational
// arithmetic computed in the test. The factor keeps about 1e-16·κ relative
// accuracy; forming the same quantity from the co-moments in float64 loses
// about 1e-16·κ² (logged, not asserted).
func TestQRNearCollinear(t *testing.T) {
	rng := rand.New(rand.NewPCG(64, 0))
	const n = 4000
	rows := make([][]float64, n)
	for i := range rows {
		a := 5e4 + 800*rng.NormFloat64()
		rows[i] = []float64{a, a + 800e-6*rng.NormFloat64()}
	}
	cols := []string{"metered_volume", "billed_volume"}
	q := NewQR(cols)
	feed(q, rows, nil, nil, 512)
	m := NewMoments(cols)
	feed(m, rows, nil, nil, 512)

	// Exact RSS from the exact co-moments.
	p := exactMomentsRat(rows)
	rss := new(big.Rat).Quo(new(big.Rat).Mul(p[0][1], p[0][1]), p[0][0])
	rss.Sub(p[1][1], rss)
	want := ratFloat(rss)

	r := ownR(q)
	got := r.At(2, 2) * r.At(2, 2)
	if e := relErr(got, want, want); e > 1e-10 {
		t.Errorf("R(2,2)² = %v, exact RSS %v (rel err %.2g)", got, want, e)
	}
	fromMoments := m.At(1, 1) - m.At(0, 1)*m.At(0, 1)/m.At(0, 0)
	t.Logf("RSS relative error: QR %.2g, co-moments %.2g", relErr(got, want, want), relErr(fromMoments, want, want))
}

// exactMomentsRat returns the exact centered co-moments as rationals
// (unit weights), for references that must not round before combining them.
func exactMomentsRat(rows [][]float64) [][]*big.Rat {
	p := len(rows[0])
	mean := make([]*big.Rat, p)
	for j := range mean {
		mean[j] = new(big.Rat)
		for _, r := range rows {
			mean[j].Add(mean[j], rat(r[j]))
		}
		mean[j].Quo(mean[j], big.NewRat(int64(len(rows)), 1))
	}
	co := make([][]*big.Rat, p)
	for a := range co {
		co[a] = make([]*big.Rat, p)
		for b := range co[a] {
			co[a][b] = new(big.Rat)
		}
	}
	da, db, t := new(big.Rat), new(big.Rat), new(big.Rat)
	for _, r := range rows {
		for a := 0; a < p; a++ {
			da.Sub(rat(r[a]), mean[a])
			for b := 0; b < p; b++ {
				db.Sub(rat(r[b]), mean[b])
				co[a][b].Add(co[a][b], t.Mul(da, db))
			}
		}
	}
	return co
}

// exactRtR returns RᵀR of an extended factor, with R = hi + lo taken
// exactly, in exact rational arithmetic computed in the test.
func exactRtR(q *QR) [][]*big.Rat {
	n := q.n
	r := make([][]*big.Rat, n)
	for i := range r {
		r[i] = make([]*big.Rat, n)
		for j := range r[i] {
			v := rat(q.r[i*n+j])
			if q.rlo != nil {
				v.Add(v, rat(q.rlo[i*n+j]))
			}
			if j > 0 {
				v.Mul(v, rat(q.scale[j-1]))
			}
			r[i][j] = v
		}
	}
	g := make([][]*big.Rat, n)
	t := new(big.Rat)
	for a := range g {
		g[a] = make([]*big.Rat, n)
		for b := range g[a] {
			s := new(big.Rat)
			for i := 0; i <= min(a, b); i++ {
				s.Add(s, t.Mul(r[i][a], r[i][b]))
			}
			g[a][b] = s
		}
	}
	return g
}

// exactGramRat is exactGram without the final rounding.
func exactGramRat(rows [][]float64, w []float64, c []float64) [][]*big.Rat {
	n := len(c) + 1
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
	for a := 0; a < n; a++ {
		for b := 0; b < a; b++ {
			g[a][b] = g[b][a]
		}
	}
	return g
}

// ratRelErr is |got − want| / scale in exact arithmetic, as a float64.
func ratRelErr(got, want *big.Rat, scale float64) float64 {
	d := new(big.Rat).Sub(got, want)
	f := math.Abs(ratFloat(d))
	if f == 0 {
		return 0
	}
	return f / scale
}

// TestQRExtendedGram: an extended factor satisfies RᵀR = Σw·a·aᵀ, a = (1,
// x − c), to about 1e-30 relative: both sides in exact rational arithmetic
// computed in the test (R taken as hi + lo exactly). Checked after blocks of
// several heights, with weights, with large offsets and after random
// merges, float64 factors merged in included (they count as exact).
func TestQRExtendedGram(t *testing.T) {
	offset := []column{{"metered_volume", 1e9, 1, 0.5}, {"billed_volume", 1e9, 1, 0.5}, waterColumns[0]}
	cases := []struct {
		name      string
		cols      []column
		n         int
		blockRows int
		weighted  bool
		parts     int
		seed      uint64
	}{
		{"one block", waterColumns, 200, 1024, false, 1, 111},
		{"many blocks", waterColumns, 300, 17, false, 1, 112},
		{"row by row", waterColumns[:3], 80, 1, false, 1, 113},
		{"weighted", waterColumns, 300, 29, true, 1, 114},
		{"large offsets", offset, 300, 64, false, 1, 115},
		{"merged parts", waterColumns, 400, 50, true, 5, 116},
		{"merged offsets", offset, 400, 40, false, 4, 117},
	}
	const tol = 1e-30
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(tc.seed, 0))
			rows := genRows(rng, tc.n, tc.cols)
			var w []float64
			if tc.weighted {
				w = make([]float64, tc.n)
				for i := range w {
					w[i] = 2 * rng.Float64()
				}
			}
			cols := names(tc.cols)
			if !NewQRExtended(cols).Extended() || NewQR(cols).Extended() {
				t.Fatal("Extended() wrong")
			}
			// build deals the rows into tc.parts consecutive parts and
			// merges them; with mixed, every other part is a float64
			// factor.
			build := func(mixed bool) *QR {
				q := NewQRExtended(cols)
				per := (tc.n + tc.parts - 1) / tc.parts
				for s := 0; s < tc.n; s += per {
					e := min(s+per, tc.n)
					var pw []float64
					if w != nil {
						pw = w[s:e]
					}
					part := NewQRExtended(cols)
					if mixed && (s/per)%2 == 1 {
						part = NewQR(cols)
					}
					feed(part, rows[s:e], pw, nil, tc.blockRows)
					if tc.parts == 1 {
						return part
					}
					q.Merge(part)
				}
				return q
			}
			origin := func(q *QR) []float64 {
				c := make([]float64, len(cols))
				for j := range c {
					c[j] = q.Origin(j)
				}
				return c
			}
			if tc.parts > 1 {
				// Float64 parts carry their own rounding: the merge is
				// then as accurate as a float64 factor.
				q := build(true)
				got := exactRtR(q)
				want := exactGram(rows, w, origin(q))
				for a := range want {
					for b := range want {
						if e := relErr(ratFloat(got[a][b]), want[a][b], math.Sqrt(want[a][a]*want[b][b])); e > 1e-13 {
							t.Errorf("mixed merge: RᵀR(%d,%d) rel err %.2g", a, b, e)
						}
					}
				}
			}
			q := build(false)
			c := origin(q)
			got := exactRtR(q)
			want := exactGramRat(rows, w, c)
			for a := range want {
				for b := range want {
					scale := math.Sqrt(ratFloat(want[a][a]) * ratFloat(want[b][b]))
					if e := ratRelErr(got[a][b], want[a][b], scale); e > tol {
						t.Errorf("RᵀR(%d,%d) rel err %.2g > %.0g", a, b, e, tol)
					}
				}
			}
			for i := 0; i < q.n; i++ {
				if q.r[i*q.n+i] < 0 {
					t.Errorf("R(%d,%d) < 0", i, i)
				}
			}
			// The float64 factor agrees with the rounded extended one.
			f := NewQR(cols)
			feed(f, rows, w, nil, tc.blockRows)
			checkQRSame(t, q, f, 1e-13)
		})
	}
}

// TestQRExtendedNearCollinear: as TestQRNearCollinear, the extended factor's
// last diagonal entry (hi + lo) squared is the exact residual sum of squares
// (exact rational arithmetic computed in the test) to about 1e-32·κ, and
// its rounded value is the correctly rounded one to within an ulp.
func TestQRExtendedNearCollinear(t *testing.T) {
	rng := rand.New(rand.NewPCG(64, 0))
	const n = 4000
	rows := make([][]float64, n)
	for i := range rows {
		a := 5e4 + 800*rng.NormFloat64()
		rows[i] = []float64{a, a + 800e-6*rng.NormFloat64()}
	}
	cols := []string{"metered_volume", "billed_volume"}
	q := NewQRExtended(cols)
	feed(q, rows, nil, nil, 512)
	p := exactMomentsRat(rows)
	rss := new(big.Rat).Quo(new(big.Rat).Mul(p[0][1], p[0][1]), p[0][0])
	rss.Sub(p[1][1], rss)
	r := rat(q.r[8])
	r.Add(r, rat(q.rlo[8]))
	r.Mul(r, rat(q.scale[1]))
	got := new(big.Rat).Mul(r, r)
	if e := ratRelErr(got, rss, ratFloat(rss)); e > 1e-24 {
		t.Errorf("(R(2,2))² rel err %.2g against the exact RSS", e)
	}
	exact := math.Sqrt(ratFloat(rss))
	if d := math.Abs(ownR(q).At(2, 2)-exact) / exact; d > 2.3e-16 {
		t.Errorf("rounded R(2,2) = %v, √RSS = %v (rel %.2g)", ownR(q).At(2, 2), exact, d)
	}
}
