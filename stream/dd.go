package stream

import (
	"math"

	"plumb/internal/eft"
)

// Double-double arithmetic: a value is an unevaluated sum hi + lo of two
// float64 with |lo| ≤ ½ulp(hi), about 106 significant bits. The error-free
// transformations are those of Knuth (TwoSum), Dekker (FastTwoSum) and the
// FMA form of TwoProduct; additions inside the kernels use the "sloppy"
// double-double sum, whose error is bounded by about 2⁻¹⁰⁴·(|a|+|b|), which
// is what the backward stability of Householder QR needs (the same kind of
// bound as for inner products).

// ddAdd returns (ah+al) + (bh+bl).
func ddAdd(ah, al, bh, bl float64) (float64, float64) {
	s, e := eft.TwoSum(ah, bh)
	e += al + bl
	return eft.FastTwoSum(s, e)
}

// ddMul returns (ah+al)·(bh+bl).
func ddMul(ah, al, bh, bl float64) (float64, float64) {
	p, e := eft.TwoProd(ah, bh)
	e += ah*bl + al*bh
	return eft.FastTwoSum(p, e)
}

// ddDiv returns (ah+al)/(bh+bl).
func ddDiv(ah, al, bh, bl float64) (float64, float64) {
	q1 := ah / bh
	ph, pl := ddMul(q1, 0, bh, bl)
	rh, rl := ddAdd(ah, al, -ph, -pl)
	q2 := rh / bh
	ph, pl = ddMul(q2, 0, bh, bl)
	rh, _ = ddAdd(rh, rl, -ph, -pl)
	q3 := rh / bh
	q1, q2 = eft.FastTwoSum(q1, q2)
	return ddAdd(q1, q2, q3, 0)
}

// ddSqrt returns √(ah+al) for ah ≥ 0 (NaN for a negative argument).
func ddSqrt(ah, al float64) (float64, float64) {
	if ah == 0 {
		return 0, 0
	}
	s := math.Sqrt(ah)
	ph, pl := eft.TwoProd(s, s)
	rh, _ := ddAdd(ah, al, -ph, -pl)
	return eft.FastTwoSum(s, rh/(2*s))
}

// ddDot returns (sh+sl) + Σ (xh+xl)ᵢ·(yh+yl)ᵢ.
func ddDot(sh, sl float64, xh, xl, yh, yl []float64) (float64, float64) {
	xl, yh, yl = xl[:len(xh)], yh[:len(xh)], yl[:len(xh)]
	for i, a := range xh {
		b := yh[i]
		p, e := eft.TwoProd(a, b)
		e += a*yl[i] + xl[i]*b
		s, f := eft.TwoSum(sh, p)
		f += sl + e
		sh, sl = eft.FastTwoSum(s, f)
	}
	return sh, sl
}

// ddAxpy sets y ← y + α·x, all in double-double.
func ddAxpy(ah, al float64, xh, xl, yh, yl []float64) {
	xl, yh, yl = xl[:len(xh)], yh[:len(xh)], yl[:len(xh)]
	for i, x := range xh {
		p, e := eft.TwoProd(ah, x)
		e += ah*xl[i] + al*x
		s, f := eft.TwoSum(yh[i], p)
		f += yl[i] + e
		yh[i], yl[i] = eft.FastTwoSum(s, f)
	}
}

// tsqrDD is tsqr in double-double: r (rh+rl) and B (bh+bl) as there.
func tsqrDD(rh, rl []float64, n int, bh, bl []float64, ld, k int, tri bool) {
	for j := 0; j < n; j++ {
		m := k
		if tri {
			m = min(j+1, k)
		}
		vh, vl := bh[j*ld:j*ld+m], bl[j*ld:j*ld+m]
		// The reflector of (α, x): β = −sign(α)·‖(α, x)‖, τ = (β−α)/β,
		// v = x/(α−β). The norm is formed on values scaled by a power of
		// two near the largest, so that it neither overflows nor
		// underflows.
		var amax float64
		for _, x := range vh {
			amax = math.Max(amax, math.Abs(x))
		}
		if amax == 0 {
			continue // x = 0: no reflection needed
		}
		ah, al := rh[j*n+j], rl[j*n+j]
		amax = math.Max(amax, math.Abs(ah))
		if math.IsNaN(amax) || math.IsInf(amax, 0) {
			amax = 1
		}
		_, e := math.Frexp(amax)
		sc := math.Ldexp(1, -e)
		var nh, nl float64
		for i, x := range vh {
			xh, xl := x*sc, vl[i]*sc
			p, pe := eft.TwoProd(xh, xh)
			pe += 2 * xh * xl
			s, f := eft.TwoSum(nh, p)
			f += nl + pe
			nh, nl = eft.FastTwoSum(s, f)
		}
		sh, sl := ddMul(ah*sc, al*sc, ah*sc, al*sc)
		sh, sl = ddAdd(sh, sl, nh, nl)
		bth, btl := ddSqrt(sh, sl)
		bth, btl = bth/sc, btl/sc
		if ah >= 0 {
			bth, btl = -bth, -btl
		}
		dh, dl := ddAdd(bth, btl, -ah, -al) // β − α
		tauh, taul := ddDiv(dh, dl, bth, btl)
		ih, il := ddDiv(1, 0, -dh, -dl) // 1/(α − β)
		for i := range vh {
			vh[i], vl[i] = ddMul(vh[i], vl[i], ih, il)
		}
		rh[j*n+j], rl[j*n+j] = bth, btl
		for l := j + 1; l < n; l++ {
			ch, cl := bh[l*ld:l*ld+m], bl[l*ld:l*ld+m]
			s, t := ddDot(rh[j*n+l], rl[j*n+l], vh, vl, ch, cl)
			s, t = ddMul(tauh, taul, s, t)
			rh[j*n+l], rl[j*n+l] = ddAdd(rh[j*n+l], rl[j*n+l], -s, -t)
			ddAxpy(-s, -t, vh, vl, ch, cl)
		}
	}
}
