package gradient

import (
	"math"

	"nightjar/internal/core"
	"nightjar/internal/par"
)

// symmetric reports whether P's entries below the diagonal and its entries
// above it, each taken as the pair (smaller row, larger row) with its value's
// bits, hash to the same sum. P is documented as symmetric (core.CSR), and
// the optimiser's KL counts each pair from one side only when it is; a
// mismatch proves P asymmetric, a match leaves a chance of about 2^-64 that
// it is not. One pass over P, in parallel blocks (the sums are of integers
// modulo 2^64, so their order does not matter).
func symmetric(p core.CSR, threads int) bool {
	nb := (p.N + rowBlock - 1) / rowBlock
	below := make([]uint64, nb)
	above := make([]uint64, nb)
	par.Blocks(p.N, rowBlock, threads, func(_, b, lo, hi int) {
		var lo64, hi64 uint64
		for i := lo; i < hi; i++ {
			for e := p.Offsets[i]; e < p.Offsets[i+1]; e++ {
				if j := int(p.Cols[e]); j < i {
					lo64 += pairHash(j, i, p.Vals[e])
				} else {
					hi64 += pairHash(i, j, p.Vals[e])
				}
			}
		}
		below[b], above[b] = lo64, hi64
	})
	var sb, sa uint64
	for b := range below {
		sb += below[b]
		sa += above[b]
	}
	return sb == sa
}

// pairHash mixes a pair (a < b) and its value's bits, with the finaliser
// of SplitMix64 (Steele, Lea & Flood 2014, OOPSLA) applied twice.
func pairHash(a, b int, v float32) uint64 {
	return mix64(mix64(uint64(a)<<32|uint64(b)) ^ uint64(math.Float32bits(v)))
}

func mix64(x uint64) uint64 {
	x ^= x >> 30
	x *= 0xbf58476d1ce4e5b9
	x ^= x >> 27
	x *= 0x94d049bb133111eb
	return x ^ x>>31
}
