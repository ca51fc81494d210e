package knn

import (
	"fmt"
	"math/rand/v2"
	"slices"

	"nightjar/ingest"
)

// Recall measures how many of an approximate graph's neighbours are the true
// ones: the mean over sampled rows i of |approx(i) ∩ exact(i)| / k, where
// exact(i) is row i's exact k nearest (ExactRows under opt.Metric, ties by
// lower index). The rows are SampleRows(N, sample, seed); rows is how many
// were used (N when sample ≥ N). The cost is rows·N·D.
//
// Preconditions: g made for the rows of x (g.N == x.N, len(g.Index) == N·K,
// 1 ≤ K ≤ N−1); sample ≥ 1. Otherwise an error is returned.
//
// A tie at the k-th distance can make a correct approximate neighbour count
// as a miss (the exact list keeps the lower index); with continuous data this
// does not happen.
func Recall(g *Graph, x ingest.Matrix, sample int, seed uint64, opt Options) (recall float64, rows int, err error) {
	if g == nil || g.N != x.N || g.K < 1 || len(g.Index) != g.N*g.K {
		return 0, 0, fmt.Errorf("recall: graph does not match the %d-row table", x.N)
	}
	if sample < 1 {
		return 0, 0, fmt.Errorf("recall: sample size %d must be at least 1", sample)
	}
	sel := SampleRows(x.N, sample, seed)
	idx, _, err := ExactRows(x, sel, g.K, opt)
	if err != nil {
		return 0, 0, fmt.Errorf("recall: %w", err)
	}
	return probeRecall(g, sel, idx), len(sel), nil
}

// probeRecall returns the recall of g on the rows probe, whose exact
// neighbour lists are truth (len(probe)·g.K entries, probe-major).
func probeRecall(g *Graph, probe, truth []int32) float64 {
	k := g.K
	var hits int64
	a := make([]int32, k)
	b := make([]int32, k)
	for q, r := range probe {
		copy(a, g.Index[int(r)*k:(int(r)+1)*k])
		copy(b, truth[q*k:(q+1)*k])
		hits += int64(countCommon(a, b))
	}
	return float64(hits) / (float64(len(probe)) * float64(k))
}

// countCommon returns the number of values present in both a and b, counting a
// value repeated in a at most as often as it appears in b. It sorts a and b.
func countCommon(a, b []int32) int {
	slices.Sort(a)
	slices.Sort(b)
	n, i, j := 0, 0, 0
	for i < len(a) && j < len(b) {
		switch {
		case a[i] < b[j]:
			i++
		case a[i] > b[j]:
			j++
		default:
			n++
			i++
			j++
		}
	}
	return n
}

// SampleRows returns min(sample, n) distinct row indices in [0, n), in
// ascending order, drawn uniformly without replacement by a PCG generator
// seeded with seed (Floyd's algorithm, Bentley & Floyd 1987, CACM 30(9)).
// The same (n, sample, seed) always gives the same rows. sample ≥ n returns
// every row; sample ≤ 0 returns none.
func SampleRows(n, sample int, seed uint64) []int32 {
	if sample >= n {
		out := make([]int32, n)
		for i := range out {
			out[i] = int32(i)
		}
		return out
	}
	if sample <= 0 {
		return []int32{}
	}
	r := rand.New(rand.NewPCG(seed, 0x9e3779b97f4a7c15))
	seen := make(map[int32]struct{}, sample)
	out := make([]int32, 0, sample)
	for j := n - sample; j < n; j++ {
		t := int32(r.IntN(j + 1))
		if _, ok := seen[t]; ok {
			t = int32(j)
		}
		seen[t] = struct{}{}
		out = append(out, t)
	}
	slices.Sort(out)
	return out
}
