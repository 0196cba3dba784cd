package eft

import (
	"math"
	"math/big"
	"math/rand/v2"
	"testing"
)

// bigF holds x exactly (math/big at 2200 bits holds any sum or product of
// two float64 exactly).
func bigF(x float64) *big.Float { return new(big.Float).SetPrec(2200).SetFloat64(x) }

func bigPair(h, l float64) *big.Float { return bigF(h).Add(bigF(h), bigF(l)) }

// TestErrorFree: TwoSum, FastTwoSum and TwoProd return the rounded result
// and its exact error (definition of the transformations; Knuth, Dekker),
// checked against exact arithmetic in math/big.
func TestErrorFree(t *testing.T) {
	rng := rand.New(rand.NewPCG(401, 0))
	draw := func() float64 {
		h := math.Ldexp(1+rng.Float64(), rng.IntN(81)-40)
		if rng.IntN(2) == 0 {
			h = -h
		}
		return h
	}
	for i := range 20000 {
		a, b := draw(), draw()
		if i%4 == 0 {
			b = -a * (1 + 0x1p-40*rng.Float64()) // heavy cancellation
		}
		s, e := TwoSum(a, b)
		if s != a+b || bigPair(s, e).Cmp(bigF(a).Add(bigF(a), bigF(b))) != 0 {
			t.Fatalf("TwoSum(%v, %v) = %v, %v: not exact", a, b, s, e)
		}
		x, y := a, b
		if math.Abs(x) < math.Abs(y) {
			x, y = y, x
		}
		s, e = FastTwoSum(x, y)
		if s != x+y || bigPair(s, e).Cmp(bigF(x).Add(bigF(x), bigF(y))) != 0 {
			t.Fatalf("FastTwoSum(%v, %v) = %v, %v: not exact", x, y, s, e)
		}
		p, e := TwoProd(a, b)
		if p != a*b || bigPair(p, e).Cmp(bigF(a).Mul(bigF(a), bigF(b))) != 0 {
			t.Fatalf("TwoProd(%v, %v) = %v, %v: not exact", a, b, p, e)
		}
	}
}
