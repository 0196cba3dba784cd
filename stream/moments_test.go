package stream

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// TestMomentsExact checks count, means, co-moments, min and max against the
// two-pass reference in exact rational arithmetic, computed in the test
// (exactMoments); min, max and counts against their definition, evaluated in
// the test.
func TestMomentsExact(t *testing.T) {
	cases := []struct {
		name      string
		cols      []column
		n         int
		blockRows int
		weighted  bool
		seed      uint64
		tol       float64
	}{
		{"one row", waterColumns, 1, 4, false, 1, 1e-15},
		{"two rows", waterColumns[:2], 2, 1, false, 2, 1e-14},
		{"single block", waterColumns, 300, 1024, false, 3, 1e-13},
		{"many blocks", waterColumns, 300, 7, false, 4, 1e-13},
		{"row by row", waterColumns[:3], 200, 1, false, 5, 1e-13},
		{"weighted single block", waterColumns, 300, 1024, true, 6, 1e-13},
		{"weighted many blocks", waterColumns, 300, 13, true, 7, 1e-13},
		{"one column", waterColumns[2:3], 250, 32, false, 8, 1e-13},
		{"large offsets", []column{{"metered_volume", 3.1e7, 2.5e3, 0.4}, {"billed_volume", 3.0e7, 2.5e3, 0.4}}, 300, 64, false, 9, 1e-13},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(tc.seed, 0))
			rows := genRows(rng, tc.n, tc.cols)
			var w []float64
			if tc.weighted {
				w = make([]float64, tc.n)
				for i := range w {
					w[i] = 3 * rng.Float64()
				}
			}
			m := NewMoments(names(tc.cols))
			feed(m, rows, w, nil, tc.blockRows)

			if m.N() != int64(tc.n) {
				t.Errorf("N = %d, want %d", m.N(), tc.n)
			}
			if c := m.Counts(); c.Used != int64(tc.n) || c.Dropped != 0 || c.BadWeights != 0 {
				t.Errorf("counts %+v, want %d used and none dropped", *c, tc.n)
			}
			ref := exactMoments(rows, w)
			checkMomentsRef(t, m, ref, tc.tol)
			for j := range tc.cols {
				lo, hi := math.Inf(1), math.Inf(-1)
				for _, r := range rows {
					lo, hi = math.Min(lo, r[j]), math.Max(hi, r[j])
				}
				if m.Min(j) != lo || m.Max(j) != hi {
					t.Errorf("column %d: min, max = %v, %v; want %v, %v", j, m.Min(j), m.Max(j), lo, hi)
				}
			}
			// Means and CoMoment agree with Mean and At, and CoMoment is
			// symmetric by construction.
			means := m.Means(nil)
			cm := m.CoMoment(nil)
			for a := range tc.cols {
				if means[a] != m.Mean(a) {
					t.Errorf("Means[%d] = %v, Mean(%d) = %v", a, means[a], a, m.Mean(a))
				}
				for b := range tc.cols {
					if cm.At(a, b) != m.At(a, b) || m.At(a, b) != m.At(b, a) {
						t.Errorf("CoMoment(%d,%d) = %v, At = %v, At(b,a) = %v", a, b, cm.At(a, b), m.At(a, b), m.At(b, a))
					}
				}
			}
		})
	}
}

// TestMomentsConstantColumn: a column that never varies (a stuck pressure
// sensor) has co-moments exactly zero and min == max, however the rows are
// blocked and merged (exact by construction: the origin is the constant).
func TestMomentsConstantColumn(t *testing.T) {
	cols := []column{waterColumns[0], {"pressure_south", 0.1, 0, 0}, waterColumns[3]}
	rng := rand.New(rand.NewPCG(11, 0))
	rows := genRows(rng, 500, cols)
	for _, blockRows := range []int{1, 3, 100, 1024} {
		m := NewMoments(names(cols))
		feed(m, rows[:250], nil, nil, blockRows)
		o := NewMoments(names(cols))
		feed(o, rows[250:], nil, nil, blockRows)
		m.Merge(o)
		for j := 0; j < 3; j++ {
			if m.At(1, j) != 0 {
				t.Errorf("block %d: At(1,%d) = %v, want exactly 0", blockRows, j, m.At(1, j))
			}
		}
		if m.Min(1) != 0.1 || m.Max(1) != 0.1 || m.Mean(1) != 0.1 {
			t.Errorf("block %d: min, max, mean = %v, %v, %v; want 0.1", blockRows, m.Min(1), m.Max(1), m.Mean(1))
		}
	}
}

