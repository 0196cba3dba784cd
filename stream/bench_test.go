package stream

import (
	"fmt"
	"math/rand/v2"
	"runtime"
	"testing"
	"time"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
)

// BenchmarkAccumulators feeds n rows, in blocks of 1024 rows generated once
// from a fixed seed (a pool of up to 16 distinct blocks, cycled), to the
// cross-product accumulator, to the QR accumulator and to a bare
// blas64.Syrk (Trans, k×p into p×p, on the blocks as they come), the floor.
// One iteration is one pass of each over the same n rows, in an order that
// rotates from iteration to iteration, so that all three see the same load
// on a shared machine. Reported, per kind (moments, qr, floor):
//
//	<kind>-rows/s     rows per second
//	<kind>-GFLOP/s    effective rate of the update: k·p² flops per block of
//	                  k rows for the cross-product and the floor, 2·k·(p+1)²
//	                  for QR
//	<kind>-allocs/row heap allocations per row in steady state (all of the
//	                  process, during that kind's passes)
//
// and the ratios moments/floor (target ≥ 0.8 at p = 50 and 200), qr/floor and
// moments/qr (target ≤ 4). ns/op is the time of one iteration (all three
// passes).
//
// Run: go test -run=^$ -bench=Accumulators -benchtime=3x ./stream/

const benchBlockRows = 1024

// benchRows is the number of rows per pass: 1e6 rounded up to whole blocks,
// but 2e5 at p = 200, where three passes of 1e6 rows take about a minute on
// two shared cores.
func benchRows(p int) int {
	n := 1_000_000
	if p >= 200 {
		n = 200_000
	}
	return (n + benchBlockRows - 1) / benchBlockRows * benchBlockRows
}

func benchBlocks(p, n int) []*Block {
	rng := rand.New(rand.NewPCG(2024, uint64(p)))
	nb := min(16, n/benchBlockRows)
	mean := make([]float64, p)
	sd := make([]float64, p)
	for j := range mean {
		mean[j] = 100 * rng.Float64()
		sd[j] = 0.5 + 10*rng.Float64()
	}
	blocks := make([]*Block, nb)
	for bi := range blocks {
		b := NewBlock(p, benchBlockRows, false)
		for range benchBlockRows {
			vals, _ := b.AppendRow()
			z0 := rng.NormFloat64()
			for j := range vals {
				vals[j] = mean[j] + sd[j]*(rng.NormFloat64()+0.5*z0)
			}
		}
		blocks[bi] = b
	}
	return blocks
}

type floorSyrk struct{ c blas64.Symmetric }

func (f *floorSyrk) Add(b *Block) {
	a := blas64.General{Rows: b.Rows, Cols: b.P, Stride: b.P, Data: b.Data}
	blas64.Syrk(blas.Trans, 1, a, 1, f.c)
}

func BenchmarkAccumulators(b *testing.B) {
	for _, p := range []int{10, 50, 200} {
		n := benchRows(p)
		if n < 1_000_000 {
			b.Logf("p=%d: %d rows per pass instead of 1e6, to keep the run short", p, n)
		}
		b.Run(fmt.Sprintf("p=%d", p), func(b *testing.B) {
			blocks := benchBlocks(p, n)
			cols := make([]string, p)
			for j := range cols {
				cols[j] = fmt.Sprintf("x%d", j)
			}
			m, q := NewMoments(cols), NewQR(cols)
			floor := &floorSyrk{blas64.Symmetric{Uplo: blas.Upper, N: p, Stride: p, Data: make([]float64, p*p)}}
			kinds := []struct {
				name  string
				acc   adder
				reset func()
				flops float64 // per row
				t     time.Duration
				alloc uint64
			}{
				{"moments", m, m.Reset, float64(p * p), 0, 0},
				{"qr", q, q.Reset, float64(2 * (p + 1) * (p + 1)), 0, 0},
				{"floor", floor, func() {}, float64(p * p), 0, 0},
			}
			// Warm up: size the scratch buffers.
			for i := range kinds {
				kinds[i].acc.Add(blocks[0])
				kinds[i].reset()
			}
			runtime.GC()
			b.ResetTimer()
			var ms0, ms1 runtime.MemStats
			for it := range b.N {
				for r := range kinds {
					k := &kinds[(it+r)%len(kinds)]
					k.reset()
					runtime.ReadMemStats(&ms0)
					t0 := time.Now()
					for i := range n / benchBlockRows {
						k.acc.Add(blocks[i%len(blocks)])
					}
					k.t += time.Since(t0)
					runtime.ReadMemStats(&ms1)
					k.alloc += ms1.Mallocs - ms0.Mallocs
				}
			}
			rows := float64(b.N * n)
			rate := map[string]float64{}
			for _, k := range kinds {
				rate[k.name] = rows / k.t.Seconds()
				b.ReportMetric(rate[k.name], k.name+"-rows/s")
				b.ReportMetric(rate[k.name]*k.flops/1e9, k.name+"-GFLOP/s")
				b.ReportMetric(float64(k.alloc)/rows, k.name+"-allocs/row")
			}
			b.ReportMetric(rate["moments"]/rate["floor"], "moments/floor")
			b.ReportMetric(rate["qr"]/rate["floor"], "qr/floor")
			b.ReportMetric(rate["moments"]/rate["qr"], "moments/qr")
		})
	}
}

// BenchmarkQRExtended compares the extended (double-double) factor with the
// float64 one on the same blocks, in alternating passes: rows/s of each,
// the effective GFLOP/s of the extended update counted as float64 flops
// (2·k·(p+1)² per block) and float64/extended, the slowdown. Fewer rows than
// BenchmarkAccumulators: 1e5 at p = 10, 2e4 at p = 50, 4e3 at p = 200.
func BenchmarkQRExtended(b *testing.B) {
	for _, tc := range []struct{ p, n int }{{10, 100_352}, {50, 20_480}, {200, 4_096}} {
		b.Run(fmt.Sprintf("p=%d", tc.p), func(b *testing.B) {
			p, n := tc.p, tc.n
			blocks := benchBlocks(p, n)
			cols := make([]string, p)
			for j := range cols {
				cols[j] = fmt.Sprintf("x%d", j)
			}
			f, x := NewQR(cols), NewQRExtended(cols)
			f.Add(blocks[0])
			x.Add(blocks[0])
			var tf, tx time.Duration
			b.ResetTimer()
			for it := range b.N {
				for r := range 2 {
					q := f
					if (it+r)%2 == 1 {
						q = x
					}
					q.Reset()
					t0 := time.Now()
					for i := range n / benchBlockRows {
						q.Add(blocks[i%len(blocks)])
					}
					if q == f {
						tf += time.Since(t0)
					} else {
						tx += time.Since(t0)
					}
				}
			}
			rows := float64(b.N * n)
			fp := float64(p + 1)
			b.ReportMetric(rows/tx.Seconds(), "extended-rows/s")
			b.ReportMetric(rows/tf.Seconds(), "float64-rows/s")
			b.ReportMetric(rows/tx.Seconds()*2*fp*fp/1e9, "extended-GFLOP/s")
			b.ReportMetric(tx.Seconds()/tf.Seconds(), "float64/extended")
		})
	}
}
