package stream

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
)

// withMissing marks about one cell in frac as NULL, NaN or ±Inf, so that the
// merge tests also merge the deletion counts.
func withMissing(rng *rand.Rand, rows [][]float64, frac float64) [][]bool {
	null := make([][]bool, len(rows))
	for i, r := range rows {
		null[i] = make([]bool, len(r))
		for j := range r {
			if rng.Float64() >= frac {
				continue
			}
			switch rng.IntN(4) {
			case 0:
				null[i][j] = true
			case 1:
				r[j] = math.NaN()
			case 2:
				r[j] = math.Inf(1)
			case 3:
				r[j] = math.Inf(-1)
			}
		}
	}
	return null
}

// partition deals the rows at random into k parts and accumulates each part
// in blocks of a random height.
func partition(rng *rand.Rand, k int, rows [][]float64, w []float64, null [][]bool, cols []string) ([]*Moments, []*QR) {
	part := make([][]int, k)
	for i := range rows {
		j := rng.IntN(k)
		part[j] = append(part[j], i)
	}
	ms := make([]*Moments, k)
	qs := make([]*QR, k)
	for j, idx := range part {
		ms[j], qs[j] = NewMoments(cols), NewQR(cols)
		if len(idx) == 0 {
			continue
		}
		var pr [][]float64
		var pw []float64
		var pn [][]bool
		for _, i := range idx {
			pr = append(pr, rows[i])
			if w != nil {
				pw = append(pw, w[i])
			}
			pn = append(pn, null[i])
		}
		blockRows := 1 + rng.IntN(300)
		feed(ms[j], pr, pw, pn, blockRows)
		feed(qs[j], pr, pw, pn, blockRows)
	}
	return ms, qs
}

// TestMergeInvariance: data dealt at random into k partitions and merged in
// random orders, sequentially and as a random tree, gives the one-pass
// result to 1e-12 relative for both accumulators (property; fixed seeds).
func TestMergeInvariance(t *testing.T) {
	offset := []column{
		{"metered_volume", 1e9, 1, 0.5},
		{"billed_volume", 1e9, 1, 0.5},
		{"temperature", 18, 6, 0.3},
	}
	cases := []struct {
		name     string
		cols     []column
		n, k     int
		weighted bool
		missing  float64
		seed     uint64
	}{
		{"two parts", waterColumns, 2000, 2, false, 0, 71},
		{"five parts", waterColumns, 3000, 5, false, 0.01, 72},
		{"eight parts weighted", waterColumns, 3000, 8, true, 0.01, 73},
		{"more parts than rows", waterColumns, 40, 64, false, 0.02, 74},
		{"offset columns", offset, 3000, 6, false, 0.005, 75},
		{"offset weighted", offset, 2000, 3, true, 0, 76},
	}
	const tol = 1e-12
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(tc.seed, 0))
			cols := names(tc.cols)
			rows := genRows(rng, tc.n, tc.cols)
			null := withMissing(rng, rows, tc.missing)
			var w []float64
			if tc.weighted {
				w = make([]float64, len(rows))
				for i := range w {
					w[i] = 0.5 + rng.Float64()
				}
			}
			oneM, oneQ := NewMoments(cols), NewQR(cols)
			feed(oneM, rows, w, null, 1024)
			feed(oneQ, rows, w, null, 1024)

			for trial := range 3 {
				ms, qs := partition(rng, tc.k, rows, w, null, cols)

				// Sequential merge in a random order into a fresh accumulator.
				seqM, seqQ := NewMoments(cols), NewQR(cols)
				for _, j := range rng.Perm(tc.k) {
					seqM.Merge(ms[j])
					seqQ.Merge(qs[j])
				}
				checkMomentsSame(t, seqM, oneM, tol)
				checkQRSame(t, seqQ, oneQ, tol)

				// Random tree: merge two random survivors until one is left.
				treeM := make([]*Moments, tc.k)
				treeQ := make([]*QR, tc.k)
				for j := range ms {
					treeM[j], treeQ[j] = ms[j].Clone(), qs[j].Clone()
				}
				for len(treeM) > 1 {
					a := rng.IntN(len(treeM))
					b := rng.IntN(len(treeM) - 1)
					if b >= a {
						b++
					}
					treeM[a].Merge(treeM[b])
					treeQ[a].Merge(treeQ[b])
					treeM = append(treeM[:b], treeM[b+1:]...)
					treeQ = append(treeQ[:b], treeQ[b+1:]...)
				}
				if t.Failed() {
					t.Fatalf("trial %d: sequential merge differs", trial)
				}
				checkMomentsSame(t, treeM[0], oneM, tol)
				checkQRSame(t, treeQ[0], oneQ, tol)
				// The deletion counts of the factor match those of the moments.
				qc, mc := treeQ[0].Counts(), oneM.Counts()
				if qc.Used != mc.Used || qc.Dropped != mc.Dropped || relErr(qc.SumWeights, mc.SumWeights, mc.SumWeights) > tol {
					t.Errorf("factor used %d (weight %v) dropped %d; moments %d (%v), %d",
						qc.Used, qc.SumWeights, qc.Dropped, mc.Used, mc.SumWeights, mc.Dropped)
				}
				for j := range cols {
					if qc.Null[j] != mc.Null[j] || qc.NaN[j] != mc.NaN[j] || qc.Inf[j] != mc.Inf[j] {
						t.Errorf("column %d: factor counts differ from moments", j)
					}
				}
				if t.Failed() {
					t.Fatalf("trial %d: tree merge differs", trial)
				}
			}
		})
	}
}

