package stream

import (
	"bytes"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// factorRows generates a district's daily rows: a temperature (NULL now and
// then) and a supply source drawn from levels, as the indicator columns
// named in cols (temperature first, then one column per level in cols'
// order). A level not in cols must not be drawn.
func factorRows(rng *rand.Rand, n int, levels []string, cols []string) *Block {
	b := NewBlock(len(cols), n, true)
	for i := 0; i < n; i++ {
		vals, nulls := b.AppendRow()
		vals[0] = 1e4 + 5*rng.NormFloat64()
		nulls[0] = rng.IntN(40) == 0
		lv := levels[rng.IntN(len(levels))]
		for j, c := range cols[1:] {
			if c == "supply_source["+lv+"]" {
				vals[j+1] = 1
			}
		}
		b.SetWeight(0.5 + rng.Float64())
	}
	return b
}

var (
	allSources = []string{"temperature", "supply_source[borehole]", "supply_source[reservoir]", "supply_source[river]"}
	someSource = []string{"temperature", "supply_source[borehole]", "supply_source[river]"}
)

// widenBlock copies a block over someSource into one over allSources with
// the reservoir column zero.
func widenBlock(b *Block) *Block {
	w := NewBlock(4, b.Rows, true)
	for i := 0; i < b.Rows; i++ {
		vals, nulls := w.AppendRow()
		vals[0], vals[1], vals[3] = b.Data[3*i], b.Data[3*i+1], b.Data[3*i+2]
		nulls[0] = b.Null[3*i]
		w.SetWeight(b.Weight[i])
	}
	return w
}

// TestWidenExact: an accumulator widened by an all-zero column is, bit for
// bit, the accumulator fed the same rows with that column present (exact
// arithmetic: the zero column's origin is 0 and its scale 1, so its shifted
// values are exact zeros, every product with it is an exact zero, and the
// other columns' sums are formed from the same operands in the same
// order). Its encoding is the same bytes.
func TestWidenExact(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 1))
	var ms, mw *Moments = NewMoments(someSource), NewMoments(allSources)
	qs, qw := NewQR(someSource), NewQR(allSources)
	xs, xw := NewQRExtended(someSource), NewQRExtended(allSources)
	for range 3 {
		b := factorRows(rng, 300, []string{"borehole", "river"}, someSource)
		wb := widenBlock(b)
		ms.Add(b)
		mw.Add(wb)
		qs.Add(b)
		qw.Add(wb)
		xs.Add(b)
		xw.Add(wb)
	}
	ms.Drop(3)
	mw.Drop(3)
	check := func(what string, got, want []byte) {
		t.Helper()
		if !bytes.Equal(got, want) {
			t.Errorf("%s: widened encoding differs from the direct one", what)
		}
	}
	enc := func(x interface{ MarshalBinary() ([]byte, error) }) []byte {
		b, err := x.MarshalBinary()
		if err != nil {
			t.Fatal(err)
		}
		return b
	}
	m := ms.Widen(allSources)
	check("moments", enc(m), enc(mw))
	if m.Min(2) != 0 || m.Max(2) != 0 || m.Mean(2) != 0 || m.At(2, 2) != 0 || m.Counts().Dropped != mw.Counts().Dropped {
		t.Errorf("new column: min %v max %v mean %v var %v", m.Min(2), m.Max(2), m.Mean(2), m.At(2, 2))
	}
	// The factors agree value for value; a zero may differ in sign (a
	// row of R flipped to make its diagonal positive turns the direct
	// factor's zeros into −0).
	sameR := func(what string, got, want *QR) {
		t.Helper()
		if !sameCounts(got.Counts(), want.Counts()) {
			t.Errorf("%s: counts differ", what)
		}
		for j := 0; j < want.P(); j++ {
			if got.Origin(j) != want.Origin(j) || got.Scale(j) != want.Scale(j) {
				t.Errorf("%s: column %d origin/scale differ", what, j)
			}
		}
		if !mat.Equal(got.R(nil), want.R(nil)) {
			t.Errorf("%s: R differs:\n%v\n%v", what, mat.Formatted(got.R(nil)), mat.Formatted(want.R(nil)))
		}
		if want.Extended() && !mat.Equal(got.RLo(nil), want.RLo(nil)) {
			t.Errorf("%s: low parts differ", what)
		}
	}
	sameR("qr", qs.Widen(allSources), qw)
	sameR("extended qr", xs.Widen(allSources), xw)

	// Round trips of widened accumulators, and they keep accumulating as
	// the direct ones do.
	m2, err := UnmarshalMoments(enc(m))
	if err != nil {
		t.Fatal(err)
	}
	q2, err := UnmarshalQR(enc(xs.Widen(allSources)))
	if err != nil {
		t.Fatal(err)
	}
	b := factorRows(rng, 200, []string{"borehole", "reservoir", "river"}, allSources)
	m2.Add(b)
	mw.Add(b)
	q2.Add(b)
	xw.Add(b)
	check("moments after a round trip and more rows", enc(m2), enc(mw))
	sameR("extended qr after a round trip and more rows", q2, xw)

	// An empty accumulator widens to an empty one.
	e := NewMoments(someSource).Widen(allSources)
	check("empty moments", enc(e), enc(NewMoments(allSources)))
	check("empty qr", enc(NewQR(someSource).Widen(allSources)), enc(NewQR(allSources)))
	if !NewQRExtended(someSource).Widen(allSources).Extended() {
		t.Error("a widened extended factor is not extended")
	}
}

