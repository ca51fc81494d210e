package knn

import (
	"fmt"
	"slices"

	"nightjar/internal/core"
	"nightjar/internal/par"
)

// Recall measures how many of an approximate graph's neighbours are the true
// ones: recall@k, the mean over sampled rows i of |approx(i) ∩ exact(i)| / k,
// where exact(i) is row i's exact k nearest (ExactRows under opt.Metric, ties
// by lower index). The rows are SampleRows(N, sample, seed); rows is how many
// were used (N when sample ≥ N). The cost is rows·N·D.
//
// Preconditions: g made for the rows of x (g.N == x.N, len(g.Index) == N·K,
// 1 ≤ K ≤ N−1); sample ≥ 1. Otherwise an error is returned.
//
// A tie at the k-th distance can make a correct approximate neighbour count
// as a miss (the exact list keeps the lower index); with continuous data this
// does not happen.
func Recall(g *core.Graph, x core.Matrix, sample int, seed uint64, opt Options) (recall float64, rows int, err error) {
	if g == nil || g.N != x.N || g.K < 1 || len(g.Index) != g.N*g.K {
		return 0, 0, fmt.Errorf("recall: graph does not match the %d-row table", x.N)
	}
	if sample < 1 {
		return 0, 0, fmt.Errorf("recall: sample size %d must be at least 1", sample)
	}
	sel := SampleRows(x.N, sample, seed)
	idx, _, err := ExactRows(x, sel, g.K, ExactOptions{Options: opt})
	if err != nil {
		return 0, 0, fmt.Errorf("recall: %w", err)
	}
	return probeRecall(g, sel, idx), len(sel), nil
}

// sampleStream is the PCG stream of SampleRows; callers of par.Sample with
// other purposes use other streams.
const sampleStream = 0x9e3779b97f4a7c15

// SampleRows returns min(sample, n) distinct row indices in [0, n), in
// ascending order, drawn uniformly without replacement: par.Sample with a
// stream of its own, so the same (n, sample, seed) always gives the same
// rows. These are the rows Recall measures. sample ≥ n returns every row; sample ≤ 0 returns none. It panics if n < 0 or
// n > 2³¹.
func SampleRows(n, sample int, seed uint64) []int32 {
	return par.Sample(n, sample, seed, sampleStream)
}

// probeSeed is mixed into RefineOptions.Seed to draw the rows on which
// refinement estimates its recall, so that they are not the rows of a later
// Recall check with the same seed.
const probeSeed = 0x7e1a5b3c9d2f4e61

// stopProbe returns the rows on which refinement estimates its recall,
// SampleRows(N, size, seed^probeSeed), and their exact k nearest neighbours
// (probe-major, k each) among the rows of x, which are already normalised
// for the metric: Euclidean order on them is the metric's order.
func stopProbe(x core.Matrix, k, size int, seed uint64, threads int) (probe, truth []int32, err error) {
	probe = SampleRows(x.N, size, seed^probeSeed)
	truth, _, err = ExactRows(x, probe, k, ExactOptions{Options: Options{Threads: threads}})
	return probe, truth, err
}

// probeRecall returns the recall of g on the rows probe, whose exact
// neighbour lists are truth (len(probe)·g.K entries, probe-major).
func probeRecall(g *core.Graph, probe, truth []int32) float64 {
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