// TestBlockSizeIndependence: the block height does not change the result
// beyond rounding, to 1e-12 relative (property).
func TestBlockSizeIndependence(t *testing.T) {
	rng := rand.New(rand.NewPCG(81, 0))
	rows := genRows(rng, 3000, waterColumns)
	null := withMissing(rng, rows, 0.01)
	w := make([]float64, len(rows))
	for i := range w {
		w[i] = rng.Float64() * 4
	}
	cols := names(waterColumns)
	for _, weights := range [][]float64{nil, w} {
		refM, refQ := NewMoments(cols), NewQR(cols)
		feed(refM, rows, weights, null, len(rows))
		feed(refQ, rows, weights, null, len(rows))
		for _, blockRows := range []int{1, 2, 5, 64, 333, 1024, 2999} {
			m, q := NewMoments(cols), NewQR(cols)
			feed(m, rows, weights, null, blockRows)
			feed(q, rows, weights, null, blockRows)
			checkMomentsSame(t, m, refM, 1e-12)
			checkQRSame(t, q, refQ, 1e-12)
			if t.Failed() {
				t.Fatalf("block height %d (weighted %v) differs", blockRows, weights != nil)
			}
		}
	}
}

// TestOffset: columns far from zero relative to their spread (mean 1e9, sd 1;
// mean 1, sd 1e-9; mean −1e9, sd 1) give the co-moments of the exactly
// shifted data x − s (exact in float64 by Sterbenz's lemma, since x/s lies
// in [1/2, 2]) to 1e-12 relative. Reference: the two-pass co-moments of the
// shifted data in exact rational arithmetic, computed in the test.
//
// The same data multiplied by 2^k (exact), for magnitudes from about
// 1e-300 to 1e290, give the same digits in units of 2^k, for the
// cross-products, the float64 factor and the double-double one: their
// products would underflow or overflow in the columns' own units, so the
// accumulators must scale each column before forming them.
func TestOffset(t *testing.T) {
	type shifted struct {
		name        string
		shift, sd   float64
		first, rest int // rows in the first block, and in the others
		k           int // every value multiplied by 2^k
	}
	cases := []shifted{
		{"mean 1e9 sd 1", 1e9, 1, 1024, 1024, 0},
		{"mean 1 sd 1e-9", 1, 1e-9, 1024, 1024, 0},
		{"mean -1e9 sd 1", -1e9, 1, 1024, 1024, 0},
		{"mean 1e9 sd 1, one-row first block", 1e9, 1, 1, 97, 0},
		{"mean 1e12 sd 1e-3", 1e12, 1e-3, 50, 50, 0},
		{"mean 1e9 sd 1 at 2^-700 (about 1e-202)", 1e9, 1, 1024, 1024, -700},
		{"mean 1 sd 1e-9 at 2^-1000 (about 1e-301)", 1, 1e-9, 1024, 1024, -1000},
		{"mean -1e9 sd 1 at 2^640 (about 4e201)", -1e9, 1, 1, 97, 640},
		{"mean 1e12 sd 1e-3 at 2^924 (about 1e290)", 1e12, 1e-3, 50, 50, 924},
		{"mean 1 sd 1e-9 at 2^512 (products overflow)", 1, 1e-9, 1024, 1024, 512},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(91, 0))
			const n = 2500
			cols := []string{"metered_volume", "billed_volume", "temperature"}
			raw := make([][]float64, n)
			sh := make([][]float64, n)
			for i := range raw {
				z := rng.NormFloat64()
				a := tc.shift + tc.sd*z
				b := tc.shift + tc.sd*(0.8*z+0.6*rng.NormFloat64())
				temp := 18 + 6*rng.NormFloat64()
				raw[i] = []float64{math.Ldexp(a, tc.k), math.Ldexp(b, tc.k), math.Ldexp(temp, tc.k)}
				sh[i] = []float64{a - tc.shift, b - tc.shift, temp}
				if a/tc.shift < 0.5 || a/tc.shift > 2 || b/tc.shift < 0.5 || b/tc.shift > 2 {
					t.Fatal("shift not exact")
				}
				for j, v := range raw[i] {
					if math.Ldexp(v, -tc.k) != []float64{a, b, temp}[j] {
						t.Fatal("scaling by 2^k not exact")
					}
				}
			}
			ref := exactMoments(sh, nil)
			refRaw := exactMoments(unscaleRows(raw, tc.k), nil) // same co-moments; the raw means

			feedSplit := func(acc adder, rows [][]float64) {
				feed(acc, rows[:tc.first], nil, nil, tc.first)
				feed(acc, rows[tc.first:], nil, nil, tc.rest)
			}
			m, ms := NewMoments(cols), NewMoments(cols)
			feedSplit(m, raw)
			feedSplit(ms, sh)
			q, qs, qx := NewQR(cols), NewQR(cols), NewQRExtended(cols)
			feedSplit(q, raw)
			feedSplit(qs, sh)
			feedSplit(qx, raw)

			// In units of 2^k: the scaled entry times the ratio of the
			// column's scale to 2^k, exact.
			at := func(m *Moments, a, b, k int) float64 {
				return m.ScaledAt(a, b) * math.Ldexp(m.Scale(a), -k) * math.Ldexp(m.Scale(b), -k)
			}
			const tol = 1e-12
			for a := range cols {
				for b := range cols {
					scale := math.Sqrt(ref.co[a][a] * ref.co[b][b])
					if e := relErr(at(m, a, b, tc.k), ref.co[a][b], scale); e > tol {
						t.Errorf("At(%d,%d)/4^k = %v, shifted data exactly %v (rel err %.2g)", a, b, at(m, a, b, tc.k), ref.co[a][b], e)
					}
					if e := relErr(at(m, a, b, tc.k), ms.At(a, b), scale); e > tol {
						t.Errorf("At(%d,%d)/4^k = %v, accumulator of shifted data %v (rel err %.2g)", a, b, at(m, a, b, tc.k), ms.At(a, b), e)
					}
				}
				sd := math.Sqrt(ref.co[a][a] / n)
				if got := math.Ldexp(m.Mean(a), -tc.k); relErr(got, refRaw.mean[a], sd) > tol {
					t.Errorf("Mean(%d)/2^k = %v, exact %v (error %.2g sd)", a, got, refRaw.mean[a], relErr(got, refRaw.mean[a], sd))
				}
				if s := m.Scale(a); math.Ldexp(s, -tc.k) > 1<<40 || math.Ldexp(s, -tc.k) < 1 {
					t.Errorf("column %d: scale %v for values about 2^%d", a, s, tc.k)
				}
			}
			// The factors' trailing blocks are that of the shifted data.
			checkMomentsRef(t, ms, ref, tol)
			wq := summarizeQR(qs, 0)
			for _, f := range []*QR{q, qx} {
				gq := summarizeQR(f, tc.k)
				for j := range cols {
					var norm float64
					for i := 0; i <= j; i++ {
						norm = math.Hypot(norm, wq.r22.At(i, j))
					}
					for i := 0; i <= j; i++ {
						if e := relErr(gq.r22.At(i, j), wq.r22.At(i, j), norm); e > tol {
							t.Errorf("extended %v: R22(%d,%d)/2^k = %v, shifted data %v (rel err %.2g)", f.Extended(), i, j, gq.r22.At(i, j), wq.r22.At(i, j), e)
						}
					}
					if e := relErr(gq.mean[j], refRaw.mean[j], norm/gq.r00); e > tol {
						t.Errorf("extended %v: factor mean %d /2^k = %v, exact %v", f.Extended(), j, gq.mean[j], refRaw.mean[j])
					}
				}
			}
		})
	}
}