// TestWidenMerge: partitions that saw different levels, widened to the
// union and merged in either order, equal one accumulation of all rows
// (merges round differently: agreement to 1e-12 relative to the columns'
// spread, common practice, no source).
func TestWidenMerge(t *testing.T) {
	rng := rand.New(rand.NewPCG(12, 2))
	aCols := someSource // borehole and river
	bCols := []string{"temperature", "supply_source[reservoir]", "supply_source[river]"}
	a := factorRows(rng, 700, []string{"borehole", "river"}, aCols)
	b := factorRows(rng, 500, []string{"reservoir", "river"}, bCols)
	// The rows of both over all columns.
	all := NewBlock(4, 1200, true)
	for _, part := range []struct {
		b    *Block
		cols []string
	}{{a, aCols}, {b, bCols}} {
		for i := 0; i < part.b.Rows; i++ {
			vals, nulls := all.AppendRow()
			for j, c := range part.cols {
				for k, n := range allSources {
					if n == c {
						vals[k] = part.b.Data[i*3+j]
						nulls[k] = part.b.Null[i*3+j]
					}
				}
			}
			all.SetWeight(part.b.Weight[i])
		}
	}
	want := NewMoments(allSources)
	want.Add(all)
	wantQ := NewQR(allSources)
	wantQ.Add(all)
	ma, mb := NewMoments(aCols), NewMoments(bCols)
	ma.Add(a)
	mb.Add(b)
	qa, qb := NewQRExtended(aCols), NewQR(bCols)
	qa.Add(a)
	qb.Add(b)
	for _, order := range []bool{false, true} {
		x, y := ma.Widen(allSources), mb.Widen(allSources)
		qx, qy := qa.Widen(allSources), qb.Widen(allSources)
		if order {
			x, y = y, x
			qx, qy = qy, qx
		}
		x.Merge(y)
		qx.Merge(qy)
		if x.N() != want.N() || x.Counts().Dropped != want.Counts().Dropped || x.Counts().Null[0] != want.Counts().Null[0] {
			t.Fatalf("counts %+v, want %+v", *x.Counts(), *want.Counts())
		}
		for i := range allSources {
			if d := math.Abs(x.Mean(i)-want.Mean(i)) / math.Sqrt(want.At(i, i)/want.SumWeights()); d > 1e-12 {
				t.Errorf("order %v: mean %d off by %.2g sd", order, i, d)
			}
			if x.Min(i) != want.Min(i) || x.Max(i) != want.Max(i) {
				t.Errorf("order %v: column %d extremes %v %v, want %v %v", order, i, x.Min(i), x.Max(i), want.Min(i), want.Max(i))
			}
			for j := i; j < len(allSources); j++ {
				if d := math.Abs(x.At(i, j)-want.At(i, j)) / math.Sqrt(want.At(i, i)*want.At(j, j)); d > 1e-12 {
					t.Errorf("order %v: co-moment %d,%d rel %.2g", order, i, j, d)
				}
			}
		}
		// The factor's trailing block is the R factor of the centered
		// data: its Gram matrix, in the columns' units, is the co-moment
		// matrix (R itself is not unique: the indicators and the
		// intercept are collinear).
		g := centeredGram(qx)
		for i := range allSources {
			for j := i; j < len(allSources); j++ {
				if d := math.Abs(g.At(i, j)-want.At(i, j)) / math.Sqrt(want.At(i, i)*want.At(j, j)); d > 1e-12 {
					t.Errorf("order %v: QR co-moment %d,%d rel %.2g", order, i, j, d)
				}
			}
		}
	}
}

// centeredGram returns the co-moment matrix from q's factor: the Gram
// matrix of its trailing block, brought back from the columns' scales.
func centeredGram(q *QR) *mat.SymDense {
	r := q.R(nil)
	p := q.P()
	tr := mat.NewDense(p, p, nil)
	for i := 0; i < p; i++ {
		for j := i; j < p; j++ {
			tr.Set(i, j, r.At(i+1, j+1)*q.Scale(j))
		}
	}
	var g mat.SymDense
	g.SymOuterK(1, tr.T())
	return &g
}

func TestWidenPanics(t *testing.T) {
	for _, names := range [][]string{
		{"temperature", "supply_source[river]", "supply_source[borehole]"}, // out of order
		{"temperature", "supply_source[borehole]"},                         // missing a column
	} {
		func() {
			defer func() {
				if recover() == nil {
					t.Errorf("Widen(%q) did not panic", names)
				}
			}()
			NewMoments(someSource).Widen(names)
		}()
	}
}
