package score

import (
	"fmt"

	"nightjar/internal/par"
)

// LabelAccuracy returns the leave-one-out k-nearest-neighbour accuracy of labels
// in the space s (a map, MapSpace, or the input, InputSpace): for each sampled
// row i, its k nearest other rows vote with their labels, and i counts as right
// when the winning label is its own. Ties between labels with the same number of
// votes go to the label of the nearest neighbour among the tied labels (equal
// distances ordered by row index). The result is the share of sampled rows
// predicted right, in [0, 1].
//
// labels has one entry per point; sample lists the rows to score (nil = all);
// threads is the number of goroutines (below 1 means 1; the result does not
// depend on it). Cost O(|S|·N·D). LabelAccuracy panics unless len(labels) =
// s.Len(), 1 ≤ k < s.Len() and every sampled row is in range.
func LabelAccuracy(s Space, labels []string, k int, sample []int32, threads int) float64 {
	n := s.Len()
	if len(labels) != n {
		panic(fmt.Sprintf("score.LabelAccuracy: %d labels for %d points", len(labels), n))
	}
	if k < 1 || k >= n {
		panic(fmt.Sprintf("score.LabelAccuracy: k = %d, need 1 ≤ k < N = %d", k, n))
	}
	rows := sampleRows(sample, n)
	parts := par.Map(len(rows), scoreBlock, threads, func() func(lo, hi int) int64 {
		w := newRankWork(n, k)
		votes := map[string]int{}
		return func(lo, hi int) (right int64) {
			blk := rows[lo:hi]
			distRows(s, blk, w.din[:len(blk)])
			for r, i := range blk {
				if majority(w.nearest(w.din[r], int(i), w.kin), labels, votes) == labels[i] {
					right++
				}
			}
			return right
		}
	})
	var right int64
	for _, p := range parts {
		right += p
	}
	return float64(right) / float64(len(rows))
}

// majority returns the label with the most votes among the neighbours nb
// (nearest first); a tie goes to the tied label with the nearest member. votes
// is scratch space.
func majority(nb []int32, labels []string, votes map[string]int) string {
	clear(votes)
	best, bestVotes := "", 0
	for _, j := range nb {
		votes[labels[j]]++
	}
	// scanning nearest first, the first label to reach the top count is the
	// tied label with the nearest member
	for _, j := range nb {
		if v := votes[labels[j]]; v > bestVotes {
			best, bestVotes = labels[j], v
		}
	}
	return best
}
