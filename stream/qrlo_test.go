package stream

import (
	"math"
	"math/big"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// TestQRLowParts: through the exported accessors alone, an extended
// factor's R + RLo (summed exactly) satisfies RᵀR = Σw·a·aᵀ, a = (1, x − c),
// to 1e-30 relative against exact rational arithmetic computed in the test;
// every low part is at most half an ulp of its high part; the accessors size
// an empty destination and reuse a right-sized one; and the low parts
// survive an encoding round trip bit for bit.
func TestQRLowParts(t *testing.T) {
	rng := rand.New(rand.NewPCG(301, 0))
	cols := []column{{"metered_volume", 2.4e6, 3e3, 0.3}, {"billed_volume", 2.4e6, 3e3, 0.3}, waterColumns[0], waterColumns[3]}
	rows := genRows(rng, 700, cols)
	w := make([]float64, len(rows))
	for i := range w {
		w[i] = 0.5 + rng.Float64()
	}
	q := NewQRExtended(names(cols))
	feed(q, rows, w, nil, 96)
	n := len(cols) + 1

	hi := q.R(nil)
	var lo mat.TriDense
	q.RLo(&lo)
	if r, _ := lo.Triangle(); r != n {
		t.Fatalf("RLo sized %d, want %d", r, n)
	}
	again := q.RLo(mat.NewTriDense(n, mat.Upper, nil))
	for i := 0; i < n; i++ {
		for j := i; j < n; j++ {
			h, l := hi.At(i, j), lo.At(i, j)
			if math.Abs(l) > 0.5*ulp(h) {
				t.Errorf("RLo(%d,%d) = %g exceeds half an ulp of R = %g", i, j, l, h)
			}
			if again.At(i, j) != l {
				t.Errorf("RLo into a sized dst differs at (%d,%d)", i, j)
			}
		}
	}

	c := make([]float64, len(cols))
	for j := range c {
		c[j] = q.Origin(j)
	}
	want := exactGramRat(rows, w, c)
	hiOwn, loOwn := ownR(q), ownRLo(q)
	r := make([][]*big.Rat, n)
	for i := range r {
		r[i] = make([]*big.Rat, n)
		for j := range r[i] {
			r[i][j] = new(big.Rat)
			if j >= i {
				r[i][j].Add(rat(hiOwn.At(i, j)), rat(loOwn.At(i, j)))
			}
		}
	}
	tmp := new(big.Rat)
	for a := 0; a < n; a++ {
		for b := a; b < n; b++ {
			got := new(big.Rat)
			for i := 0; i <= a; i++ {
				got.Add(got, tmp.Mul(r[i][a], r[i][b]))
			}
			scale := math.Sqrt(ratFloat(want[a][a]) * ratFloat(want[b][b]))
			if e := ratRelErr(got, want[a][b], scale); e > 1e-30 {
				t.Errorf("(R+RLo)ᵀ(R+RLo)(%d,%d) rel err %.2g > 1e-30", a, b, e)
			}
		}
	}

	blob, err := q.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	back, err := UnmarshalQR(blob)
	if err != nil {
		t.Fatal(err)
	}
	blo := back.RLo(nil)
	for i := 0; i < n; i++ {
		for j := i; j < n; j++ {
			if math.Float64bits(blo.At(i, j)) != math.Float64bits(lo.At(i, j)) {
				t.Errorf("decoded RLo(%d,%d) = %v, encoded %v", i, j, blo.At(i, j), lo.At(i, j))
			}
		}
	}
}

func ulp(x float64) float64 {
	x = math.Abs(x)
	return math.Nextafter(x, math.Inf(1)) - x
}

// TestQRLowPartsPanics: asking a float64 factor for low parts, or passing a
// wrong-sized destination, is a caller mistake and panics (package
// convention).
func TestQRLowPartsPanics(t *testing.T) {
	mustPanic := func(name string, f func()) {
		t.Helper()
		defer func() {
			if recover() == nil {
				t.Errorf("%s: no panic", name)
			}
		}()
		f()
	}
	cols := []string{"temperature", "rainfall"}
	mustPanic("float64 factor", func() { NewQR(cols).RLo(nil) })
	mustPanic("wrong size", func() { NewQRExtended(cols).RLo(mat.NewTriDense(2, mat.Upper, nil)) })
	mustPanic("lower triangle", func() { NewQRExtended(cols).RLo(mat.NewTriDense(3, mat.Lower, nil)) })
}
