package diagnostics

import "math"

// bkw returns the Belsley–Kuh–Welsch condition indices (ascending) and
// variance-decomposition proportions ([dimension][column], dimensions in the
// order of the indices) of the columns of a, each first scaled to unit
// length. Singular values below σ₁·eps are raised to it, so an exactly
// singular design reports an index of 1/eps instead of +Inf.
func bkw(a dense) (ci []float64, prop [][]float64, ok bool) {
	n := a.c
	if n == 0 {
		return []float64{}, [][]float64{}, true
	}
	sc := make([]float64, n)
	idx := make([]int, n)
	for j := 0; j < n; j++ {
		idx[j] = j
		sc[j] = 1
		if nrm := a.colNorm(j); nrm > 0 {
			sc[j] = 1 / nrm
		}
	}
	sv, v, ok := svd(a.cols(idx, sc))
	if !ok {
		return nil, nil, false
	}
	floor := sv[0] * eps
	if floor == 0 {
		floor = math.SmallestNonzeroFloat64
	}
	for k := range sv {
		sv[k] = math.Max(sv[k], floor)
	}
	// phi[j][k] = v_jk² / σ_k²; proportions normalize over k.
	prop = make([][]float64, n)
	for k := range prop {
		prop[k] = make([]float64, n)
	}
	for j := 0; j < n; j++ {
		tot := 0.0
		phi := make([]float64, n)
		for k := 0; k < n; k++ {
			x := v.at(j, k) / sv[k]
			phi[k] = x * x
			tot += phi[k]
		}
		for k := 0; k < n; k++ {
			prop[k][j] = phi[k] / tot
		}
	}
	ci = make([]float64, n)
	for k := range ci {
		ci[k] = sv[0] / sv[k]
	}
	return ci, prop, true
}
