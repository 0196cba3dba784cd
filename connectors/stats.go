package connectors

import (
	"encoding/binary"
	"fmt"
	"hash/crc32"
	"math"

	"plumb/stream"
)

// Stats are the sufficient statistics of one group computed outside the
// stream package, by a pushdown aggregate: sums of values and of products
// shifted by a provisional origin close to the data, so that no raw sums of
// products are formed, and divided by a power of two per column (Scale,
// see stream.ScaleFor), so that data near 1e-200 or 1e200 neither
// underflow nor overflow in the products.
type Stats struct {
	Names      []string
	Used       int64   // rows folded in
	SumWeights float64 // Σw over those rows (= Used when unweighted)
	Dropped    int64
	BadWeights int64
	Null       []int64
	NaN        []int64
	Inf        []int64
	Origin     []float64 // the shift c
	Scale      []float64 // the powers of two s the shifted values were divided by; nil: all 1
	Sum        []float64 // Σ w (x_j − c_j)/s_j
	Cross      []float64 // Σ w (x_i − c_i)(x_j − c_j)/(s_i·s_j), i ≤ j, row-major upper triangle
	Min, Max   []float64
	// Centered: Cross already holds the co-moment Σw(x−x̄)(x−x̄)ᵀ (an
	// updating algorithm computed it), so W·d·dᵀ is not subtracted.
	Centered bool
}

// Moments turns the statistics into an accumulator, with mean
// c + Σw(x−c)/W and co-moment Σw(x−c)(x−c)ᵀ − W·d·dᵀ, d = Σw(x−c)/W (all
// on the scaled values, then brought to the scales the accumulator would
// have chosen, stream.ScaleFor of each column's extremes: exact, powers of
// two). With Centered set, Cross is taken as the co-moment.
//
// It goes through the accumulator's versioned binary encoding, the one
// public way to build a stream.Moments from parts.
func (s *Stats) Moments() (*stream.Moments, error) {
	p := len(s.Names)
	if p == 0 || len(s.Null) != p || len(s.NaN) != p || len(s.Inf) != p || len(s.Origin) != p ||
		len(s.Sum) != p || len(s.Min) != p || len(s.Max) != p || len(s.Cross) != p*(p+1)/2 ||
		(s.Scale != nil && len(s.Scale) != p) {
		panic(fmt.Sprintf("connectors: Stats.Moments: inconsistent lengths for %d columns", p))
	}
	// ratio[j] takes column j from the aggregate's scale to the
	// accumulator's.
	scale := make([]float64, p)
	ratio := make([]float64, p)
	for j := range scale {
		scale[j], ratio[j] = 1, 1
		if s.Used > 0 {
			scale[j] = stream.ScaleFor(s.Min[j], s.Max[j])
		}
		if s.Scale != nil {
			ratio[j] = s.Scale[j] / scale[j]
		} else {
			ratio[j] = 1 / scale[j]
		}
	}
	w := s.SumWeights
	d := make([]float64, p)
	origin := append([]float64(nil), s.Origin...)
	constant := make([]bool, p)
	if w > 0 {
		for j := range d {
			d[j] = s.Sum[j] / w
		}
	}
	if s.Used > 0 {
		// A column whose minimum is its maximum is constant: its mean is
		// that value and its co-moments are exactly zero, whatever the
		// rounding of the sums (as the stream package reports them).
		for j := range constant {
			if s.Min[j] == s.Max[j] {
				constant[j] = true
				origin[j] = s.Min[j]
				d[j] = 0
			}
		}
	}
	var b []byte
	le := binary.LittleEndian
	f64 := func(v float64) { b = le.AppendUint64(b, math.Float64bits(v)) }
	i64 := func(v int64) { b = le.AppendUint64(b, uint64(v)) }
	b = append(b, 'P', 'L', 'M', 'B', 'M', 2)
	hasOrg := s.Used > 0
	if hasOrg {
		b = append(b, 1)
	} else {
		b = append(b, 0)
	}
	b = le.AppendUint32(b, uint32(p))
	for _, n := range s.Names {
		b = le.AppendUint16(b, uint16(len(n)))
		b = append(b, n...)
	}
	i64(s.Used)
	f64(w)
	i64(s.Dropped)
	i64(s.BadWeights)
	for _, v := range [][]int64{s.Null, s.NaN, s.Inf} {
		for _, x := range v {
			i64(x)
		}
	}
	for j := 0; j < p; j++ {
		if hasOrg {
			f64(origin[j])
		} else {
			f64(0)
		}
	}
	for j := 0; j < p; j++ {
		f64(scale[j])
	}
	for j := 0; j < p; j++ {
		f64(d[j] * ratio[j])
	}
	k := 0
	for i := 0; i < p; i++ {
		for j := i; j < p; j++ {
			v := 0.0
			if w > 0 && !constant[i] && !constant[j] {
				v = s.Cross[k]
				if !s.Centered {
					v -= w * d[i] * d[j]
				}
				if i == j && v < 0 {
					v = 0 // rounding on a (near) constant column
				}
			}
			f64(v * ratio[i] * ratio[j])
			k++
		}
	}
	for j := 0; j < p; j++ {
		if s.Used > 0 {
			f64(s.Min[j])
		} else {
			f64(math.Inf(1))
		}
	}
	for j := 0; j < p; j++ {
		if s.Used > 0 {
			f64(s.Max[j])
		} else {
			f64(math.Inf(-1))
		}
	}
	b = le.AppendUint32(b, crc32.Checksum(b, crc32.MakeTable(crc32.Castagnoli)))
	m, err := stream.UnmarshalMoments(b)
	if err != nil {
		return nil, fmt.Errorf("connectors: building moments from aggregates: %w", err)
	}
	return m, nil
}