// TestMomentsWeightsReplicate: integer weights give the same sums of weights,
// means and co-moments as the rows replicated that many times (definition of
// frequency weights; both also checked against the exact reference).
func TestMomentsWeightsReplicate(t *testing.T) {
	for _, seed := range []uint64{21, 22, 23} {
		rng := rand.New(rand.NewPCG(seed, 0))
		rows := genRows(rng, 150, waterColumns)
		w := make([]float64, len(rows))
		var rep [][]float64
		for i := range rows {
			w[i] = float64(rng.IntN(4)) // 0 to 3
			for range int(w[i]) {
				rep = append(rep, rows[i])
			}
		}
		weighted := NewMoments(names(waterColumns))
		feed(weighted, rows, w, nil, 16)
		replicated := NewMoments(names(waterColumns))
		feed(replicated, rep, nil, nil, 16)

		if weighted.SumWeights() != float64(len(rep)) {
			t.Errorf("seed %d: SumWeights = %v, want %d", seed, weighted.SumWeights(), len(rep))
		}
		// Zero-weight rows are used (counted) but carry no weight.
		if weighted.N() != int64(len(rows)) || replicated.N() != int64(len(rep)) {
			t.Errorf("seed %d: N = %d and %d, want %d and %d", seed, weighted.N(), replicated.N(), len(rows), len(rep))
		}
		ref := exactMoments(rep, nil)
		checkMomentsRef(t, weighted, ref, 1e-12)
		checkMomentsRef(t, replicated, ref, 1e-12)
	}
}

// TestMomentsListwise: rows with NULL, NaN or ±Inf in any column are dropped
// and counted against each offending column; what remains equals the
// accumulator of the complete rows alone. The expected counts are read off
// the table below by hand (definition of listwise deletion).
func TestMomentsListwise(t *testing.T) {
	nan, inf := math.NaN(), math.Inf(1)
	type row struct {
		v    [3]float64
		null [3]bool
	}
	rows := []row{
		{v: [3]float64{21.5, 0.0, 47800}},
		{v: [3]float64{22.0, 1.2, 47810}, null: [3]bool{false, true, false}},       // NULL rainfall
		{v: [3]float64{nan, 0.4, 47790}},                                           // NaN temperature
		{v: [3]float64{19.5, inf, 47800}},                                          // +Inf rainfall
		{v: [3]float64{18.0, 3.1, -inf}},                                           // −Inf population
		{v: [3]float64{nan, nan, 47820}, null: [3]bool{true, false, false}},        // NULL (marked) temperature, NaN rainfall
		{v: [3]float64{17.5, 2.2, 47830}},                                          //
		{v: [3]float64{16.0, 0, 0}, null: [3]bool{true, true, true}},               // all NULL
		{v: [3]float64{20.5, 0.8, 47805}},                                          //
		{v: [3]float64{-inf, 0.1, nan}},                                            // −Inf temperature, NaN population
		{v: [3]float64{23.0, 0.0, 47815}},                                          //
		{v: [3]float64{math.MaxFloat64, -math.MaxFloat64, 47800}, null: [3]bool{}}, // finite extremes are valid
	}
	wantNull := []int64{2, 2, 1}
	wantNaN := []int64{1, 1, 1}
	wantInf := []int64{1, 1, 1}
	const wantDropped, wantUsed = 7, 5

	cols := []string{"temperature", "rainfall", "population_served"}
	for _, blockRows := range []int{1, 4, 64} {
		m := NewMoments(cols)
		q := NewQR(cols)
		b := NewBlock(3, blockRows, false)
		clean := NewMoments(cols)
		cb := NewBlock(3, blockRows, false)
		for _, r := range rows {
			vals, nulls := b.AppendRow()
			copy(vals, r.v[:])
			copy(nulls, r.null[:])
			if b.Full() {
				m.Add(b)
				q.Add(b)
				b.Reset()
			}
		}
		m.Add(b)
		q.Add(b)
		for _, r := range rows[:11] {
			ok := true
			for j := range 3 {
				ok = ok && !r.null[j] && !math.IsNaN(r.v[j]) && !math.IsInf(r.v[j], 0)
			}
			if ok {
				vals, _ := cb.AppendRow()
				copy(vals, r.v[:])
			}
		}
		clean.Add(cb)

		for _, c := range []*Counts{m.Counts(), q.Counts()} {
			if c.Used != wantUsed || c.Dropped != wantDropped || c.BadWeights != 0 || c.SumWeights != wantUsed {
				t.Errorf("block %d: used %d (weight %v), dropped %d, bad weights %d; want %d, %d, 0",
					blockRows, c.Used, c.SumWeights, c.Dropped, c.BadWeights, wantUsed, wantDropped)
			}
			for j := range cols {
				if c.Null[j] != wantNull[j] || c.NaN[j] != wantNaN[j] || c.Inf[j] != wantInf[j] {
					t.Errorf("block %d: %s NULL/NaN/Inf = %d/%d/%d, want %d/%d/%d", blockRows, cols[j],
						c.Null[j], c.NaN[j], c.Inf[j], wantNull[j], wantNaN[j], wantInf[j])
				}
			}
			miss := c.Missing(nil)
			for j := range cols {
				if miss[j] != wantNull[j]+wantNaN[j]+wantInf[j] {
					t.Errorf("block %d: Missing[%d] = %d", blockRows, j, miss[j])
				}
			}
		}
		// The MaxFloat64 row is valid: min and max reach it.
		if m.Max(0) != math.MaxFloat64 || m.Min(1) != -math.MaxFloat64 {
			t.Errorf("block %d: extremes %v, %v lost", blockRows, m.Max(0), m.Min(1))
		}
		// Without the extreme row, the accumulator equals that of the
		// complete rows.
		m2 := NewMoments(cols)
		b.Reset()
		for _, r := range rows[:11] {
			vals, nulls := b.AppendRow()
			copy(vals, r.v[:])
			copy(nulls, r.null[:])
			if b.Full() {
				m2.Add(b)
				b.Reset()
			}
		}
		m2.Add(b)
		m2.counts.Dropped -= wantDropped
		for j := range cols {
			m2.counts.Null[j], m2.counts.NaN[j], m2.counts.Inf[j] = 0, 0, 0
		}
		checkMomentsSame(t, m2, clean, 1e-13)
	}
}