// unscaleRows returns the rows times 2^-k (exact).
func unscaleRows(rows [][]float64, k int) [][]float64 {
	out := make([][]float64, len(rows))
	for i, r := range rows {
		out[i] = make([]float64, len(r))
		for j, v := range r {
			out[i][j] = math.Ldexp(v, -k)
		}
	}
	return out
}

// TestQRMixedMerge: extended and float64 factors merge either way; the
// result is as accurate as its least accurate part, 1e-12 against a float64
// one-pass factor here (property).
func TestQRMixedMerge(t *testing.T) {
	rng := rand.New(rand.NewPCG(121, 0))
	rows := genRows(rng, 900, waterColumns)
	cols := names(waterColumns)
	one := NewQR(cols)
	feed(one, rows, nil, nil, 100)
	for _, into := range []func([]string) *QR{NewQR, NewQRExtended} {
		q := into(cols)
		for part := range 3 {
			p := NewQR(cols)
			if part != 1 {
				p = NewQRExtended(cols)
			}
			feed(p, rows[300*part:300*part+300], nil, nil, 64)
			q.Merge(p)
		}
		checkQRSame(t, q, one, 1e-12)
	}
}

// TestScaleGrowth: a column whose magnitude grows from about 1e-180 to
// 1e180 over the blocks (another shrinks the other way, a third stays
// near 1) gives, in whatever order its rows arrive and however the parts
// are merged, the exact co-moments and means in units of the columns'
// final scales to 1e-12 (reference in exact rational arithmetic computed
// in the test), and the scales that its largest magnitude calls for. On the
// way the accumulated sums are rescaled to larger powers of two (property).
func TestScaleGrowth(t *testing.T) {
	rng := rand.New(rand.NewPCG(93, 0))
	cols := []string{"metered_volume", "temperature", "leak_rate"}
	exps := []int{-600, -300, 0, 300, 600}
	var rows [][]float64
	for b, k := range exps {
		for range 200 {
			z := rng.NormFloat64()
			rows = append(rows, []float64{
				math.Ldexp(3+z, k),
				18 + 6*rng.NormFloat64() + z,
				math.Ldexp(1+0.1*rng.NormFloat64()-0.05*z, exps[len(exps)-1-b]),
			})
		}
	}
	mag := make([]float64, len(cols))
	for _, r := range rows {
		for j, v := range r {
			mag[j] = math.Max(mag[j], math.Abs(v))
		}
	}
	unit := make([]int, len(cols))
	for j := range unit {
		_, unit[j] = math.Frexp(scaleFor(mag[j]))
		unit[j]-- // scaleFor is a power of two: 2^unit
	}
	ref := exactMomentsIn(rows, nil, unit)
	reversed := make([][]float64, len(rows))
	for i, r := range rows {
		reversed[len(rows)-1-i] = r
	}
	check := func(what string, m *Moments, q *QR) {
		t.Helper()
		for a := range cols {
			if m.Scale(a) != math.Ldexp(1, unit[a]) || q.Scale(a) != m.Scale(a) {
				t.Errorf("%s: column %d: scales %v (moments), %v (factor), want 2^%d", what, a, m.Scale(a), q.Scale(a), unit[a])
			}
			sd := math.Sqrt(ref.co[a][a] / ref.sw)
			if got := math.Ldexp(m.Mean(a), -unit[a]); relErr(got, ref.mean[a], sd) > 1e-12 {
				t.Errorf("%s: mean %d /2^unit = %v, exact %v", what, a, got, ref.mean[a])
			}
			r := q.R(nil)
			for b := range cols {
				scale := math.Sqrt(ref.co[a][a] * ref.co[b][b])
				if e := relErr(m.ScaledAt(a, b), ref.co[a][b], scale); e > 1e-12 {
					t.Errorf("%s: ScaledAt(%d,%d) = %v, exact %v (rel err %.2g)", what, a, b, m.ScaledAt(a, b), ref.co[a][b], e)
				}
				var rr float64
				for i := 1; i <= min(a, b)+1; i++ {
					rr += r.At(i, a+1) * r.At(i, b+1)
				}
				if e := relErr(rr, ref.co[a][b], scale); e > 1e-12 {
					t.Errorf("%s: (R22ᵀR22)(%d,%d) = %v, exact %v (rel err %.2g)", what, a, b, rr, ref.co[a][b], e)
				}
			}
		}
	}
	for _, order := range []struct {
		name string
		rows [][]float64
	}{{"growing", rows}, {"shrinking", reversed}} {
		for _, blockRows := range []int{1, 37, 200, 1024} {
			m, q, qx := NewMoments(cols), NewQR(cols), NewQRExtended(cols)
			feed(m, order.rows, nil, nil, blockRows)
			feed(q, order.rows, nil, nil, blockRows)
			feed(qx, order.rows, nil, nil, blockRows)
			check(fmt.Sprintf("%s, blocks of %d", order.name, blockRows), m, q)
			check(fmt.Sprintf("%s, blocks of %d, extended", order.name, blockRows), m, qx)
		}
	}
	for trial := range 3 {
		ms, qs := partition(rng, 4, rows, nil, withMissing(rng, rows, 0), cols)
		m, q, qx := NewMoments(cols), NewQR(cols), NewQRExtended(cols)
		for _, j := range rng.Perm(4) {
			m.Merge(ms[j])
			q.Merge(qs[j])
			qx.Merge(qs[j])
		}
		check(fmt.Sprintf("merged parts, trial %d", trial), m, q)
		check(fmt.Sprintf("merged parts into an extended factor, trial %d", trial), m, qx)
	}
}
