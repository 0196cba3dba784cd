package stream

import "math"

// Double-double arithmetic: a value is an unevaluated sum hi + lo of two
// float64 with |lo| ≤ ½ulp(hi), about 106 significant bits. The error-free
// transformations are those of Knuth (TwoSum), Dekker (FastTwoSum) and the
// FMA form of TwoProduct; additions inside the kernels use the "sloppy"
// double-double sum, whose error is bounded by about 2⁻¹⁰⁴·(|a|+|b|), which
// is what the backward stability of Householder QR needs (the same kind of
// bound as for inner products).

// twoSum returns s = fl(a+b) and the exact error e = a + b − s.
func twoSum(a, b float64) (s, e float64) {
	s = a + b
	bb := s - a
	e = (a - (s - bb)) + (b - bb)
	return s, e
}

// fastTwoSum is twoSum for |a| ≥ |b| (or a = 0).
func fastTwoSum(a, b float64) (s, e float64) {
	s = a + b
	e = b - (s - a)
	return s, e
}

// twoProd returns p = fl(a·b) and the exact error e = a·b − p.
func twoProd(a, b float64) (p, e float64) {
	p = a * b
	e = math.FMA(a, b, -p)
	return p, e
}

// ddAdd returns (ah+al) + (bh+bl).
func ddAdd(ah, al, bh, bl float64) (float64, float64) {
	s, e := twoSum(ah, bh)
	e += al + bl
	return fastTwoSum(s, e)
}

// ddMul returns (ah+al)·(bh+bl).
func ddMul(ah, al, bh, bl float64) (float64, float64) {
	p, e := twoProd(ah, bh)
	e += ah*bl + al*bh
	return fastTwoSum(p, e)
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
	q1, q2 = fastTwoSum(q1, q2)
	return ddAdd(q1, q2, q3, 0)
}

// ddSqrt returns √(ah+al) for ah ≥ 0 (NaN for a negative argument).
func ddSqrt(ah, al float64) (float64, float64) {
	if ah == 0 {
		return 0, 0
	}
	s := math.Sqrt(ah)
	ph, pl := twoProd(s, s)
	rh, _ := ddAdd(ah, al, -ph, -pl)
	return fastTwoSum(s, rh/(2*s))
}

// ddDot returns (sh+sl) + Σ (xh+xl)ᵢ·(yh+yl)ᵢ.
func ddDot(sh, sl float64, xh, xl, yh, yl []float64) (float64, float64) {
	xl, yh, yl = xl[:len(xh)], yh[:len(xh)], yl[:len(xh)]
	for i, a := range xh {
		b := yh[i]
		p, e := twoProd(a, b)
		e += a*yl[i] + xl[i]*b
		s, f := twoSum(sh, p)
		f += sl + e
		sh, sl = fastTwoSum(s, f)
	}
	return sh, sl
}

// ddAxpy sets y ← y + α·x, all in double-double.
func ddAxpy(ah, al float64, xh, xl, yh, yl []float64) {
	xl, yh, yl = xl[:len(xh)], yh[:len(xh)], yl[:len(xh)]
	for i, x := range xh {
		p, e := twoProd(ah, x)
		e += ah*xl[i] + al*x
		s, f := twoSum(yh[i], p)
		f += yl[i] + e
		yh[i], yl[i] = fastTwoSum(s, f)
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
			p, pe := twoProd(xh, xh)
			pe += 2 * xh * xl
			s, f := twoSum(nh, p)
			f += nl + pe
			nh, nl = fastTwoSum(s, f)
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