// TestMomentsBadWeights: a negative, NaN or ±Inf weight drops its row and
// counts it once as a bad weight (and not against its columns); zero and
// negative-zero weights are valid (definitions in Block's documentation).
func TestMomentsBadWeights(t *testing.T) {
	nan, inf := math.NaN(), math.Inf(1)
	cases := []struct {
		name        string
		w           float64
		val         float64 // value of column 0
		bad         bool
		wantNaNCols int64
	}{
		{"unit", 1, 20, false, 0},
		{"fractional", 0.25, 20, false, 0},
		{"zero", 0, 20, false, 0},
		{"negative zero", math.Copysign(0, -1), 20, false, 0},
		{"negative", -1, 20, true, 0},
		{"tiny negative", -math.SmallestNonzeroFloat64, 20, true, 0},
		{"NaN", nan, 20, true, 0},
		{"+Inf", inf, 20, true, 0},
		{"-Inf", -inf, 20, true, 0},
		{"bad weight and NaN value", -2, nan, true, 0},
		{"good weight and NaN value", 2, nan, false, 1},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			for _, acc := range []adder{NewMoments([]string{"temperature", "rainfall"}), NewQR([]string{"temperature", "rainfall"})} {
				b := NewBlock(2, 4, true)
				vals, _ := b.AppendRow()
				vals[0], vals[1] = 18, 1
				vals, _ = b.AppendRow()
				vals[0], vals[1] = tc.val, 2
				b.SetWeight(tc.w)
				acc.Add(b)
				var c *Counts
				switch a := acc.(type) {
				case *Moments:
					c = a.Counts()
				case *QR:
					c = a.Counts()
				}
				wantBad, wantUsed, wantDropped := int64(0), int64(2), int64(0)
				if tc.bad {
					wantBad, wantUsed, wantDropped = 1, 1, 1
				}
				if tc.wantNaNCols > 0 {
					wantUsed, wantDropped = 1, 1
				}
				if c.BadWeights != wantBad || c.Used != wantUsed || c.Dropped != wantDropped || c.NaN[0] != tc.wantNaNCols {
					t.Errorf("%T: bad %d used %d dropped %d NaN[0] %d; want %d %d %d %d", acc,
						c.BadWeights, c.Used, c.Dropped, c.NaN[0], wantBad, wantUsed, wantDropped, tc.wantNaNCols)
				}
				wantSW := 1.0
				if !tc.bad && tc.wantNaNCols == 0 {
					wantSW += tc.w
				}
				if c.SumWeights != wantSW {
					t.Errorf("%T: SumWeights = %v, want %v", acc, c.SumWeights, wantSW)
				}
			}
		})
	}
}

