package stream

import (
	"fmt"

	"gonum.org/v1/gonum/mat"
)

// RLo returns the low parts of an extended factor in dst, sizing it when dst
// is nil or empty: R(i,j) + RLo(i,j), summed exactly, is the double-double
// entry, and R(i,j) is its rounding to float64 (|RLo(i,j)| ≤ ½ulp(R(i,j))).
// Consumers that solve with the factor in double-double (the diagnostics'
// precise path) use both parts; everything else needs only R. RLo panics for
// a float64 factor: check Extended first.
func (q *QR) RLo(dst *mat.TriDense) *mat.TriDense {
	if q.rlo == nil {
		panic("stream: RLo of a float64 QR factor (only NewQRExtended keeps low parts)")
	}
	if dst == nil {
		dst = mat.NewTriDense(q.n, mat.Upper, nil)
	} else if dst.IsEmpty() {
		dst.ReuseAsTri(q.n, mat.Upper)
	} else if n, kind := dst.Triangle(); n != q.n || kind != mat.Upper {
		panic(fmt.Sprintf("stream: RLo: dst is %d×%d, want upper %d×%d", n, n, q.n, q.n))
	}
	for i := 0; i < q.n; i++ {
		for j := i; j < q.n; j++ {
			dst.SetTri(i, j, q.rlo[i*q.n+j])
		}
	}
	return dst
}
