package stream

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestAddAllocs: in steady state (a reused block, after one warm-up Add),
// Add allocates nothing, for both accumulators, weighted or not, with or
// without missing values, at small and blocked-QR sizes (requirement; the
// count comes from testing.AllocsPerRun).
func TestAddAllocs(t *testing.T) {
	for _, p := range []int{1, 5, 40, 150} {
		for _, weighted := range []bool{false, true} {
			rng := rand.New(rand.NewPCG(uint64(p), 7))
			cols := make([]string, p)
			for j := range cols {
				cols[j] = "pressure_" + string(rune('a'+j%26)) + string(rune('a'+j/26))
			}
			b := NewBlock(p, 256, weighted)
			for i := range 256 {
				vals, nulls := b.AppendRow()
				for j := range vals {
					vals[j] = rng.NormFloat64()
				}
				if i%50 == 7 {
					nulls[i%p] = true
				}
				if i%70 == 3 {
					vals[0] = math.NaN()
				}
				if weighted {
					b.SetWeight(rng.Float64())
				}
			}
			m := NewMoments(cols)
			m.Add(b)
			if a := testing.AllocsPerRun(5, func() { m.Add(b) }); a != 0 {
				t.Errorf("p=%d weighted=%v: Moments.Add allocates %v times per block", p, weighted, a)
			}
			o := m.Clone()
			m.Merge(o)
			if a := testing.AllocsPerRun(5, func() { m.Merge(o) }); a != 0 {
				t.Errorf("p=%d: Moments.Merge allocates %v times", p, a)
			}
			for _, q := range []*QR{NewQR(cols), NewQRExtended(cols)} {
				q.Add(b)
				if a := testing.AllocsPerRun(3, func() { q.Add(b) }); a != 0 {
					t.Errorf("p=%d weighted=%v extended=%v: QR.Add allocates %v times per block", p, weighted, q.Extended(), a)
				}
				oq := q.Clone()
				q.Merge(oq)
				if a := testing.AllocsPerRun(3, func() { q.Merge(oq) }); a != 0 {
					t.Errorf("p=%d extended=%v: QR.Merge allocates %v times", p, q.Extended(), a)
				}
			}
		}
	}
}