// TestMomentsAllZeroWeights: rows that carry no weight are counted, set the
// extremes, and leave the means undefined (NaN) and the co-moments zero
// (definition of the weighted mean).
func TestMomentsAllZeroWeights(t *testing.T) {
	m := NewMoments([]string{"temperature", "rainfall"})
	b := NewBlock(2, 4, true)
	for i := range 3 {
		vals, _ := b.AppendRow()
		vals[0], vals[1] = float64(10+i), float64(i)
		b.SetWeight(0)
	}
	m.Add(b)
	if m.N() != 3 || m.SumWeights() != 0 || !math.IsNaN(m.Mean(0)) || m.At(0, 1) != 0 || m.Min(0) != 10 || m.Max(0) != 12 {
		t.Errorf("N %d, weight %v, mean %v, co %v, min %v, max %v", m.N(), m.SumWeights(), m.Mean(0), m.At(0, 1), m.Min(0), m.Max(0))
	}
	// Merged into an empty accumulator and then given weighted rows, the
	// result is that of the weighted rows alone.
	e := NewMoments([]string{"temperature", "rainfall"})
	e.Merge(m)
	b.Reset()
	rows := [][]float64{{14, 1}, {15, 3}, {17, 2}}
	for _, r := range rows {
		vals, _ := b.AppendRow()
		copy(vals, r)
	}
	e.Add(b)
	checkMomentsRef(t, e, exactMoments(rows, nil), 1e-15)
	if e.N() != 6 {
		t.Errorf("N = %d, want 6", e.N())
	}
}

// TestMomentsEmpty: a fresh accumulator and one fed only dropped rows report
// no rows, undefined means and empty extremes (definitions).
func TestMomentsEmpty(t *testing.T) {
	cols := []string{"temperature", "rainfall"}
	fresh := NewMoments(cols)
	dropped := NewMoments(cols)
	b := NewBlock(2, 2, false)
	dropped.Add(b) // empty block
	vals, nulls := b.AppendRow()
	vals[0] = math.NaN()
	nulls[1] = true
	dropped.Add(b)
	for _, m := range []*Moments{fresh, dropped} {
		if m.N() != 0 || m.SumWeights() != 0 || !math.IsNaN(m.Mean(0)) || !math.IsInf(m.Min(0), 1) || !math.IsInf(m.Max(1), -1) || m.At(0, 0) != 0 {
			t.Errorf("N %d weight %v mean %v min %v max %v", m.N(), m.SumWeights(), m.Mean(0), m.Min(0), m.Max(1))
		}
	}
	if c := dropped.Counts(); c.Dropped != 1 || c.NaN[0] != 1 || c.Null[1] != 1 {
		t.Errorf("counts %+v", *c)
	}
}

// TestMomentsSelect: selecting columns of an accumulator of complete rows
// equals accumulating those columns alone (property; compared to 1e-13).
func TestMomentsSelect(t *testing.T) {
	rng := rand.New(rand.NewPCG(31, 0))
	rows := genRows(rng, 400, waterColumns)
	all := NewMoments(names(waterColumns))
	feed(all, rows, nil, nil, 50)
	idx := []int{4, 0, 2}
	sub := make([][]float64, len(rows))
	var sel []column
	for _, j := range idx {
		sel = append(sel, waterColumns[j])
	}
	for i, r := range rows {
		for _, j := range idx {
			sub[i] = append(sub[i], r[j])
		}
	}
	want := NewMoments(names(sel))
	feed(want, sub, nil, nil, 50)
	got := all.Select(idx)
	if strings.Join(got.Names(), ",") != "pressure_north,temperature,population_served" {
		t.Errorf("names %v", got.Names())
	}
	checkMomentsSame(t, got, want, 1e-13)
	checkMomentsRef(t, got, exactMoments(sub, nil), 1e-13)
}

