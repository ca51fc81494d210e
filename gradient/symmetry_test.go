package gradient

import (
	"math"
	"math/rand/v2"
	"testing"

	"nightjar/internal/core"
)

// asymmetric returns a copy of p with the value of row 0's first entry
// raised by a third (its mirror left as it was) and all values scaled to
// sum 1 again: a valid layout, no longer symmetric.
func asymmetric(p core.CSR) core.CSR {
	q := cloneCSR(p)
	q.Vals[0] *= 4.0 / 3
	var s float64
	for _, v := range q.Vals {
		s += float64(v)
	}
	for k := range q.Vals {
		q.Vals[k] = float32(float64(q.Vals[k]) / s)
	}
	return q
}

// withoutMirror returns a copy of p without the mirror (j, i) of row 0's
// first entry (0, j): a valid layout, not symmetric.
func withoutMirror(p core.CSR) core.CSR {
	j := int(p.Cols[0])
	var cols []int32
	var vals []float32
	off := make([]int64, p.N+1)
	for i := 0; i < p.N; i++ {
		for e := p.Offsets[i]; e < p.Offsets[i+1]; e++ {
			if i == j && p.Cols[e] == 0 {
				continue
			}
			cols = append(cols, p.Cols[e])
			vals = append(vals, p.Vals[e])
		}
		off[i+1] = int64(len(cols))
	}
	return core.CSR{N: p.N, Offsets: off, Cols: cols, Vals: vals}
}

func TestSymmetric(t *testing.T) {
	p := randomP(200, 6, rand.New(rand.NewPCG(3, 9)))
	for _, tc := range []struct {
		name string
		p    core.CSR
		want bool
	}{
		{"symmetric", p, true},
		{"one value changed", asymmetric(p), false},
		{"one mirror missing", withoutMirror(p), false},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if err := tc.p.ValidateLayout(); err != nil {
				t.Fatal(err)
			}
			for _, threads := range []int{1, 3} {
				if got := symmetric(tc.p, threads); got != tc.want {
					t.Errorf("threads=%d: symmetric = %v, want %v", threads, got, tc.want)
				}
			}
		})
	}
}

// TestKLHalfRead checks the optimiser's KL against an independent O(N²)
// computation (KLExact, with the optimiser's exact Z) at the positions of
// the last step, for a symmetric P, which the KL reads half of, and for an
// asymmetric one, which it reads whole; and that the half read gives the
// whole read's value up to rounding.
func TestKLHalfRead(t *testing.T) {
	const n = 300
	rng := rand.New(rand.NewPCG(5, 1))
	sym := randomP(n, 5, rng)
	for _, tc := range []struct {
		name string
		p    core.CSR
		half bool
	}{{"symmetric", sym, true}, {"asymmetric", asymmetric(sym), false}} {
		for _, dims := range []int{2, 3} {
			t.Run(tc.name+"/"+map[int]string{2: "2D", 3: "3D"}[dims], func(t *testing.T) {
				y0 := clusteredY(n, dims, 3, 2, 1, rand.New(rand.NewPCG(6, uint64(dims))))
				params := DefaultParams(n)
				params.Dims, params.Method, params.Threads = dims, Exact, 2
				params.EarlyIterations, params.Iterations = 2, 5
				o, err := New(tc.p, y0, params)
				if err != nil {
					t.Fatal(err)
				}
				if o.sym != tc.half {
					t.Fatalf("half read = %v, want %v", o.sym, tc.half)
				}
				for range 3 {
					if err := o.Step(); err != nil {
						t.Fatal(err)
					}
				}
				got := o.KL()
				// KL left the last step's positions in o.g.
				whole := o.plogp - o.eng.sumPLogW(o.g, false) + o.psum*math.Log(o.lastZ)
				if math.Abs(got-whole) > 1e-13*math.Abs(whole) {
					t.Errorf("KL %.17g, summed over every entry %.17g", got, whole)
				}
				s := o.State()
				prev := make([]float64, len(s.Y))
				for k := range prev {
					prev[k] = s.Y[k] - s.Update[k]
				}
				if ref := KLExact(tc.p, prev, dims, 1); math.Abs(got-ref) > 1e-9 {
					t.Errorf("KL %.12g, KLExact at Y−Update %.12g", got, ref)
				}
			})
		}
	}
}
