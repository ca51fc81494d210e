package gradient

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

// TestAttractRowSameBits: the SSE2 kernel (or, under the purego tag, the
// pure-Go loop itself) gives attractRowGo's bits for rows of 0 to 201
// entries, and attractRowGo agrees with the sum written term by term
// (Σ_j p_ij (y_i − y_j)/(1 + ‖y_i − y_j‖²/α), one float64 sum per axis)
// to a relative 1e-12 (common practice for sums of a few hundred terms).
func TestAttractRowSameBits(t *testing.T) {
	rng := rand.New(rand.NewPCG(8, 9))
	const n = 500
	y := make([]float64, 2*n)
	for i := range y {
		y[i] = rng.NormFloat64() * 30
	}
	for length := 0; length <= 201; length++ {
		for _, alpha := range []float64{1, 0.5, 3} {
			perm := rng.Perm(n)[:length]
			slices.Sort(perm) // a row's columns ascend, as in P
			cs := make([]int32, length)
			vs := make([]float32, length)
			for e, j := range perm {
				cs[e], vs[e] = int32(j), float32(rng.Float64()*1e-4)
			}
			i := rng.IntN(n)
			yx, yy := y[2*i], y[2*i+1]
			fx, fy := attractRow(y, cs, vs, yx, yy, 1/alpha)
			gx, gy := attractRowGo(y, cs, vs, yx, yy, 1/alpha)
			if math.Float64bits(fx) != math.Float64bits(gx) || math.Float64bits(fy) != math.Float64bits(gy) {
				t.Fatalf("%d entries, α %g: kernel (%v, %v), pure Go (%v, %v)", length, alpha, fx, fy, gx, gy)
			}
			var rx, ry, scale float64
			for e, j := range cs {
				dx, dy := yx-y[2*j], yy-y[2*j+1]
				s := float64(vs[e]) / (1 + (dx*dx+dy*dy)/alpha)
				rx, ry = rx+s*dx, ry+s*dy
				scale += math.Abs(s * (math.Abs(dx) + math.Abs(dy)))
			}
			if math.Abs(fx-rx) > 1e-12*scale || math.Abs(fy-ry) > 1e-12*scale {
				t.Fatalf("%d entries: (%v, %v), term by term (%v, %v)", length, fx, fy, rx, ry)
			}
		}
	}
}

// TestAttractRowPrefetchSameBits: prefetching changes no bit. Rows are cut
// from one long column array, as the attractive pass cuts them from P, so
// the kernel may read columns past a row up to the array's end; each row is
// summed with prefetching off, at the default distance, and at distances
// longer than the rest of the array (so that no pair, or only some, may
// prefetch), with P's columns and values prefetched or not, near or past
// the array's end, and compared with attractRowGo.
func TestAttractRowPrefetchSameBits(t *testing.T) {
	defer func(a, s int) { attractAhead, attractStream = a, s }(attractAhead, attractStream)
	rng := rand.New(rand.NewPCG(10, 11))
	const n = 300
	y := make([]float64, 2*n)
	for i := range y {
		y[i] = rng.NormFloat64() * 30
	}
	var cols []int32
	var vals []float32
	var off []int
	for length := range 70 {
		off = append(off, len(cols))
		perm := rng.Perm(n)[:length]
		slices.Sort(perm)
		for _, j := range perm {
			cols, vals = append(cols, int32(j)), append(vals, float32(rng.Float64()*1e-4))
		}
	}
	off = append(off, len(cols))
	cols, vals = slices.Clip(cols), slices.Clip(vals)
	for _, c := range []struct{ ahead, stream int }{
		{0, 0}, {1, 0}, {2, 0}, {7, 0}, {32, 0}, {100, 0}, {len(cols) + 5, 0},
		{1, 1}, {32, 256}, {7, len(cols) + 5}, {len(cols) + 5, 256},
	} {
		attractAhead, attractStream = c.ahead, c.stream
		for r := 0; r+1 < len(off); r++ {
			cs, vs := cols[off[r]:off[r+1]], vals[off[r]:off[r+1]]
			i := rng.IntN(n)
			fx, fy := attractRow(y, cs, vs, y[2*i], y[2*i+1], 1)
			gx, gy := attractRowGo(y, cs, vs, y[2*i], y[2*i+1], 1)
			if math.Float64bits(fx) != math.Float64bits(gx) || math.Float64bits(fy) != math.Float64bits(gy) {
				t.Fatalf("ahead %d, stream %d, row %d (%d entries, %d to the end): kernel (%v, %v), pure Go (%v, %v)", c.ahead, c.stream, r, len(cs), cap(cs), fx, fy, gx, gy)
			}
		}
	}
}

// BenchmarkAttractRow: one row of 131 entries (the mean of the
// 1,000,000-row demo's P) by the kernel and by the pure-Go loop.
func BenchmarkAttractRow(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 2))
	const n, k = 4096, 131
	y := make([]float64, 2*n)
	for i := range y {
		y[i] = rng.NormFloat64()
	}
	cs := make([]int32, k)
	vs := make([]float32, k)
	perm := rng.Perm(n)[:k]
	slices.Sort(perm)
	for e, j := range perm {
		cs[e], vs[e] = int32(j), float32(rng.Float64())
	}
	var sink float64
	b.Run("kernel", func(b *testing.B) {
		for range b.N {
			fx, fy := attractRow(y, cs, vs, 0.3, 0.2, 1)
			sink += fx + fy
		}
	})
	b.Run("go", func(b *testing.B) {
		for range b.N {
			fx, fy := attractRowGo(y, cs, vs, 0.3, 0.2, 1)
			sink += fx + fy
		}
	})
	_ = sink
}
