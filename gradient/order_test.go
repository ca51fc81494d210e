package gradient

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"nightjar/internal/par"
)

// TestLocalityOrder checks that the renumbering is a permutation and that the
// renumbered P holds exactly the same entries (i, j, p_ij) → (inv i, inv j,
// p_ij), rows sorted by column (reference: the definition of a symmetric
// permutation P' = Π P Πᵀ).
func TestLocalityOrder(t *testing.T) {
	for _, n := range []int{2, 57, 3000} {
		p := randomP(n, min(n-1, 7), rand.New(rand.NewPCG(5, uint64(n))))
		perm := localityOrder(p)
		if len(perm) != n {
			t.Fatalf("n=%d: %d rows in the order", n, len(perm))
		}
		seen := make([]bool, n)
		for _, i := range perm {
			if seen[i] {
				t.Fatalf("n=%d: row %d placed twice", n, i)
			}
			seen[i] = true
		}
		inv := par.Inverse(perm)
		for _, threads := range []int{1, 3} {
			q := permuteRows(p, perm, inv, threads)
			if err := q.Validate(); err != nil {
				t.Fatalf("n=%d: renumbered P invalid: %v", n, err)
			}
			want := map[[2]int32]float32{}
			for i := 0; i < n; i++ {
				for e := p.Offsets[i]; e < p.Offsets[i+1]; e++ {
					want[[2]int32{inv[i], inv[p.Cols[e]]}] = p.Vals[e]
				}
			}
			if len(q.Cols) != len(want) {
				t.Fatalf("n=%d: %d entries, want %d", n, len(q.Cols), len(want))
			}
			for k := 0; k < n; k++ {
				for e := q.Offsets[k]; e < q.Offsets[k+1]; e++ {
					if v, ok := want[[2]int32{int32(k), q.Cols[e]}]; !ok || v != q.Vals[e] {
						t.Fatalf("n=%d: entry (%d, %d) = %v, want %v (present %v)", n, k, q.Cols[e], q.Vals[e], v, ok)
					}
				}
			}
			// The consuming renumbering gives the same arrays from a
			// scrambled copy of p, and asks for the collection once.
			collected := 0
			given := cloneCSR(p)
			c := permuteRowsConsume(&given, perm, inv, threads, func() { collected++ })
			if given.Cols != nil || given.Vals != nil {
				t.Fatalf("n=%d: permuteRowsConsume left the P it took over in place", n)
			}
			if collected != 1 || !slices.Equal(c.Offsets, q.Offsets) || !slices.Equal(c.Cols, q.Cols) || !slices.Equal(c.Vals, q.Vals) {
				t.Fatalf("n=%d, %d threads: permuteRowsConsume differs from permuteRows (collections: %d)", n, threads, collected)
			}
		}
	}
}

// TestOptimizerFirstStep checks one Step, in input row order, in the early
// phase and after it (with and without an exaggeration after it), against the
// update written out from its definition (van der Maaten & Hinton 2008 for
// the momentum step; Jacobs 1988 for the gains): on the first step every
// gain with g ≠ 0 becomes 1.2, update = −(η/4)·1.2·g (the gradient keeping
// its 4), then Y is recentred. The gradient comes from Gradient, which does
// not renumber rows, so a mistake in the optimiser's renumbering shows here.
func TestOptimizerFirstStep(t *testing.T) {
	const n, dims = 300, 2
	rng := rand.New(rand.NewPCG(9, 9))
	p := randomP(n, 12, rng)
	y0 := clusteredY(n, dims, 4, 5, 1, rng)
	for _, tc := range []struct {
		name       string
		early      int
		late, exag float64 // MainExaggeration, and the factor the step must use
	}{
		{"early phase", 250, 0, 12},
		{"late, default", 0, 0, 1},
		{"main exaggeration 3", 0, 3, 3},
	} {
		t.Run(tc.name, func(t *testing.T) {
			params := DefaultParams(n)
			params.Method, params.Threads = Exact, 2
			params.EarlyIterations, params.MainExaggeration = tc.early, tc.late
			g := make([]float64, n*dims)
			if _, err := Gradient(p, y0, params, tc.exag, g); err != nil {
				t.Fatal(err)
			}
			step := params.EffectiveLearningRate(n) / 4
			want := make([]float64, n*dims)
			var mean [dims]float64
			for k := range want {
				want[k] = y0[k] - step*1.2*g[k]
				mean[k%dims] += want[k] / n
			}
			for k := range want {
				want[k] -= mean[k%dims]
			}
			o, err := New(p, y0, params)
			if err != nil {
				t.Fatal(err)
			}
			if err := o.Step(); err != nil {
				t.Fatal(err)
			}
			got := o.Y()
			for k := range want {
				if math.Abs(got[k]-want[k]) > 1e-9*(1+math.Abs(want[k])) {
					t.Fatalf("Y[%d] = %.15g, want %.15g", k, got[k], want[k])
				}
			}
			st := o.State()
			for k := range want {
				if st.Gains[k] != 1.2 || st.Y[k] != got[k] {
					t.Fatalf("state at %d: gain %v (want 1.2), Y %v (want %v)", k, st.Gains[k], st.Y[k], got[k])
				}
			}
		})
	}
}

// TestNewConsumeSameBits checks that an optimiser built by NewConsume takes
// the same steps as one built by New, bit for bit, and that it scrambles
// the P it was given (so the test would notice if it worked on a copy).
func TestNewConsumeSameBits(t *testing.T) {
	const n, dims = 2000, 2
	rng := rand.New(rand.NewPCG(3, 14))
	p := randomP(n, 10, rng)
	y0 := clusteredY(n, dims, 5, 10, 1, rng)
	params := DefaultParams(n)
	params.Method, params.Threads, params.Iterations, params.EarlyIterations = Grid, 2, 30, 10
	a, err := New(p, y0, params)
	if err != nil {
		t.Fatal(err)
	}
	given := cloneCSR(p)
	b, err := NewConsume(given, y0, params)
	if err != nil {
		t.Fatal(err)
	}
	if slices.Equal(given.Vals, p.Vals) {
		t.Errorf("NewConsume left the values of the P it was given in place: it renumbered a copy")
	}
	for !a.Done() {
		if err := a.Step(); err != nil {
			t.Fatal(err)
		}
		if err := b.Step(); err != nil {
			t.Fatal(err)
		}
	}
	if ya, yb := a.Y(), b.Y(); !slices.Equal(ya, yb) {
		t.Fatalf("after %d steps the maps differ", a.Iteration())
	}
}
