package agent

import (
	"testing"

	"plumb/agent/config"
	"plumb/stream"
)

// TestPrecisePrecision checks that a watch with precision: precise merges
// its buckets into a double-double factor and analyzes on that path, and
// that exact stays on the float64 factor. The data are the powers of
// x = 0…20 (the design of NIST StRD Wampler1, public domain) with
// y = 1 + x + … + x⁵, the certified fit (all coefficients exactly 1).
func TestPrecisePrecision(t *testing.T) {
	cols := []string{"x", "x2", "x3", "x4", "x5", "y"}
	bucket := func(extended bool, from, to int) acc {
		a := acc{m: stream.NewMoments(cols), q: stream.NewQR(cols)}
		if extended {
			a.q = stream.NewQRExtended(cols)
		}
		b := stream.NewBlock(len(cols), 32, false)
		for i := from; i < to; i++ {
			x := float64(i)
			v, _ := b.AppendRow()
			v[0], v[1], v[2], v[3], v[4] = x, x*x, x*x*x, x*x*x*x, x*x*x*x*x
			v[5] = 1 + v[0] + v[1] + v[2] + v[3] + v[4]
		}
		a.m.Add(b)
		a.q.Add(b)
		return a
	}
	for _, tc := range []struct {
		precision string
		extended  bool
		path      string
	}{
		{"precise", true, "qr-precise"},
		{"exact", false, "qr"},
	} {
		w := &config.Watch{Name: "w", Target: "y", Precision: tc.precision}
		w.Limits.VIF.Critical, w.Limits.Condition.Critical = 10, 30
		all := merge(cols, []acc{bucket(tc.extended, 0, 11), bucket(tc.extended, 11, 21)})
		if all.q.Extended() != tc.extended {
			t.Fatalf("%s: merged factor extended = %v", tc.precision, all.q.Extended())
		}
		rep, err := analyze(w, cols[:5], all)
		if err != nil {
			t.Fatal(err)
		}
		if rep.Path != tc.path {
			t.Errorf("%s: path %q, want %q", tc.precision, rep.Path, tc.path)
		}
		for _, c := range rep.Regression.Coefficients {
			// Certified value 1 (NIST StRD Wampler1); LRE ≥ 9 on either path.
			if d := c.Estimate - 1; d > 1e-9 || d < -1e-9 {
				t.Errorf("%s: %s = %.15g, want 1", tc.precision, c.Name, c.Estimate)
			}
		}
	}
}
