package knn

import (
	"math"
	"math/rand/v2"
	"slices"
	"sort"
	"testing"

	"nightjar/internal/core"
	"nightjar/internal/par"
)

// rpConstant returns n copies of one row of d values: every split of such a
// table leaves one side empty.
func rpConstant(n, d int) core.Matrix {
	x := core.Matrix{N: n, D: d, Data: make([]float32, n*d)}
	for i := range x.Data {
		x.Data[i] = 1.5
	}
	return x
}

// TestRPTreeLeaves checks the tree contract on clustered, constant and
// two-valued tables: perm is a permutation of the rows, every leaf holds
// between 1 and leaf rows, leafOf agrees with the leaves, and the same seed
// gives the same tree.
func TestRPTreeLeaves(t *testing.T) {
	two := axClustered(600, 6, 2, 4)
	for i := 0; i < two.N; i++ { // rows take one of two values
		for l := 0; l < two.D; l++ {
			two.Data[i*two.D+l] = float32(i % 2)
		}
	}
	cases := []struct {
		name string
		x    core.Matrix
		leaf int
	}{
		{"clustered", axClustered(3000, 12, 8, 3), 40},
		{"constant", rpConstant(500, 5), 30},
		{"two values", two, 25},
		{"one leaf", axClustered(50, 4, 2, 9), 64},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			tr := buildRPTree(c.x, c.leaf, 11, 2)
			n := c.x.N
			if len(tr.perm) != n || len(tr.leafOf) != n {
				t.Fatalf("perm %d, leafOf %d entries, want %d", len(tr.perm), len(tr.leafOf), n)
			}
			seen := make([]bool, n)
			for _, i := range tr.perm {
				if i < 0 || int(i) >= n || seen[i] {
					t.Fatalf("perm is not a permutation (row %d)", i)
				}
				seen[i] = true
			}
			if tr.start[0] != 0 || int(tr.start[len(tr.start)-1]) != n {
				t.Fatalf("leaf bounds %d … %d, want 0 … %d", tr.start[0], tr.start[len(tr.start)-1], n)
			}
			for l := 0; l+1 < len(tr.start); l++ {
				m := int(tr.start[l+1] - tr.start[l])
				if m < 1 || m > c.leaf {
					t.Fatalf("leaf %d holds %d rows, want 1 … %d", l, m, c.leaf)
				}
				for _, i := range tr.perm[tr.start[l]:tr.start[l+1]] {
					if tr.leafOf[i] != int32(l) {
						t.Fatalf("row %d in leaf %d, leafOf says %d", i, l, tr.leafOf[i])
					}
				}
			}
			again := buildRPTree(c.x, c.leaf, 11, 2)
			if !slices.Equal(again.perm, tr.perm) || !slices.Equal(again.start, tr.start) {
				t.Fatalf("same seed, different tree")
			}
		})
	}
}

