// Package stream holds plumb's mergeable accumulators: the centered
// cross-product accumulator (Moments) and the QR accumulator (QR), with the
// Block type that carries rows to them and their binary encoding.
//
// Rows arrive a block at a time. A row with NULL, NaN or ±Inf in any used
// column is dropped (listwise deletion) and counted against each offending
// column. Accumulators merge with the pairwise formulas of Chan, Golub &
// LeVeque (1979), so partitions, time buckets and windows combine in any
// order.
package stream

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/floats"
)

// DefaultBlockRows is the block height that connectors use when they have no
// better figure: large enough that BLAS level-3 updates dominate, small
// enough that a block of 200 columns stays within a few megabytes.
const DefaultBlockRows = 1024

// Block is a row-major batch of rows for the accumulators.
//
// Data holds Rows×P values. Null, when not nil, marks NULL cells (true =
// NULL); a NaN or ±Inf value is treated as missing whether or not it is
// marked. Weight, when not nil, holds one non-negative weight per row; a row
// with a negative, NaN or infinite weight is dropped and counted in
// BadWeights.
type Block struct {
	P      int
	Rows   int
	Data   []float64
	Null   []bool
	Weight []float64
}

// NewBlock returns an empty block for p columns with room for capRows rows.
// weighted allocates the Weight slice.
func NewBlock(p, capRows int, weighted bool) *Block {
	if p <= 0 || capRows <= 0 {
		panic(fmt.Sprintf("stream: NewBlock(%d, %d): sizes must be positive", p, capRows))
	}
	b := &Block{
		P:    p,
		Data: make([]float64, 0, p*capRows),
		Null: make([]bool, 0, p*capRows),
	}
	if weighted {
		b.Weight = make([]float64, 0, capRows)
	}
	return b
}

// Cap returns the number of rows the block holds before it must grow.
func (b *Block) Cap() int { return cap(b.Data) / b.P }

// Full reports whether the block is at capacity.
func (b *Block) Full() bool { return b.Rows >= b.Cap() }

// Reset empties the block, keeping its storage.
func (b *Block) Reset() {
	b.Rows = 0
	b.Data = b.Data[:0]
	b.Null = b.Null[:0]
	if b.Weight != nil {
		b.Weight = b.Weight[:0]
	}
}

// AppendRow extends the block by one row and returns the row's value and
// NULL slots for the caller to fill. Both slices are zeroed (no NULLs). When
// the block is weighted the row's weight is set to 1; use SetWeight to change
// it.
func (b *Block) AppendRow() (vals []float64, nulls []bool) {
	n := len(b.Data)
	if n+b.P > cap(b.Data) {
		b.grow()
	}
	b.Data = b.Data[:n+b.P]
	b.Null = b.Null[:n+b.P]
	vals, nulls = b.Data[n:n+b.P], b.Null[n:n+b.P]
	clear(vals)
	clear(nulls)
	if b.Weight != nil {
		b.Weight = append(b.Weight, 1)
	}
	b.Rows++
	return vals, nulls
}

// SetWeight sets the weight of the last appended row.
func (b *Block) SetWeight(w float64) {
	if b.Weight == nil {
		panic("stream: SetWeight on an unweighted block")
	}
	b.Weight[b.Rows-1] = w
}

func (b *Block) grow() {
	c := 2*cap(b.Data) + b.P
	d := make([]float64, len(b.Data), c)
	copy(d, b.Data)
	nl := make([]bool, len(b.Null), c)
	copy(nl, b.Null)
	b.Data, b.Null = d, nl
}

func (b *Block) check(p int) {
	if b.P != p {
		panic(fmt.Sprintf("stream: block has %d columns, accumulator %d", b.P, p))
	}
	if len(b.Data) < b.Rows*b.P || (b.Null != nil && len(b.Null) < b.Rows*b.P) ||
		(b.Weight != nil && len(b.Weight) < b.Rows) {
		panic(fmt.Sprintf("stream: block of %d rows has short slices", b.Rows))
	}
}

