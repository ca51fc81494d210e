package score

import (
	"fmt"

	"nightjar/internal/par"
)

// NeighbourScores holds the neighbourhood scores of a map at one k, computed
// on a sample of rows.
type NeighbourScores struct {
	K, Rows         int     // neighbourhood size and number of sampled rows
	Trustworthiness float64 // see Trustworthiness
	Continuity      float64 // see Continuity
	Preservation    float64 // see Preservation
	// LabelMap and LabelInput are LabelAccuracy at the same k in the map
	// and in the input, when NeighbourhoodLabels was given labels (else 0).
	LabelMap, LabelInput float64
}

// Neighbourhood computes trustworthiness, continuity and neighbourhood
// preservation of the map out for the input in, in one pass (they share the
// distance computations, which are the whole cost: O(|S|·N·(D + dims))). See
// Trustworthiness for the definitions, the arguments and the panics.
func Neighbourhood(in, out Space, k int, sample []int32, threads int) NeighbourScores {
	return NeighbourhoodLabels(in, out, k, sample, threads, nil)
}

// NeighbourhoodLabels is Neighbourhood that also gives, when labels is not
// nil, LabelAccuracy(out, labels, k, …) and LabelAccuracy(in, labels, k, …)
// from the same k nearest rows, the same values without computing every
// distance twice. It panics as Neighbourhood does, and unless labels is nil
// or has one entry per point.
func NeighbourhoodLabels(in, out Space, k int, sample []int32, threads int, labels []string) NeighbourScores {
	n := in.Len()
	if labels != nil && len(labels) != n {
		panic(fmt.Sprintf("score: %d labels for %d points", len(labels), n))
	}
	if out.Len() != n {
		panic(fmt.Sprintf("score: the map has %d points, the input %d", out.Len(), n))
	}
	if k < 1 || 2*k >= n {
		panic(fmt.Sprintf("score: k = %d, need 1 ≤ k < N/2 = %d/2", k, n))
	}
	rows := sampleRows(sample, n)

	type part struct{ trust, cont, shared, mapRight, inRight int64 }
	parts := par.Map(len(rows), scoreBlock, threads, func() func(lo, hi int) part {
		w := newRankWork(n, k)
		votes := map[string]int{}
		return func(lo, hi int) (p part) {
			blk := rows[lo:hi]
			distRows(in, blk, w.din[:len(blk)])
			for r, i := range blk {
				din := w.din[r]
				out.DistRow(int(i), w.dout)
				kin := w.nearest(din, int(i), w.kin)
				kout := w.nearest(w.dout, int(i), w.kout)
				if labels != nil {
					if majority(kout, labels, votes) == labels[i] {
						p.mapRight++
					}
					if majority(kin, labels, votes) == labels[i] {
						p.inRight++
					}
				}
				// U: in the map's k nearest, not in the input's; ranked in input space.
				w.targets = setMinus(w.targets[:0], kout, kin)
				p.trust += w.rankSum(din, int(i), w.targets) - int64(k)*int64(len(w.targets))
				// V: in the input's k nearest, not in the map's; ranked in map space.
				w.targets = setMinus(w.targets[:0], kin, kout)
				p.cont += w.rankSum(w.dout, int(i), w.targets) - int64(k)*int64(len(w.targets))
				p.shared += int64(k - len(w.targets))
			}
			return p
		}
	})
	var trust, cont, shared, mapRight, inRight int64
	for _, p := range parts { // block order; integer sums, exact anyway
		trust += p.trust
		cont += p.cont
		shared += p.shared
		mapRight += p.mapRight
		inRight += p.inRight
	}
	s := float64(len(rows))
	norm := 2 / (s * float64(k) * (2*float64(n) - 3*float64(k) - 1))
	ns := NeighbourScores{
		K: k, Rows: len(rows),
		Trustworthiness: 1 - norm*float64(trust),
		Continuity:      1 - norm*float64(cont),
		Preservation:    float64(shared) / (s * float64(k)),
	}
	if labels != nil {
		ns.LabelMap, ns.LabelInput = float64(mapRight)/s, float64(inRight)/s
	}
	return ns
}

// Trustworthiness returns T(k) of the map out for the input in (see the package
// documentation for the formula): 1 when no map neighbour is a stranger in the
// input; a random map scores about 0.5.
//
// in and out hold the same N points (InputSpace, MapSpace); sample lists the
// rows i to average over (nil = all rows; see Sample); threads is the number of
// goroutines (below 1 means 1). Ranks are exact: for each sampled row every
// distance in both spaces is computed, at a cost of O(|S|·N·D). Equal distances
// are ordered by row index, so the result is well defined and does not depend on
// threads. Trustworthiness panics unless 1 ≤ k < N/2 (the normaliser's range of
// validity), both spaces have N points, and every sampled row is in [0, N).
func Trustworthiness(in, out Space, k int, sample []int32, threads int) float64 {
	return Neighbourhood(in, out, k, sample, threads).Trustworthiness
}

// Continuity returns C(k) of the map out for the input in: the trustworthiness
// formula with the roles of input and map swapped (see the package
// documentation). It measures how many true neighbours the map tore away.
// Arguments, cost, ties and panics as for Trustworthiness.
func Continuity(in, out Space, k int, sample []int32, threads int) float64 {
	return Neighbourhood(in, out, k, sample, threads).Continuity
}

// Preservation returns the neighbourhood preservation at k: the mean over the
// sampled rows i of |kNN_in(i) ∩ kNN_map(i)| / k, the share of each row's k
// nearest input neighbours that are also among its k nearest in the map (1 =
// every neighbourhood kept; a random map scores about k/N). Arguments, cost, ties
// and panics as for Trustworthiness.
func Preservation(in, out Space, k int, sample []int32, threads int) float64 {
	return Neighbourhood(in, out, k, sample, threads).Preservation
}
