package diagnostics

import (
	"math"
	"math/big"
	"math/rand/v2"
	"testing"

	"plumb/internal/eft"
)

// The precise path's double-double arithmetic against math/big at 2200
// bits (enough to hold any sum of two float64 exactly). Bounds are in
// units of u² = 2⁻¹⁰⁶ (u the unit roundoff of float64); a float64
// computation would be off by about u = 1.1e-16.

const bigPrec = 2200

var uu = math.Ldexp(1, -106)

func bf(x float64) *big.Float { return new(big.Float).SetPrec(bigPrec).SetFloat64(x) }

func (a ddf) big() *big.Float { return bf(a.hi).Add(bf(a.hi), bf(a.lo)) }

func bigAbs(x *big.Float) float64 { f, _ := x.Float64(); return math.Abs(f) }

// bigRel returns |got − want| / scale.
func bigRel(got, want *big.Float, scale float64) float64 {
	d, _ := new(big.Float).SetPrec(bigPrec).Sub(got, want).Float64()
	return math.Abs(d) / scale
}

func randDDF(r *rand.Rand) ddf {
	h := math.Ldexp(1+r.Float64(), r.IntN(81)-40)
	if r.IntN(2) == 0 {
		h = -h
	}
	s, e := eft.FastTwoSum(h, h*0x1p-53*(2*r.Float64()-1))
	return ddf{s, e}
}

func ulpOf(x float64) float64 {
	x = math.Abs(x)
	return math.Nextafter(x, math.Inf(1)) - x
}

// TestDDScalar: the error-free transformations are exact; add, mul, div
// and sqrt are within a few u² of the exact result (the accurate sum also
// under cancellation, relative to the result), normalized.
func TestDDScalar(t *testing.T) {
	r := rand.New(rand.NewPCG(501, 0))
	var worst [4]float64
	for i := range 20000 {
		a, b := randDDF(r), randDDF(r)
		if i%4 == 0 {
			b = ddf{-a.hi, -a.lo * (1 + r.Float64())} // cancellation
		}
		s, e := eft.TwoSum(a.hi, b.hi)
		if (ddf{s, e}).big().Cmp(bf(a.hi).Add(bf(a.hi), bf(b.hi))) != 0 {
			t.Fatalf("eft.TwoSum(%v, %v) not exact", a.hi, b.hi)
		}
		p, e := eft.TwoProd(a.hi, b.hi)
		if (ddf{p, e}).big().Cmp(bf(a.hi).Mul(bf(a.hi), bf(b.hi))) != 0 {
			t.Fatalf("eft.TwoProd(%v, %v) not exact", a.hi, b.hi)
		}
		for k, c := range []struct {
			got  ddf
			want *big.Float
		}{
			{a.add(b), new(big.Float).SetPrec(bigPrec).Add(a.big(), b.big())},
			{a.mul(b), new(big.Float).SetPrec(bigPrec).Mul(a.big(), b.big())},
			{a.div(b), new(big.Float).SetPrec(bigPrec).Quo(a.big(), b.big())},
			{ddf{math.Abs(a.hi), math.Copysign(1, a.hi) * a.lo}.sqrt(),
				new(big.Float).SetPrec(bigPrec).Sqrt(new(big.Float).SetPrec(bigPrec).Abs(a.big()))},
		} {
			if math.Abs(c.got.lo) > 0.5*ulpOf(c.got.hi) {
				t.Fatalf("op %d: (%v, %v) not normalized", k, c.got.hi, c.got.lo)
			}
			if c.want.Sign() == 0 {
				if c.got.hi != 0 || c.got.lo != 0 {
					t.Errorf("op %d: %v + %v for an exact zero", k, c.got.hi, c.got.lo)
				}
				continue
			}
			worst[k] = math.Max(worst[k], bigRel(c.got.big(), c.want, bigAbs(c.want))/uu)
		}
	}
	for k, name := range []string{"add", "mul", "div", "sqrt"} {
		t.Logf("%s: worst relative error %.2f u²", name, worst[k])
		if worst[k] > 8 {
			t.Errorf("%s: relative error %.2f u² exceeds 8 u²", name, worst[k])
		}
	}
	if z := (ddf{}).sqrt(); z != (ddf{}) {
		t.Errorf("sqrt(0) = %v", z)
	}
}