// TestRPStartIsLeafTopK recomputes the start of rpStart independently: for
// every row, the union of its leaf-mates over the same trees, ranked by
// (distance, index) with sort.Slice, must begin with the row's list; rows
// with fewer than k leaf-mates get all of them plus distinct other rows.
func TestRPStartIsLeafTopK(t *testing.T) {
	const k, trees, leaf = 12, 3, 20
	x := axClustered(1500, 10, 6, 5)
	dup := x
	dup.Data = append(slices.Clone(x.Data), x.Data[:100*x.D]...) // 100 duplicate rows
	dup.N += 100
	for _, m := range []core.Matrix{x, dup} {
		g := &core.Graph{N: m.N, K: k, Index: make([]int32, m.N*k), Dist2: make([]float32, m.N*k)}
		rpStart(g, m, trees, leaf, 7, 3)
		forest := make([]rpTree, trees)
		for tr := range forest {
			forest[tr] = buildRPTree(m, leaf, 7, uint64(tr))
		}
		short := 0
		for i := 0; i < m.N; i++ {
			mates := map[int32]bool{}
			for _, tr := range forest {
				l := tr.leafOf[i]
				for _, v := range tr.perm[tr.start[l]:tr.start[l+1]] {
					if int(v) != i {
						mates[v] = true
					}
				}
			}
			type cand struct {
				v int32
				d float64
			}
			var want []cand
			for v := range mates {
				var s float64
				for l := 0; l < m.D; l++ {
					e := float64(m.Data[i*m.D+l]) - float64(m.Data[int(v)*m.D+l])
					s += e * e
				}
				want = append(want, cand{v, s})
			}
			sort.Slice(want, func(a, b int) bool {
				if want[a].d != want[b].d {
					return want[a].d < want[b].d
				}
				return want[a].v < want[b].v
			})
			row := g.Index[i*k : (i+1)*k]
			if len(want) < k {
				short++
				got := map[int32]bool{}
				for _, v := range row {
					if int(v) == i || got[v] || v < 0 || int(v) >= m.N {
						t.Fatalf("row %d: filled list %v has self, a repeat or an out-of-range row", i, row)
					}
					got[v] = true
				}
				for v := range mates {
					if !got[v] {
						t.Fatalf("row %d: leaf-mate %d missing from %v", i, v, row)
					}
				}
				continue
			}
			// The float32 distances of rpStart may order two near-equal
			// candidates differently from float64 sums: compare sets of
			// the first k, allowing swaps across the k-th distance only.
			kth := want[k-1].d
			for _, v := range row {
				var s float64
				for l := 0; l < m.D; l++ {
					e := float64(m.Data[i*m.D+l]) - float64(m.Data[int(v)*m.D+l])
					s += e * e
				}
				if !mates[v] || s > kth*(1+1e-5)+1e-9 {
					t.Fatalf("row %d: %d (distance %g) is not among the %d nearest leaf-mates (k-th %g)", i, v, s, k, kth)
				}
			}
		}
		t.Logf("%d rows, %d with fewer than k leaf-mates", m.N, short)
	}
}

// TestMergeTop compares mergeTop with sorting the union and dropping repeats,
// on random lists with ties, repeats and empty slots.
func TestMergeTop(t *testing.T) {
	r := rand.New(rand.NewPCG(5, 6))
	type e struct {
		i int32
		d float32
	}
	less := func(a, b e) int {
		if a.d != b.d {
			if a.d < b.d {
				return -1
			}
			return 1
		}
		return int(a.i - b.i)
	}
	dist := func(i int32) float32 { return float32(i%7) * 0.5 } // the same pair, the same bits
	for trial := 0; trial < 500; trial++ {
		k := 1 + r.IntN(10)
		list := map[int32]bool{}
		for len(list) < r.IntN(k+1) {
			list[int32(r.IntN(30))] = true
		}
		cands := map[int32]bool{}
		for n := r.IntN(15); len(cands) < n; {
			cands[int32(r.IntN(30))] = true
		}
		var le, ce []e
		for i := range list {
			le = append(le, e{i, dist(i)})
		}
		for i := range cands {
			ce = append(ce, e{i, dist(i)})
		}
		slices.SortFunc(le, less)
		slices.SortFunc(ce, less)
		idx := make([]int32, k)
		d := make([]float32, k)
		for j := range idx {
			idx[j], d[j] = -1, float32(math.Inf(1))
		}
		for j, x := range le {
			idx[j], d[j] = x.i, x.d
		}
		ci := make([]int32, len(ce))
		cd := make([]float32, len(ce))
		for j, x := range ce {
			ci[j], cd[j] = x.i, x.d
		}
		all := map[int32]bool{}
		for i := range list {
			all[i] = true
		}
		for i := range cands {
			all[i] = true
		}
		var want []e
		for i := range all {
			want = append(want, e{i, dist(i)})
		}
		slices.SortFunc(want, less)
		mergeTop(idx, d, ci, cd, make([]int32, k), make([]float32, k))
		for j := 0; j < k; j++ {
			if j < len(want) {
				if idx[j] != want[j].i || d[j] != want[j].d {
					t.Fatalf("trial %d: slot %d holds (%d, %g), want (%d, %g)", trial, j, idx[j], d[j], want[j].i, want[j].d)
				}
			} else if idx[j] != -1 {
				t.Fatalf("trial %d: slot %d holds %d, want empty", trial, j, idx[j])
			}
		}
	}
}

