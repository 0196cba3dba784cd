package demand

import (
	"math"
	"testing"

	"plumb/connectors"
	"plumb/stream"
)

// SameResult fails t unless got has the same groups as want with the same
// counts, means within tol relative (to the column's spread when larger
// than its mean: common practice, no source) and co-moments within tol
// relative to √(M_ii·M_jj), the scale on which diagnostics read them.
// Min, max and missing counts must agree exactly.
func SameResult(t testing.TB, what string, want, got *connectors.Result, tol float64) {
	t.Helper()
	if len(want.Groups) != len(got.Groups) {
		t.Fatalf("%s: %d groups, want %d", what, len(got.Groups), len(want.Groups))
	}
	if want.Read != got.Read {
		t.Errorf("%s: read %d rows, want %d", what, got.Read, want.Read)
	}
	for i := range want.Groups {
		w, g := want.Groups[i], got.Groups[i]
		if !w.Key.Bucket.Equal(g.Key.Bucket) || w.Key.Segment != g.Key.Segment {
			t.Fatalf("%s: group %d is %v/%q, want %v/%q", what, i, g.Key.Bucket, g.Key.Segment, w.Key.Bucket, w.Key.Segment)
		}
		SameMoments(t, what, w.Moments, g.Moments, tol)
	}
}

// SameMoments compares two accumulators as SameResult does.
func SameMoments(t testing.TB, what string, want, got *stream.Moments, tol float64) {
	t.Helper()
	wc, gc := want.Counts(), got.Counts()
	if wc.Used != gc.Used || wc.Dropped != gc.Dropped {
		t.Errorf("%s: used/dropped %d/%d, want %d/%d", what, gc.Used, gc.Dropped, wc.Used, wc.Dropped)
		return
	}
	p := want.P()
	if got.P() != p {
		t.Fatalf("%s: %d columns, want %d", what, got.P(), p)
	}
	for j := 0; j < p; j++ {
		if wc.Null[j] != gc.Null[j] || wc.NaN[j] != gc.NaN[j] || wc.Inf[j] != gc.Inf[j] {
			t.Errorf("%s: column %s missing counts %d/%d/%d, want %d/%d/%d", what, want.Names()[j],
				gc.Null[j], gc.NaN[j], gc.Inf[j], wc.Null[j], wc.NaN[j], wc.Inf[j])
		}
	}
	if wc.Used == 0 {
		return
	}
	// Both accumulators divide each column by the power of two its
	// extremes call for (the same extremes, so the same power): compare the
	// scaled figures, which stay within float64 for any data.
	n := float64(wc.Used)
	for j := 0; j < p; j++ {
		if got.Scale(j) != want.Scale(j) {
			t.Errorf("%s: scale of %s = %g, want %g", what, want.Names()[j], got.Scale(j), want.Scale(j))
			continue
		}
		sd := math.Sqrt(want.ScaledAt(j, j)/n) * want.Scale(j)
		scale := math.Max(math.Abs(want.Mean(j)), sd)
		if scale == 0 {
			scale = 1
		}
		if d := math.Abs(got.Mean(j)-want.Mean(j)) / scale; !(d <= tol) {
			t.Errorf("%s: mean of %s = %.17g, want %.17g (rel %.2g > %.2g)", what, want.Names()[j], got.Mean(j), want.Mean(j), d, tol)
		}
		if got.Min(j) != want.Min(j) || got.Max(j) != want.Max(j) {
			t.Errorf("%s: range of %s = [%g, %g], want [%g, %g]", what, want.Names()[j], got.Min(j), got.Max(j), want.Min(j), want.Max(j))
		}
	}
	// A constant column has no spread to be relative to; its entries are
	// compared on the scale of the raw values, √n·|mean| (common practice,
	// no source).
	colScale := func(j int) float64 {
		if s := math.Sqrt(want.ScaledAt(j, j)); s > 0 {
			return s
		}
		return math.Sqrt(n) * math.Max(math.Abs(want.Mean(j))/want.Scale(j), 1)
	}
	for i := 0; i < p; i++ {
		for j := i; j < p; j++ {
			d := math.Abs(got.ScaledAt(i, j)-want.ScaledAt(i, j)) / (colScale(i) * colScale(j))
			if !(d <= tol) {
				t.Errorf("%s: co-moment %s×%s = %.17g, want %.17g (rel %.2g > %.2g; scaled by %g·%g)", what,
					want.Names()[i], want.Names()[j], got.ScaledAt(i, j), want.ScaledAt(i, j), d, tol, want.Scale(i), want.Scale(j))
			}
		}
	}
}
