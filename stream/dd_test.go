package stream

import (
	"math"
	"math/big"
	"math/rand/v2"
	"testing"

	"plumb/internal/eft"
)

// The double-double kernels against arbitrary-precision arithmetic
// (math/big at 2200 bits, enough to hold any sum of two float64 exactly).
// Bounds are in units of u² = 2⁻¹⁰⁶, u the unit roundoff of float64: the
// error-free transformations must be exact, the others within a small
// multiple of u² — a float64 kernel would be off by about u = 1.1e-16.

const ddPrec = 2200

var u2 = math.Ldexp(1, -106)

func bigF(x float64) *big.Float { return new(big.Float).SetPrec(ddPrec).SetFloat64(x) }

func bigDD(h, l float64) *big.Float { return bigF(h).Add(bigF(h), bigF(l)) }

// ddErr returns |got − want| / scale as a float64.
func ddErr(got, want *big.Float, scale float64) float64 {
	d, _ := new(big.Float).SetPrec(ddPrec).Sub(got, want).Float64()
	return math.Abs(d) / scale
}

// randDD draws a normalized double-double with a random sign and an
// exponent in [−40, 40].
func randDD(rng *rand.Rand) (float64, float64) {
	h := math.Ldexp(1+rng.Float64(), rng.IntN(81)-40)
	if rng.IntN(2) == 0 {
		h = -h
	}
	l := h * 0x1p-53 * (2*rng.Float64() - 1)
	return eft.FastTwoSum(h, l)
}

// TestDDArithmetic: ddAdd within 4u²·(|a| + |b|) (the "sloppy" sum's bound,
// relative to the operands), ddMul, ddDiv and ddSqrt within 8u² of the
// exact result, all normalized (|lo| ≤ ½ulp(hi)); ddDot within
// 4(n+1)u²·(|s| + Σ|xᵢyᵢ|) and ddAxpy within 8u²·(|yᵢ| + |αxᵢ|) per element.
func TestDDArithmetic(t *testing.T) {
	rng := rand.New(rand.NewPCG(402, 0))
	normalized := func(what string, h, l float64) {
		t.Helper()
		if math.Abs(l) > 0.5*ulp(h) {
			t.Fatalf("%s: (%v, %v) not normalized", what, h, l)
		}
	}
	var worst [4]float64
	for i := range 20000 {
		ah, al := randDD(rng)
		bh, bl := randDD(rng)
		if i%4 == 0 {
			bh, bl = -ah, -al*(1+rng.Float64()) // cancellation in the sum
		}
		a, b := bigDD(ah, al), bigDD(bh, bl)
		abs := func(x *big.Float) float64 { f, _ := x.Float64(); return math.Abs(f) }

		h, l := ddAdd(ah, al, bh, bl)
		normalized("ddAdd", h, l)
		e := ddErr(bigDD(h, l), new(big.Float).SetPrec(ddPrec).Add(a, b), abs(a)+abs(b)) / u2
		worst[0] = math.Max(worst[0], e)

		h, l = ddMul(ah, al, bh, bl)
		normalized("ddMul", h, l)
		want := new(big.Float).SetPrec(ddPrec).Mul(a, b)
		worst[1] = math.Max(worst[1], ddErr(bigDD(h, l), want, abs(want))/u2)

		h, l = ddDiv(ah, al, bh, bl)
		normalized("ddDiv", h, l)
		want = new(big.Float).SetPrec(ddPrec).Quo(a, b)
		worst[2] = math.Max(worst[2], ddErr(bigDD(h, l), want, abs(want))/u2)

		if ah < 0 {
			ah, al = -ah, -al
		}
		sa, sl := ddSqrt(ah, al)
		normalized("ddSqrt", sa, sl)
		want = new(big.Float).SetPrec(ddPrec).Sqrt(bigDD(ah, al))
		worst[3] = math.Max(worst[3], ddErr(bigDD(sa, sl), want, abs(want))/u2)
	}
	for k, name := range []string{"ddAdd", "ddMul", "ddDiv", "ddSqrt"} {
		bound := 8.0
		if k == 0 {
			bound = 4
		}
		t.Logf("%s: worst error %.2f u²", name, worst[k])
		if worst[k] > bound {
			t.Errorf("%s: error %.2f u² exceeds %.0f u²", name, worst[k], bound)
		}
	}
	if h, l := ddSqrt(0, 0); h != 0 || l != 0 {
		t.Errorf("ddSqrt(0) = %v, %v", h, l)
	}

	for _, n := range []int{1, 7, 300} {
		xh, xl := make([]float64, n), make([]float64, n)
		yh, yl := make([]float64, n), make([]float64, n)
		for i := range xh {
			xh[i], xl[i] = randDD(rng)
			yh[i], yl[i] = randDD(rng)
		}
		sh, sl := randDD(rng)
		want := bigDD(sh, sl)
		mag := math.Abs(sh)
		for i := range xh {
			p := new(big.Float).SetPrec(ddPrec).Mul(bigDD(xh[i], xl[i]), bigDD(yh[i], yl[i]))
			want.Add(want, p)
			f, _ := p.Float64()
			mag += math.Abs(f)
		}
		h, l := ddDot(sh, sl, xh, xl, yh, yl)
		if e := ddErr(bigDD(h, l), want, mag) / u2; e > 4*float64(n+1) {
			t.Errorf("ddDot n=%d: error %.2f u² of Σ|terms| exceeds %d u²", n, e, 4*(n+1))
		}

		ah, al := randDD(rng)
		ref := make([]*big.Float, n)
		for i := range ref {
			ref[i] = new(big.Float).SetPrec(ddPrec).Mul(bigDD(ah, al), bigDD(xh[i], xl[i]))
			ref[i].Add(ref[i], bigDD(yh[i], yl[i]))
		}
		mags := make([]float64, n)
		for i := range mags {
			mags[i] = math.Abs(yh[i]) + math.Abs(ah*xh[i])
		}
		ddAxpy(ah, al, xh, xl, yh, yl)
		for i := range ref {
			if e := ddErr(bigDD(yh[i], yl[i]), ref[i], mags[i]) / u2; e > 8 {
				t.Errorf("ddAxpy n=%d element %d: error %.2f u² exceeds 8 u²", n, i, e)
			}
			normalized("ddAxpy", yh[i], yl[i])
		}
	}
}