// TestDDMatrix: for random 12×5 and 5×5 matrices in double-double, ddQR's
// R has a non-negative diagonal and zeros below it and satisfies
// RᵀR = AᵀA to 1e-29 relative (entry (a,b) against √(‖a_a‖²‖a_b‖²)); the
// triangular inverse times R is the identity, and a back substitution's
// residual is at the same level (exact products in math/big).
func TestDDMatrix(t *testing.T) {
	r := rand.New(rand.NewPCG(502, 0))
	for _, shape := range [][2]int{{12, 5}, {5, 5}, {3, 4}} {
		rows, n := shape[0], shape[1]
		a := newDDMat(rows, n)
		for i := range a.d {
			a.d[i] = randDDF(r).ldexp(-r.IntN(20))
		}
		// A nearly dependent pair of columns, so that the reflections
		// cancel heavily.
		for i := 0; i < rows; i++ {
			a.set(i, n-1, a.at(i, 0).add(ddf{1e-9 * a.at(i, 1).hi, 0}))
		}
		rr := ddQR(a)
		if rr.r != n || rr.c != n {
			t.Fatalf("R is %d×%d, want %d×%d", rr.r, rr.c, n, n)
		}
		gram := func(m ddMat, x, y int) *big.Float {
			s := new(big.Float).SetPrec(bigPrec)
			for i := 0; i < m.r; i++ {
				s.Add(s, new(big.Float).SetPrec(bigPrec).Mul(m.at(i, x).big(), m.at(i, y).big()))
			}
			return s
		}
		for i := 0; i < n; i++ {
			if rr.at(i, i).hi < 0 {
				t.Errorf("%v: R(%d,%d) < 0", shape, i, i)
			}
			for j := 0; j < i; j++ {
				if rr.at(i, j) != (ddf{}) {
					t.Errorf("%v: R(%d,%d) = %v below the diagonal", shape, i, j, rr.at(i, j))
				}
			}
		}
		for x := 0; x < n; x++ {
			for y := x; y < n; y++ {
				scale := math.Sqrt(bigAbs(gram(a, x, x)) * bigAbs(gram(a, y, y)))
				if e := bigRel(gram(rr, x, y), gram(a, x, y), scale); e > 1e-29 {
					t.Errorf("%v: RᵀR(%d,%d) rel err %.2g > 1e-29", shape, x, y, e)
				}
			}
		}
		if rows < n {
			continue // singular R: no inverse
		}
		inv := ddTriInv(rr)
		for i := 0; i < n; i++ {
			for j := 0; j < n; j++ {
				s := new(big.Float).SetPrec(bigPrec)
				mag := 0.0
				for k := 0; k < n; k++ {
					p := new(big.Float).SetPrec(bigPrec).Mul(inv.at(i, k).big(), rr.at(k, j).big())
					s.Add(s, p)
					mag += bigAbs(p)
				}
				want := 0.0
				if i == j {
					want = 1
				}
				if e := bigRel(s, bf(want), math.Max(mag, 1)); e > 1e-29 {
					t.Errorf("%v: (R⁻¹R)(%d,%d) off by %.2g", shape, i, j, e)
				}
			}
		}
		b := make([]ddf, n)
		for i := range b {
			b[i] = randDDF(r)
		}
		x := ddBackSolve(rr, b)
		for i := 0; i < n; i++ {
			s := new(big.Float).SetPrec(bigPrec).Neg(b[i].big())
			mag := bigAbs(b[i].big())
			for k := i; k < n; k++ {
				p := new(big.Float).SetPrec(bigPrec).Mul(rr.at(i, k).big(), x[k].big())
				s.Add(s, p)
				mag += bigAbs(p)
			}
			if e := bigRel(s, bf(0), mag); e > 1e-29 {
				t.Errorf("%v: back substitution residual %d is %.2g of its terms", shape, i, e)
			}
		}
	}
}
