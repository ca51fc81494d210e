package knn

import (
	"fmt"
	"math/rand/v2"
	"runtime"
	"syscall"
	"testing"

	"nightjar/internal/core"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas32"
)

// BenchmarkExact measures the exact search at D = 50 on Gaussian rows
// (invented data); rows/s is the figure ExactLimit is derived from. The
// 100,000-row case takes tens of seconds per run: select it with
// -bench 'Exact/N=100000' -benchtime 1x.
func BenchmarkExact(b *testing.B) {
	for _, n := range []int{20_000, 100_000} {
		b.Run(fmt.Sprintf("N=%d", n), func(b *testing.B) {
			x := randMatrix(n, 50, 1, 0, 1)
			b.ResetTimer()
			cpu0 := cpuSeconds()
			for b.Loop() {
				if _, err := Exact(x, 90, ExactOptions{Options: Options{Threads: runtime.GOMAXPROCS(0)}}); err != nil {
					b.Fatal(err)
				}
			}
			sec := b.Elapsed().Seconds() / float64(b.N)
			cpu := (cpuSeconds() - cpu0) / float64(b.N)
			b.ReportMetric(float64(n)/sec, "rows/s")
			b.ReportMetric(float64(n)*float64(n)/sec, "pairs/s")
			// The machine is shared: CPU time is the load-independent figure.
			b.ReportMetric(cpu, "cpu-s/op")
			b.ReportMetric(float64(n)*float64(n)/cpu, "pairs/cpu-s")
		})
	}
}

// BenchmarkDistanceTile compares ways of filling one 64×192 tile of the
// distance screen at D = 50 (the choice documented in search and centreRows):
// gonum's blas32.Gemm with row-major tiles (dot products of length D), the
// same with the tile transposed (axpy of length refTile, used), a plain Go
// dot-product loop blocked 2×4 in registers, and a plain loop of squared
// differences.
func BenchmarkDistanceTile(b *testing.B) {
	const D = 50
	q := randMatrix(queryBlock, D, 2, 0, 1).Data
	t := randMatrix(refTile, D, 3, 0, 1).Data
	out := make([]float32, queryBlock*refTile)
	kernels := []struct {
		name string
		f    func()
	}{
		{"gemm", func() {
			blas32.Gemm(blas.NoTrans, blas.Trans, 1,
				blas32.General{Rows: queryBlock, Cols: D, Stride: D, Data: q},
				blas32.General{Rows: refTile, Cols: D, Stride: D, Data: t},
				0, blas32.General{Rows: queryBlock, Cols: refTile, Stride: refTile, Data: out})
		}},
		{"gemm-transposed-tile", func() {
			// t read as the D×refTile transposed tile the search uses.
			blas32.Gemm(blas.NoTrans, blas.NoTrans, 1,
				blas32.General{Rows: queryBlock, Cols: D, Stride: D, Data: q},
				blas32.General{Rows: D, Cols: refTile, Stride: refTile, Data: t},
				0, blas32.General{Rows: queryBlock, Cols: refTile, Stride: refTile, Data: out})
		}},
		{"dot-loop-2x4", func() { dotLoop2x4(q, t, out, queryBlock, refTile, D) }},
		{"diff-loop", func() {
			for i := 0; i < queryBlock; i++ {
				for j := 0; j < refTile; j++ {
					var s float32
					for l := 0; l < D; l++ {
						d := q[i*D+l] - t[j*D+l]
						s += d * d
					}
					out[i*refTile+j] = s
				}
			}
		}},
	}
	for _, k := range kernels {
		b.Run(k.name, func(b *testing.B) {
			for b.Loop() {
				k.f()
			}
			b.ReportMetric(b.Elapsed().Seconds()*1e9/float64(b.N)/(queryBlock*refTile), "ns/pair")
		})
	}
}

// dotLoop2x4 computes out[i*n+j] = q_i·t_j with a 2×4 register block.
func dotLoop2x4(q, t, out []float32, m, n, d int) {
	for i := 0; i+2 <= m; i += 2 {
		a0, a1 := q[i*d:(i+1)*d], q[(i+1)*d:(i+2)*d]
		for j := 0; j+4 <= n; j += 4 {
			b0, b1 := t[j*d:(j+1)*d], t[(j+1)*d:(j+2)*d]
			b2, b3 := t[(j+2)*d:(j+3)*d], t[(j+3)*d:(j+4)*d]
			var c00, c01, c02, c03, c10, c11, c12, c13 float32
			for l := 0; l < d; l++ {
				x0, x1 := a0[l], a1[l]
				c00 += x0 * b0[l]
				c01 += x0 * b1[l]
				c02 += x0 * b2[l]
				c03 += x0 * b3[l]
				c10 += x1 * b0[l]
				c11 += x1 * b1[l]
				c12 += x1 * b2[l]
				c13 += x1 * b3[l]
			}
			out[i*n+j], out[i*n+j+1], out[i*n+j+2], out[i*n+j+3] = c00, c01, c02, c03
			out[(i+1)*n+j], out[(i+1)*n+j+1], out[(i+1)*n+j+2], out[(i+1)*n+j+3] = c10, c11, c12, c13
		}
	}
}

// cpuSeconds returns the user+system CPU time of this process so far.
func cpuSeconds() float64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return float64(ru.Utime.Nano()+ru.Stime.Nano()) / 1e9
}

// syntheticGraph returns an N×k graph where row i's neighbours are k distinct
// rows at random offsets in [1, 4k) from i (mod N), with increasing distances:
// local, so that many but not all edges are mutual, as in real kNN graphs.
func syntheticGraph(n, k int) *core.Graph {
	g := &core.Graph{N: n, K: k, Index: make([]int32, n*k), Dist2: make([]float32, n*k)}
	r := rand.New(rand.NewPCG(5, 6))
	used := make(map[int]bool, k)
	for i := 0; i < n; i++ {
		clear(used)
		d := float32(0)
		for t := 0; t < k; t++ {
			off := 1 + r.IntN(4*k-1)
			for used[off] {
				off = 1 + r.IntN(4*k-1)
			}
			used[off] = true
			if r.IntN(2) == 0 {
				off = n - off
			}
			g.Index[i*k+t] = int32((i + off) % n)
			d += float32(r.ExpFloat64())
			g.Dist2[i*k+t] = d
		}
	}
	return g
}

// BenchmarkAffinity measures Affinity at N = 100,000, k = 90, perplexity 30 on
// a synthetic graph, on all cores.
func BenchmarkAffinity(b *testing.B) {
	g := syntheticGraph(100_000, 90)
	b.ResetTimer()
	cpu0 := cpuSeconds()
	var entries int
	for b.Loop() {
		P, err := Affinity(g, 30, runtime.GOMAXPROCS(0))
		if err != nil {
			b.Fatal(err)
		}
		entries = len(P.Vals)
	}
	b.ReportMetric((cpuSeconds()-cpu0)/float64(b.N), "cpu-s/op")
	b.ReportMetric(float64(entries)/float64(g.N*g.K), "entries/(N·k)")
}
