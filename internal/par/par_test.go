package par

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

// TestBlocksSameBits checks the package's promise: a reduction over blocks
// added in block order is bit-identical for 1 and many threads. The values
// are chosen so that the float64 sum depends on the order of additions.
func TestBlocksSameBits(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	x := make([]float64, 100003)
	for i := range x {
		x[i] = math.Ldexp(rng.Float64(), rng.IntN(60)-30)
	}
	sum := func(threads int) float64 {
		const block = 97
		part := make([]float64, (len(x)+block-1)/block)
		Blocks(len(x), block, threads, func(_, b, lo, hi int) {
			for _, v := range x[lo:hi] {
				part[b] += v
			}
		})
		return Sum(part)
	}
	one := sum(1)
	for _, th := range []int{2, 3, 8, 64} {
		if got := sum(th); math.Float64bits(got) != math.Float64bits(one) {
			t.Errorf("%d threads: sum %v, 1 thread %v (bits differ)", th, got, one)
		}
	}
	// The block-order sum is not the plain left-to-right sum: the test
	// would notice a loop that ignored the blocks.
	var plain float64
	for _, v := range x {
		plain += v
	}
	if plain == one {
		t.Log("block-order and plain sums coincide for this data")
	}
}

func TestBlocksCoverEachIndexOnce(t *testing.T) {
	for _, c := range []struct{ n, block, threads int }{{0, 4, 2}, {1, 4, 2}, {10, 3, 1}, {10, 3, 4}, {1000, 7, 16}, {5, 10, 3}} {
		seen := make([]int32, c.n)
		workers := make([]bool, max(1, c.threads))
		Blocks(c.n, c.block, c.threads, func(w, b, lo, hi int) {
			if lo != b*c.block || hi > c.n || hi-lo > c.block || hi <= lo {
				t.Errorf("%+v: block %d = [%d, %d)", c, b, lo, hi)
			}
			workers[w] = true
			for i := lo; i < hi; i++ {
				seen[i]++
			}
		})
		for i, s := range seen {
			if s != 1 {
				t.Fatalf("%+v: index %d visited %d times", c, i, s)
			}
		}
	}
}

func TestMapBlockOrder(t *testing.T) {
	got := Map(10, 3, 4, func() func(lo, hi int) [2]int {
		return func(lo, hi int) [2]int { return [2]int{lo, hi} }
	})
	want := [][2]int{{0, 3}, {3, 6}, {6, 9}, {9, 10}}
	if !slices.Equal(got, want) {
		t.Fatalf("Map = %v, want %v", got, want)
	}
}

func TestFirstErrorLowestBlock(t *testing.T) {
	var e FirstError
	errs := make([]error, 50)
	for i := range errs {
		errs[i] = &blockErr{i}
	}
	Blocks(50, 1, 8, func(_, b, lo, _ int) {
		if b%7 == 3 {
			e.Set(lo, errs[b])
		}
	})
	if got := e.Err(); got != errs[3] {
		t.Fatalf("Err() = %v, want block 3's", got)
	}
}

type blockErr struct{ b int }

func (e *blockErr) Error() string { return "block" }

func TestSample(t *testing.T) {
	s := Sample(1000, 100, 7, 11)
	if len(s) != 100 || !slices.IsSorted(s) {
		t.Fatalf("Sample: %d values, sorted %v", len(s), slices.IsSorted(s))
	}
	for i := 1; i < len(s); i++ {
		if s[i] == s[i-1] || s[i] < 0 || s[i] >= 1000 {
			t.Fatalf("Sample: repeated or out-of-range value %d", s[i])
		}
	}
	if !slices.Equal(s, Sample(1000, 100, 7, 11)) {
		t.Error("Sample is not deterministic")
	}
	if slices.Equal(s, Sample(1000, 100, 7, 12)) {
		t.Error("another stream gave the same sample")
	}
	if !slices.Equal(Sample(5, 9, 1, 1), []int32{0, 1, 2, 3, 4}) || len(Sample(5, 0, 1, 1)) != 0 {
		t.Error("Sample edge cases")
	}
	// Uniformity: each of 20 numbers drawn 5 at a time over 20,000 seeds
	// should appear about 5,000 times (binomial, sd ≈ 61; 6 sd allowed).
	count := make([]int, 20)
	for seed := range uint64(20000) {
		for _, v := range Sample(20, 5, seed, 3) {
			count[v]++
		}
	}
	for v, c := range count {
		if math.Abs(float64(c)-5000) > 6*61 {
			t.Errorf("value %d drawn %d times, want about 5,000", v, c)
		}
	}
}

func TestPermutations(t *testing.T) {
	order := []int32{2, 0, 3, 1}
	src := []int{0, 0, 10, 10, 20, 20, 30, 30}
	dst := make([]int, len(src))
	Gather(dst, src, order, 2)
	if !slices.Equal(dst, []int{20, 20, 0, 0, 30, 30, 10, 10}) {
		t.Fatalf("Gather = %v", dst)
	}
	in := slices.Clone(src)
	GatherInPlace(in, 2, order)
	if !slices.Equal(in, dst) {
		t.Fatalf("GatherInPlace = %v, want %v", in, dst)
	}
	back := make([]int, len(src))
	Scatter(back, dst, order, 2)
	if !slices.Equal(back, src) {
		t.Fatalf("Scatter did not undo Gather: %v", back)
	}
	inv := Inverse(order)
	for t2, i := range order {
		if inv[i] != int32(t2) {
			t.Fatalf("Inverse = %v", inv)
		}
	}
}