// TestMomentsCloneReset: a clone is independent of its source; Reset gives
// an accumulator that behaves like a fresh one, bit for bit (property).
func TestMomentsCloneReset(t *testing.T) {
	rng := rand.New(rand.NewPCG(41, 0))
	rows := genRows(rng, 300, waterColumns)
	m := NewMoments(names(waterColumns))
	feed(m, rows[:100], nil, nil, 32)
	c := m.Clone()
	snapshot, _ := c.MarshalBinary()
	feed(m, rows[100:], nil, nil, 32)
	if after, _ := c.MarshalBinary(); string(after) != string(snapshot) {
		t.Error("clone changed when its source was fed")
	}
	feed(c, rows[100:], nil, nil, 32)
	checkMomentsSame(t, c, m, 0)

	m.Reset()
	fresh := NewMoments(names(waterColumns))
	feed(m, rows[50:], nil, nil, 32)
	feed(fresh, rows[50:], nil, nil, 32)
	a, _ := m.MarshalBinary()
	b, _ := fresh.MarshalBinary()
	if string(a) != string(b) {
		t.Error("a reset accumulator differs from a fresh one fed the same rows")
	}
}

// TestShapePanics: caller mistakes panic (gonum convention).
func TestShapePanics(t *testing.T) {
	two := []string{"temperature", "rainfall"}
	cases := []struct {
		name string
		f    func()
	}{
		{"NewMoments no columns", func() { NewMoments(nil) }},
		{"NewQR no columns", func() { NewQR(nil) }},
		{"NewBlock zero columns", func() { NewBlock(0, 1, false) }},
		{"NewBlock zero rows", func() { NewBlock(1, 0, false) }},
		{"SetWeight unweighted", func() { b := NewBlock(1, 1, false); b.AppendRow(); b.SetWeight(1) }},
		{"Moments.Add wrong width", func() { NewMoments(two).Add(NewBlock(3, 1, false)) }},
		{"QR.Add wrong width", func() { NewQR(two).Add(NewBlock(1, 1, false)) }},
		{"Moments.Add short data", func() { b := NewBlock(2, 1, false); b.Rows = 1; NewMoments(two).Add(b) }},
		{"Moments.Merge other width", func() { NewMoments(two).Merge(NewMoments(two[:1])) }},
		{"Moments.Merge other names", func() { NewMoments(two).Merge(NewMoments([]string{"rainfall", "temperature"})) }},
		{"QR.Merge other width", func() { NewQR(two).Merge(NewQR(two[:1])) }},
		{"QR.Merge other names", func() { NewQR(two).Merge(NewQR([]string{"a", "b"})) }},
		{"Means wrong dst", func() { NewMoments(two).Means(make([]float64, 3)) }},
		{"CoMoment wrong dst", func() { NewMoments(two).CoMoment(mat.NewSymDense(3, nil)) }},
		{"R wrong dst", func() { NewQR(two).R(mat.NewTriDense(2, mat.Upper, nil)) }},
		{"R lower dst", func() { NewQR(two).R(mat.NewTriDense(3, mat.Lower, nil)) }},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			defer func() {
				if recover() == nil {
					t.Error("no panic")
				}
			}()
			tc.f()
		})
	}
}

// TestBlockGrow: appending past the capacity grows the block and keeps the
// rows (property).
func TestBlockGrow(t *testing.T) {
	b := NewBlock(2, 1, true)
	for i := range 5 {
		vals, nulls := b.AppendRow()
		vals[0], vals[1] = float64(i), float64(-i)
		nulls[1] = i%2 == 1
		b.SetWeight(float64(i))
	}
	if b.Rows != 5 || len(b.Data) != 10 || len(b.Weight) != 5 || b.Cap() < 5 {
		t.Fatalf("rows %d data %d weight %d cap %d", b.Rows, len(b.Data), len(b.Weight), b.Cap())
	}
	for i := range 5 {
		if b.Data[2*i] != float64(i) || b.Data[2*i+1] != float64(-i) || b.Null[2*i+1] != (i%2 == 1) || b.Weight[i] != float64(i) {
			t.Errorf("row %d: %v %v %v %v", i, b.Data[2*i], b.Data[2*i+1], b.Null[2*i+1], b.Weight[i])
		}
	}
	b.Reset()
	vals, nulls := b.AppendRow()
	if b.Rows != 1 || vals[0] != 0 || nulls[1] || b.Weight[0] != 1 {
		t.Errorf("after Reset: rows %d, %v %v %v", b.Rows, vals, nulls, b.Weight)
	}
}
