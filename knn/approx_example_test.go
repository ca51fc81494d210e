package knn_test

import (
	"fmt"
	"math/rand/v2"

	"nightjar/internal/core"
	"nightjar/knn"
)

// fiveGroups returns 2,000 invented rows of 8 values in five groups.
func fiveGroups() core.Matrix {
	r := rand.New(rand.NewPCG(1, 2))
	x := core.Matrix{N: 2000, D: 8, Data: make([]float32, 2000*8)}
	for i := range x.Data {
		x.Data[i] = float32(r.NormFloat64()) + float32(i/8%5)*4
	}
	return x
}

// Approximate neighbours of 2,000 invented rows by the method of choice for
// large tables, checked against the exact search on a sample.
func ExampleBuild() {
	x := fiveGroups()
	opt := knn.BuildOptions{Options: knn.Options{Threads: 2}, Seed: 1, RecallGoal: 0.99}
	g, st, err := knn.Build(x, 15, knn.ByDescent, opt)
	if err != nil {
		panic(err)
	}
	recall, _, err := knn.Recall(g, x, 200, 1, opt.Options)
	if err != nil {
		panic(err)
	}
	fmt.Println(g.N, g.K, recall >= 0.95, st.Passes <= 6)
	// Output: 2000 15 true true
}

// Approximate neighbours from an HNSW start, with its own options.
func ExampleHNSW() {
	x := fiveGroups()
	opt := knn.DefaultHNSW(15)
	g, _, err := knn.HNSW(x, 15, opt)
	if err != nil {
		panic(err)
	}
	recall, _, err := knn.Recall(g, x, 200, 1, knn.Options{})
	if err != nil {
		panic(err)
	}
	fmt.Println(g.N, g.K, recall >= 0.95)
	// Output: 2000 15 true
}

// Refine improves an existing graph in place, here one of random neighbours.
func ExampleRefine() {
	r := rand.New(rand.NewPCG(3, 4))
	const n, d, k = 1000, 4, 10
	x := core.Matrix{N: n, D: d, Data: make([]float32, n*d)}
	for i := range x.Data {
		x.Data[i] = float32(r.NormFloat64())
	}
	g := &core.Graph{N: n, K: k, Index: make([]int32, n*k), Dist2: make([]float32, n*k)}
	for i := 0; i < n; i++ {
		seen := map[int]bool{i: true}
		for j := 0; j < k; j++ {
			v := r.IntN(n)
			for seen[v] {
				v = r.IntN(n)
			}
			seen[v] = true
			g.Index[i*k+j] = int32(v)
		}
	}
	before, _, _ := knn.Recall(g, x, n, 1, knn.Options{})
	opt := knn.DefaultRefine()
	opt.MaxPasses = 10 // a random start needs more passes than a tree start
	st, err := knn.Refine(g, x, opt)
	if err != nil {
		panic(err)
	}
	after, _, _ := knn.Recall(g, x, n, 1, knn.Options{})
	fmt.Println(before < 0.1, after > 0.95, st.Passes > 0)
	// Output: true true true
}
