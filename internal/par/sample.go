package par

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
)

// Sample returns min(size, n) distinct numbers drawn uniformly from [0, n),
// in increasing order, by Floyd's algorithm (Bentley & Floyd 1987, CACM
// 30(9)): size draws from a PCG generator seeded with (seed, stream) and no
// n-sized array. The same (n, size, seed, stream) always gives the same
// numbers; callers keep distinct streams so that their samples differ.
// size ≥ n gives every number 0 … n−1; size ≤ 0 gives an empty sample.
// Sample panics if n < 0 or n > math.MaxInt32+1.
func Sample(n, size int, seed, stream uint64) []int32 {
	if n < 0 || n > math.MaxInt32+1 {
		panic(fmt.Sprintf("par.Sample: n = %d out of range", n))
	}
	if size <= 0 {
		return []int32{}
	}
	if size >= n {
		return Identity(n)
	}
	rng := rand.New(rand.NewPCG(seed, stream))
	chosen := make(map[int32]struct{}, size)
	out := make([]int32, 0, size)
	for j := n - size; j < n; j++ {
		t := int32(rng.IntN(j + 1))
		if _, dup := chosen[t]; dup {
			t = int32(j)
		}
		chosen[t] = struct{}{}
		out = append(out, t)
	}
	slices.Sort(out)
	return out
}

// Identity returns 0, 1, …, n−1.
func Identity(n int) []int32 {
	out := make([]int32, n)
	for i := range out {
		out[i] = int32(i)
	}
	return out
}
