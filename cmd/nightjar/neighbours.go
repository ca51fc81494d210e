package main

import (
	"fmt"

	"nightjar/knn"
)

// approxGraph builds an approximate neighbour graph with one progress bar per
// phase: "hnsw" takes HNSW candidates and refines them by NN-descent;
// "descent" runs NN-descent from random neighbour lists.
func (j *job) approxGraph(method string, k int, opt knn.Options) (*knn.Graph, error) {
	ao := knn.DefaultApprox(j.table.N, k)
	ao.Options = opt
	ao.Seed = j.s.Seed
	var current string
	var bar func(done, total int64)
	ao.PhaseProgress = func(phase string, done, total int64) {
		if phase != current {
			current = phase
			bar = j.ui.phase("neighbours: "+phase, total)
		}
		bar(done, total)
	}
	build := knn.Approx
	if method == "descent" {
		build = knn.Descent
	}
	g, st, err := build(j.table.Matrix, k, ao)
	j.ui.done()
	if err != nil {
		return nil, fmt.Errorf("approximate neighbours: %w", err)
	}
	if method == "hnsw" {
		j.rep.Phases["neighbours_build"] = st.BuildSeconds
		j.rep.Phases["neighbours_query"] = st.QuerySeconds
	}
	for i, s := range st.PassSeconds {
		j.rep.Phases[fmt.Sprintf("neighbours_refine_%d", i+1)] = s
	}
	return g, nil
}