// TestSortRow compares sortRow with sort.Slice under (distance, index), with
// ties, zeros and a negative zero.
func TestSortRow(t *testing.T) {
	r := rand.New(rand.NewPCG(8, 9))
	for trial := 0; trial < 200; trial++ {
		n := r.IntN(40)
		idx := make([]int32, n)
		d := make([]float32, n)
		for j := range idx {
			idx[j] = int32(r.IntN(1 << 30))
			d[j] = float32(r.IntN(5)) * 0.25
			if r.IntN(10) == 0 {
				d[j] = float32(math.Copysign(0, -1))
			}
		}
		wi, wd := slices.Clone(idx), slices.Clone(d)
		sort.Sort(rowRef{wi, wd})
		sortRow(idx, d, nil)
		for j := range idx {
			if idx[j] != wi[j] || d[j] != wd[j] {
				t.Fatalf("trial %d: position %d (%d, %g), want (%d, %g)", trial, j, idx[j], d[j], wi[j], wd[j])
			}
		}
	}
}

type rowRef struct {
	idx []int32
	d   []float32
}

func (r rowRef) Len() int { return len(r.idx) }
func (r rowRef) Less(a, b int) bool {
	if r.d[a] != r.d[b] {
		return r.d[a] < r.d[b]
	}
	return r.idx[a] < r.idx[b]
}
func (r rowRef) Swap(a, b int) {
	r.idx[a], r.idx[b] = r.idx[b], r.idx[a]
	r.d[a], r.d[b] = r.d[b], r.d[a]
}

// TestDescentTreeStart: on clustered data the tree start must be far better
// than the random one (whose expected recall is k/(N−1), Dong et al. 2011's
// starting point), and with refinement both must meet the stopping goal.
func TestDescentTreeStart(t *testing.T) {
	const k = 15
	x := axClustered(4000, 16, 10, 12)
	recall := func(trees, passes int) (float64, Stats) {
		opt := DefaultDescent(k)
		opt.Trees, opt.MaxPasses = trees, passes
		g, st, err := Descent(x, k, opt)
		if err != nil {
			t.Fatal(err)
		}
		axCheckGraph(t, g, x, k)
		r, _, err := Recall(g, x, 500, 3, Options{})
		if err != nil {
			t.Fatal(err)
		}
		return r, st
	}
	tree0, _ := recall(8, 0)
	rand0, _ := recall(-1, 0)
	t.Logf("start recall: trees %.3f, random %.4f", tree0, rand0)
	if rand0 > 0.02 {
		t.Errorf("random start recall %.4f, expected about k/N = %.4f", rand0, float64(k)/float64(x.N-1))
	}
	if tree0 < 0.4 || tree0 < 10*rand0 {
		t.Errorf("tree start recall %.3f, want well above the random start %.4f", tree0, rand0)
	}
	for _, trees := range []int{8, -1} {
		r, st := recall(trees, 6)
		t.Logf("trees %d: %d passes, estimates %v, recall %.4f", trees, st.Passes, st.PassRecall, r)
		if r < 0.97 {
			t.Errorf("trees %d: recall %.4f after refinement", trees, r)
		}
	}
}

