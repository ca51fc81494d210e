package gradient

import (
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"strconv"
	"testing"

	"nightjar/internal/core"
)

// Benchmark inputs are synthetic: a random sparse P with k ≈ 90 neighbours
// per row before symmetrisation (k = 3·perplexity 30, the usual neighbour
// count for perplexity 30; van der Maaten 2014), and a map of
// 20 Gaussian clusters with centres in [−S, S]^d and sd s, S = 40·√(N/10^5),
// s = 3·√(N/10^5): about the extent of a converged map (it grows like √N at
// constant density; common practice, from memory). Run with -count 5 and take
// medians.

var benchCache = map[string]any{}

func benchP(b *testing.B, n, k int) core.CSR {
	key := fmt.Sprintf("P%d/%d", n, k)
	if v, ok := benchCache[key]; ok {
		return v.(core.CSR)
	}
	b.Helper()
	rng := rand.New(rand.NewPCG(42, uint64(n)))
	from := make([]int32, 0, n*k)
	to := make([]int32, 0, n*k)
	val := make([]float64, 0, n*k)
	for i := 0; i < n; i++ {
		for m := 0; m < k; m++ {
			j := rng.IntN(n - 1)
			if j >= i {
				j++
			}
			from, to, val = append(from, int32(i)), append(to, int32(j)), append(val, 0.5+rng.Float64())
		}
	}
	p := symmetricP(n, from, to, val)
	benchCache[key] = p
	return p
}

func benchY(n, dims int) []float64 {
	key := fmt.Sprintf("Y%d/%d", n, dims)
	if v, ok := benchCache[key]; ok {
		return v.([]float64)
	}
	f := math.Sqrt(float64(n) / 1e5)
	y := clusteredY(n, dims, 20, 40*f, 3*f, rand.New(rand.NewPCG(7, uint64(n))))
	benchCache[key] = y
	return y
}

// BenchmarkGradientTree is one full gradient (tree repulsion + attraction) at
// N = 100,000, 2-D and 3-D, 1 and 2 threads.
func BenchmarkGradientTree(b *testing.B) {
	const n = 100000
	p := benchP(b, n, 90)
	for _, dims := range []int{2, 3} {
		y := benchY(n, dims)
		for _, threads := range []int{1, 2} {
			b.Run(fmt.Sprintf("N=%d/%dD/threads=%d", n, dims, threads), func(b *testing.B) {
				params := DefaultParams(n)
				params.Dims, params.Method, params.Threads = dims, Tree, threads
				e, err := newEngine(p, params)
				if err != nil {
					b.Fatal(err)
				}
				grad := make([]float64, n*dims)
				e.gradient(y, 1, grad) // first build allocates
				b.ReportAllocs()
				b.ResetTimer()
				for range b.N {
					e.gradient(y, 1, grad)
				}
			})
		}
	}
}

// BenchmarkAttraction isolates the sparse attractive pass (same P as above),
// with the kernel's prefetching as it is, of positions alone, and off.
func BenchmarkAttraction(b *testing.B) {
	const n = 100000
	p := benchP(b, n, 90)
	y := benchY(n, 2)
	ahead, stream := attractAhead, attractStream
	defer func() { attractAhead, attractStream = ahead, stream }()
	for _, threads := range []int{1, 2} {
		for _, c := range [][2]int{{ahead, stream}, {ahead, 0}, {0, 0}} {
			b.Run(fmt.Sprintf("N=%d/threads=%d/ahead=%d/stream=%d", n, threads, c[0], c[1]), func(b *testing.B) {
				attractAhead, attractStream = c[0], c[1]
				params := DefaultParams(n)
				params.Method, params.Threads = Tree, threads
				e, _ := newEngine(p, params)
				grad := make([]float64, n*2)
				b.ResetTimer()
				for range b.N {
					e.attraction(y, 4, 0, grad)
				}
			})
		}
	}
}

// BenchmarkRepulsion compares repulsion methods on the map alone (no P),
// 2-D, α = 1, from 5·10^3 to 10^6 points (the small sizes place
// AutoGridMin).
func BenchmarkRepulsion(b *testing.B) {
	for _, n := range []int{5000, 20000, 100000, 1000000} {
		y := benchY(n, 2)
		methods := []Method{Tree, Grid}
		for _, m := range methods {
			for _, threads := range []int{1, 2} {
				b.Run(fmt.Sprintf("N=%d/%v/threads=%d", n, m, threads), func(b *testing.B) {
					params := DefaultParams(n)
					params.Method, params.Threads = m, threads
					timeRepulsion(b, y, params)
				})
			}
		}
	}
}

