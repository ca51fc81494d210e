package main

import (
	"fmt"
	"strings"

	"nightjar/knn"
)

// approxGraph builds an approximate neighbour graph with one progress bar per
// phase: "hnsw" takes HNSW candidates and refines them by NN-descent;
// "descent" runs NN-descent from the leaves of random projection trees. Both
// stop refining at the recall goal.
func (j *job) approxGraph(method string, k int, opt knn.Options) (*knn.Graph, error) {
	ao := knn.DefaultApprox(j.table.N, k)
	ao.Options = opt
	ao.Seed = j.s.Seed
	ao.StopRecall = j.s.RecallGoal
	// Nothing else reads the table during this phase: let Descent reorder
	// it in place rather than copy it (200 MB at 1,000,000 × 50).
	ao.InPlace = true
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
	} else {
		j.rep.Phases["neighbours_trees"] = st.BuildSeconds
	}
	j.rep.Phases["neighbours_probe"] = st.ProbeSeconds
	for i, s := range st.PassSeconds {
		j.rep.Phases[fmt.Sprintf("neighbours_refine_%d", i+1)] = s
	}
	j.rep.Neighbours.Passes, j.rep.Neighbours.PassRecall = &st.Passes, st.PassRecall
	if len(st.PassRecall) > 0 {
		est := make([]string, len(st.PassRecall))
		for i, r := range st.PassRecall {
			est[i] = fmt.Sprintf("%.4f", r)
		}
		j.ui.note("neighbours: %d refinement passes; estimated recall at the start and after each: %s (goal %g)",
			st.Passes, strings.Join(est, ", "), ao.StopRecall)
	}
	return g, nil
}
