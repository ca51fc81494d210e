package score

import (
	"math"
	"slices"

	"gonum.org/v1/gonum/stat"

	"nightjar/internal/core"
)

// CentroidRank measures how much of the layout of labelled groups a map
// keeps: Kendall's rank correlation τ (gonum stat.Kendall) between the
// distances of every pair of group centroids in the input and the same
// distances in the map. 1 means the groups are in the same distance order,
// 0 no relation. Kobak & Berens 2019 (Nat. Commun. 10:5416) score global
// structure in this spirit, with rank correlations of centroid distances
// (from memory). Local scores (trustworthiness, label accuracy) do not see
// it: a map can keep every neighbourhood and still scatter the groups.
//
// x is N×D, y is N×dims row-major, labels has N entries. Rows with an empty
// label are left out. It returns NaN with fewer than 3 groups. It panics if
// the lengths disagree.
func CentroidRank(x core.Matrix, y []float64, dims int, labels []string) float64 {
	return centroidRank(x, y, dims, labels, false)
}

// CentroidRankUnit is CentroidRank for inputs compared by direction (the
// cosine distance): the input centroids are the means of the rows scaled to
// unit length (rows of zeros left as they are), compared by the Euclidean
// distance, which for unit vectors orders pairs as the cosine distance does.
func CentroidRankUnit(x core.Matrix, y []float64, dims int, labels []string) float64 {
	return centroidRank(x, y, dims, labels, true)
}

func centroidRank(x core.Matrix, y []float64, dims int, labels []string, unit bool) float64 {
	if len(labels) != x.N || len(y) != x.N*dims {
		panic("score.CentroidRank: needs N labels and N×dims map values")
	}
	var names []string
	group := map[string]int{}
	for _, l := range labels {
		if _, ok := group[l]; !ok && l != "" {
			group[l] = 0
			names = append(names, l)
		}
	}
	slices.Sort(names) // a fixed order of groups
	for g, l := range names {
		group[l] = g
	}
	m := len(names)
	if m < 3 {
		return math.NaN()
	}
	cx := make([]float64, m*x.D)
	cy := make([]float64, m*dims)
	count := make([]float64, m)
	for i, l := range labels {
		if l == "" {
			continue
		}
		g := group[l]
		count[g]++
		scale := 1.0
		if unit {
			var ss float64
			for _, v := range x.Row(i) {
				ss += float64(v) * float64(v)
			}
			if ss > 0 {
				scale = 1 / math.Sqrt(ss)
			}
		}
		for c, v := range x.Row(i) {
			cx[g*x.D+c] += float64(v) * scale
		}
		for c := 0; c < dims; c++ {
			cy[g*dims+c] += y[i*dims+c]
		}
	}
	for g := range m {
		for c := 0; c < x.D; c++ {
			cx[g*x.D+c] /= count[g]
		}
		for c := 0; c < dims; c++ {
			cy[g*dims+c] /= count[g]
		}
	}
	dist := func(v []float64, d, a, b int) float64 {
		var s float64
		for c := 0; c < d; c++ {
			t := v[a*d+c] - v[b*d+c]
			s += t * t
		}
		return math.Sqrt(s)
	}
	var dx, dy []float64
	for a := 0; a < m; a++ {
		for b := a + 1; b < m; b++ {
			dx = append(dx, dist(cx, x.D, a, b))
			dy = append(dy, dist(cy, dims, a, b))
		}
	}
	return stat.Kendall(dx, dy, nil)
}