// TestStopRecall: refinement stops at the first estimate that reaches
// StopRecall, and that estimate is the recall that Recall measures on the
// same sample (an independent exact search).
func TestStopRecall(t *testing.T) {
	const k = 15
	x := axClustered(4000, 16, 10, 12)
	for _, goal := range []float64{0.9, 0.995} {
		opt := DefaultDescent(k)
		opt.Trees, opt.MaxPasses, opt.Delta, opt.StopRecall, opt.StopRows = -1, 8, 1e-12, goal, 200
		g, st, err := Descent(x, k, opt)
		if err != nil {
			t.Fatal(err)
		}
		t.Logf("goal %g: %d passes, estimates %v", goal, st.Passes, st.PassRecall)
		if len(st.PassRecall) != st.Passes+1 {
			t.Fatalf("%d estimates for %d passes, want one more", len(st.PassRecall), st.Passes)
		}
		for i, r := range st.PassRecall[:st.Passes] {
			if r >= goal {
				t.Fatalf("estimate %d = %g reached the goal %g, yet refinement went on", i, r, goal)
			}
		}
		last := st.PassRecall[st.Passes]
		if last < goal && st.Passes < opt.MaxPasses {
			t.Fatalf("stopped after %d passes at %g, below the goal %g", st.Passes, last, goal)
		}
		r, rows, err := Recall(g, x, opt.StopRows, opt.Seed^probeSeed, Options{})
		if err != nil {
			t.Fatal(err)
		}
		if rows != 200 || r != last {
			t.Fatalf("Recall on the stopping sample: %g on %d rows, last estimate %g", r, rows, last)
		}
	}
}

// TestPermuteInPlace: permuteInPlace gives what permuteRows copies, and the
// inverse permutation restores the rows.
func TestPermuteInPlace(t *testing.T) {
	x := axClustered(1000, 7, 5, 2)
	r := rand.New(rand.NewPCG(3, 4))
	order := make([]int32, x.N)
	for i := range order {
		order[i] = int32(i)
	}
	r.Shuffle(len(order), func(a, b int) { order[a], order[b] = order[b], order[a] })
	want := permuteRows(x, order, 2)
	y := core.Matrix{N: x.N, D: x.D, Data: slices.Clone(x.Data)}
	permuteInPlace(y, order)
	if !slices.Equal(y.Data, want.Data) {
		t.Fatal("in place differs from the copy")
	}
	permuteInPlace(y, par.Inverse(order))
	if !slices.Equal(y.Data, x.Data) {
		t.Fatal("the inverse does not restore the rows")
	}
}

// TestDescentInPlace: with InPlace, Descent returns the same graph bits as
// with a copy, and leaves x as it found it; under Cosine too.
func TestDescentInPlace(t *testing.T) {
	const k = 10
	x := axClustered(3000, 8, 6, 14)
	orig := slices.Clone(x.Data)
	for _, m := range []Metric{Euclidean, Cosine} {
		opt := DefaultDescent(k)
		opt.Metric = m
		ref, _, err := Descent(x, k, opt)
		if err != nil {
			t.Fatal(err)
		}
		opt.InPlace = true
		got, _, err := Descent(x, k, opt)
		if err != nil {
			t.Fatal(err)
		}
		if !slices.Equal(got.Index, ref.Index) || !slices.Equal(got.Dist2, ref.Dist2) {
			t.Errorf("%v: InPlace changed the graph", m)
		}
		if !slices.Equal(x.Data, orig) {
			t.Fatalf("%v: x was not restored", m)
		}
	}
}

// TestDescentTiesSorted: with duplicate rows many distances tie, and the
// graph mapped back from the renumbered rows must still rank ties by the
// original row numbers (axCheckGraph checks the order (distance, index)).
func TestDescentTiesSorted(t *testing.T) {
	base := axClustered(80, 6, 4, 3)
	x := core.Matrix{N: base.N * 12, D: base.D}
	for c := 0; c < 12; c++ {
		x.Data = append(x.Data, base.Data...)
	}
	g, _, err := Descent(x, 15, DefaultDescent(15))
	if err != nil {
		t.Fatal(err)
	}
	axCheckGraph(t, g, x, 15)
}