// timeRepulsion times the repulsion alone on the map y (2-D, no P) after one
// untimed call that sizes the buffers, and returns the engine.
func timeRepulsion(b *testing.B, y []float64, params Params) *engine {
	b.Helper()
	e, err := newEngine(core.CSR{N: len(y) / 2}, params)
	if err != nil {
		b.Fatal(err)
	}
	e.repulsion(y)
	b.ResetTimer()
	for range b.N {
		e.repulsion(y)
	}
	return e
}

// BenchmarkStep is one optimiser Step at N = 100,000, 2-D, tree and grid
// repulsion, 1 and 2 threads (the thread ratio is the figure to quote).
func BenchmarkStep(b *testing.B) {
	const n = 100000
	p := benchP(b, n, 90)
	y0 := benchY(n, 2)
	for _, m := range []Method{Tree, Grid} {
		for _, threads := range []int{1, 2} {
			b.Run(fmt.Sprintf("N=%d/%v/threads=%d", n, m, threads), func(b *testing.B) {
				params := DefaultParams(n)
				params.Method, params.Threads, params.Iterations = m, threads, 1<<30
				params.EarlyIterations = 0
				o, err := New(p, y0, params)
				if err != nil {
					b.Fatal(err)
				}
				if err := o.Step(); err != nil { // sizes the buffers
					b.Fatal(err)
				}
				b.ResetTimer()
				for range b.N {
					if err := o.Step(); err != nil {
						b.Fatal(err)
					}
				}
			})
		}
	}
}

// BenchmarkGridSettings puts grid settings side by side on the same maps
// (repulsion only, 2 threads): the node spacing δ and the interpolation order
// p set the accuracy (TestGridAccuracy) and the cost, about M² log M for the
// transforms with M ≈ width/δ and N·p² for spreading and gathering.
func BenchmarkGridSettings(b *testing.B) {
	settings := []struct {
		order   int
		spacing float64
		min     int
	}{
		{5, 0.25, 160}, {5, 0.4, 160}, {5, 0.4, 64}, {4, 0.35, 160}, {6, 0.45, 64},
	}
	for _, n := range []int{20000, 100000, 1000000} {
		y := benchY(n, 2)
		for _, s := range settings {
			b.Run(fmt.Sprintf("N=%d/p=%d/spacing=%v/min=%d", n, s.order, s.spacing, s.min), func(b *testing.B) {
				params := Params{Dims: 2, Dof: 1, Method: Grid, Threads: 2, GridOrder: s.order, GridSpacing: s.spacing, GridMin: s.min}
				e := timeRepulsion(b, y, params)
				b.ReportMetric(float64(e.grid.m), "nodes/axis")
			})
		}
	}
}

// BenchmarkMemoryRead is the floor for the attractive pass: a streaming read
// of 1 GiB (a P of 134 million entries at 8 bytes: a 4-byte column and a
// 4-byte value), summed by one and by two threads. b.SetBytes makes the
// benchmark print the bandwidth (MB/s); the attractive pass at N rows reads
// 8·nnz(P) bytes plus the map, so nnz·8/bandwidth is the least it can take.
// NIGHTJAR_BENCH_READ_GIB sets another size in GiB (10 for a P of 10^7
// rows, which then occupies as much memory).
func BenchmarkMemoryRead(b *testing.B) {
	gib := 1
	if v := os.Getenv("NIGHTJAR_BENCH_READ_GIB"); v != "" {
		n, err := strconv.Atoi(v)
		if err != nil || n < 1 {
			b.Fatalf("NIGHTJAR_BENCH_READ_GIB=%q: want a whole number of GiB, at least 1", v)
		}
		gib = n
	}
	words := gib << 28 // gib GiB of float32
	data := make([]float32, words)
	for i := range data {
		data[i] = float32(i & 1023)
	}
	for _, threads := range []int{1, 2} {
		b.Run(fmt.Sprintf("threads=%d", threads), func(b *testing.B) {
			b.SetBytes(4 * int64(words))
			sums := make([]float32, threads)
			for range b.N {
				done := make(chan struct{})
				for t := range threads {
					go func() {
						part := data[t*words/threads : (t+1)*words/threads]
						var s0, s1, s2, s3 float32
						for k := 0; k+3 < len(part); k += 4 {
							s0 += part[k]
							s1 += part[k+1]
							s2 += part[k+2]
							s3 += part[k+3]
						}
						sums[t] = s0 + s1 + s2 + s3
						done <- struct{}{}
					}()
				}
				for range threads {
					<-done
				}
			}
			if sums[0] == 0 {
				b.Fatal("nothing read")
			}
		})
	}
}