// Counts records what listwise deletion did: rows used, rows dropped, and
// per column the number of rows in which that column was NULL, NaN or ±Inf.
// A dropped row with several bad columns counts once against each of them.
type Counts struct {
	Used       int64   // rows folded into the accumulator
	SumWeights float64 // sum of the used rows' weights (= Used when unweighted)
	Dropped    int64   // rows dropped for a missing value or a bad weight
	Null       []int64 // per column: rows where the column was NULL
	NaN        []int64 // per column: rows where the column was NaN
	Inf        []int64 // per column: rows where the column was ±Inf
	BadWeights int64   // rows dropped for a negative, NaN or infinite weight
}

func newCounts(p int) Counts {
	return Counts{Null: make([]int64, p), NaN: make([]int64, p), Inf: make([]int64, p)}
}

// Missing returns, per column, the rows dropped on account of that column.
func (c *Counts) Missing(dst []int64) []int64 {
	if dst == nil {
		dst = make([]int64, len(c.Null))
	}
	for j := range c.Null {
		dst[j] = c.Null[j] + c.NaN[j] + c.Inf[j]
	}
	return dst
}

func (c *Counts) add(o *Counts) {
	c.Used += o.Used
	c.SumWeights += o.SumWeights
	c.Dropped += o.Dropped
	c.BadWeights += o.BadWeights
	for j := range c.Null {
		c.Null[j] += o.Null[j]
		c.NaN[j] += o.NaN[j]
		c.Inf[j] += o.Inf[j]
	}
}

func (c *Counts) clone() Counts {
	d := *c
	d.Null = append([]int64(nil), c.Null...)
	d.NaN = append([]int64(nil), c.NaN...)
	d.Inf = append([]int64(nil), c.Inf...)
	return d
}

// expMask selects the exponent bits of a float64; they are all ones exactly
// for NaN and ±Inf.
const expMask = 0x7ff0000000000000

// gather copies the valid rows of b into the column-major buffer dst: column
// j of the copy (j = 0..p−1) is dst[(off+j)*ld : (off+j)*ld+k], holding the
// raw values. It records listwise deletion in c, copies the valid rows'
// weights into w (when b is weighted), widens lo and hi to the extremes of
// the valid rows' values and returns k, the number of valid rows. dst must
// hold (off+p)*ld values with ld ≥ b.Rows, and w b.Rows.
//
// The caller then shifts and scales each column (shiftScale) once it knows
// the scale the extremes call for: no value is combined with another
// before it is scaled, so nothing overflows on the way.
//
// Writing the columns contiguously lets the accumulators work on whole
// columns: rank-k updates as dot products, Householder reflections as
// vector operations.
func gather(b *Block, c *Counts, dst []float64, ld, off int, w, lo, hi []float64) int {
	p := b.P
	k := 0
	dst = dst[off*ld : (off+p)*ld]
	lo, hi = lo[:p], hi[:p]
	for i := 0; i < b.Rows; i++ {
		row := b.Data[i*p : i*p+p]
		// Adding 1 to the exponent field carries into the sign bit
		// exactly when the field is all ones (NaN or ±Inf): one test for
		// the whole row, without branches.
		var acc uint64
		for _, v := range row {
			acc |= math.Float64bits(v)&expMask + 1<<52
		}
		bad := acc>>63 != 0
		if b.Null != nil && !bad {
			for _, isNull := range b.Null[i*p : i*p+p] {
				if isNull {
					bad = true
					break
				}
			}
		}
		if b.Weight != nil {
			weight := b.Weight[i]
			if !(weight >= 0) || math.IsInf(weight, 1) {
				c.BadWeights++
				c.Dropped++
				continue
			}
			w[k] = weight
		}
		if bad {
			c.Dropped++
			for j, v := range row {
				switch {
				case b.Null != nil && b.Null[i*p+j]:
					c.Null[j]++
				case math.IsNaN(v):
					c.NaN[j]++
				case math.IsInf(v, 0):
					c.Inf[j]++
				}
			}
			continue
		}
		d := dst[k:]
		for j, v := range row {
			d[j*ld] = v
			if v < lo[j] {
				lo[j] = v
			}
			if v > hi[j] {
				hi[j] = v
			}
		}
		k++
	}
	return k
}

