package knn_test

import (
	"slices"
	"testing"

	"nightjar/knn"
)

// TestDescentGrowsStart: with a start recall goal its first trees miss, the
// start grows by TreeStep trees at a time, and the graph is the same bits
// as a start of that many trees built at once; with a goal the first trees
// meet, the start keeps them.
func TestDescentGrowsStart(t *testing.T) {
	x := knn.ClusteredRows(3000, 4)
	const k = 20
	run := func(trees, maxTrees int, goal float64) (*knn.Stats, []int32, []float32) {
		opt := knn.DefaultDescent(k)
		opt.Trees, opt.MaxTrees, opt.StartRecall = trees, maxTrees, goal
		opt.LeafRows = k + 1 // small leaves: a poor start
		opt.Threads, opt.Seed = 2, 3
		g, st, err := knn.Descent(x, k, opt)
		if err != nil {
			t.Fatal(err)
		}
		return &st, g.Index, g.Dist2
	}
	grown, gi, gd := run(1, 9, 0.999)
	if grown.Trees != 9 || grown.PassRecall[0] >= 0.999 {
		t.Fatalf("grew to %d trees (start recall %v), want 1 + 2·%d = 9 with the goal missed", grown.Trees, grown.PassRecall, knn.TreeStep)
	}
	once, oi, od := run(9, 9, 0)
	if once.Trees != 9 || !slices.Equal(gi, oi) || !slices.Equal(gd, od) {
		t.Fatalf("9 trees at once (%d used) differ from 1 tree grown to 9", once.Trees)
	}
	if once.PassRecall[0] != grown.PassRecall[0] {
		t.Fatalf("start recall %v at once, %v grown", once.PassRecall[0], grown.PassRecall[0])
	}
	met, _, _ := run(4, 24, 0.05)
	if met.Trees != 4 {
		t.Fatalf("a goal the first 4 trees meet grew the start to %d trees", met.Trees)
	}
}
