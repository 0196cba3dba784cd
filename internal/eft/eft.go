// Package eft holds the error-free transformations of floating-point
// arithmetic that plumb's double-double kernels (stream's extended QR
// factor, diagnostics' precise path) are built on: Knuth's TwoSum,
// Dekker's FastTwoSum and the FMA form of TwoProduct. Each returns the
// rounded result and its exact rounding error.
package eft

import "math"

// TwoSum returns s = fl(a+b) and the exact error e = a + b − s.
func TwoSum(a, b float64) (s, e float64) {
	s = a + b
	bb := s - a
	e = (a - (s - bb)) + (b - bb)
	return s, e
}

// FastTwoSum is TwoSum for |a| ≥ |b| (or a = 0).
func FastTwoSum(a, b float64) (s, e float64) {
	s = a + b
	e = b - (s - a)
	return s, e
}

// TwoProd returns p = fl(a·b) and the exact error e = a·b − p.
func TwoProd(a, b float64) (p, e float64) {
	p = a * b
	e = math.FMA(a, b, -p)
	return p, e
}