// Column scales. Every accumulator holds each column j divided by a power
// of two s_j (its scale), chosen from the largest magnitude seen in the
// column before any product is formed: x/s_j lies in (−4, 4) (in [½, 1)
// for the largest), so products and their sums neither overflow nor
// underflow for data anywhere from 1e-300 to 1e300. Multiplying by a power
// of two is exact in binary floating point (unless the result is
// subnormal), so the scaled sums carry exactly the digits the unscaled ones
// would have had where those did not overflow or underflow. When a later
// block or a merged accumulator holds larger values, the sums kept so far
// are rescaled to the new power of two, exactly again.
const (
	minScaleExp = -1021 // 1/s stays a normal number
	maxScaleExp = 1022  // so does 1/s
)

// scaleFor returns the scale for a column whose largest magnitude is mag:
// the power of two 2^e with mag < 2^e ≤ 2·mag, kept within
// [2^minScaleExp, 2^maxScaleExp]; 1 for a column of zeros.
func scaleFor(mag float64) float64 {
	if mag == 0 || mag != mag {
		return 1
	}
	_, e := math.Frexp(mag)
	return math.Ldexp(1, min(max(e, minScaleExp), maxScaleExp))
}

// ScaleFor returns the scale the accumulators give a column whose values
// lie between lo and hi: the power of two just above the larger of |lo| and
// |hi| (1 for a column of zeros). Sums computed elsewhere (a database's
// aggregate) on values divided by it, or by any power of two near it,
// stay within float64 as the accumulators' own do.
func ScaleFor(lo, hi float64) float64 { return scaleFor(magnitude(lo, hi)) }

// magnitude returns the larger of |lo| and |hi|.
func magnitude(lo, hi float64) float64 { return math.Max(math.Abs(lo), math.Abs(hi)) }

// isScale reports whether s is a power of two a column scale may take.
func isScale(s float64) bool {
	f, e := math.Frexp(s)
	return f == 0.5 && e-1 >= minScaleExp && e-1 <= maxScaleExp
}

// shiftScale sets col[i] to (col[i] − c)/s, computed as col[i]·(1/s) − c/s:
// the two products are exact and the difference is rounded once, as
// col[i] − c would be, but nothing can overflow.
func shiftScale(col []float64, c, s float64) {
	inv := 1 / s
	cs := c * inv
	if cs == 0 {
		if inv != 1 {
			floats.Scale(inv, col)
		}
		return
	}
	for i, v := range col {
		col[i] = v*inv - cs
	}
}

// leading returns the column stride for a column-major copy of rows rows:
// a whole number of cache lines plus one, so that the columns of a block
// of 1024 rows do not all map to the same level-1 cache set (a stride of
// 8 KiB would) when gather writes a row across them.
func leading(rows int) int { return (rows+7)&^7 + 8 }

// originOf sets the provisional origin from the k valid rows held, raw, in
// the column-major buffer (column j at buf[(off+j)*ld:]): the column mean,
// or the column's value when it is the same in every row, so that a column
// constant over the whole scan shifts to exact zeros and its co-moments
// come out exactly zero. The mean is summed on the values divided by the
// column's scale, so that the sum cannot overflow.
func originOf(origin, scale, buf []float64, ld, off, k int) {
	for j := range origin {
		col := buf[(off+j)*ld : (off+j)*ld+k]
		inv := 1 / scale[j]
		var s float64
		same := true
		for _, v := range col {
			s += v * inv
			same = same && v == col[0]
		}
		origin[j] = s / float64(k) * scale[j]
		if same {
			origin[j] = col[0]
		}
	}
}
