package knn_test

import (
	"fmt"

	"nightjar/internal/core"
	"nightjar/knn"
)

// Six invented points on a line, in two groups of three: their exact
// neighbour graph, then the t-SNE input affinities P at perplexity 1.5
// (which needs k = ⌊3·1.5⌋ = 4 neighbours per row and at least 3·1.5+1 rows).
func Example() {
	x := core.Matrix{N: 6, D: 1, Data: []float32{0, 1, 3, 10, 11.5, 14}}
	perplexity := 1.5
	k := knn.Neighbours(perplexity, x.N)
	g, err := knn.Exact(x, k, knn.ExactOptions{Options: knn.Options{Metric: knn.Euclidean}})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println("k =", k)
	fmt.Println("row 0 neighbours:", g.Index[0:k], "d²:", g.Dist2[0:k])
	fmt.Println("row 4 neighbours:", g.Index[4*k:5*k], "d²:", g.Dist2[4*k:5*k])

	P, err := knn.Affinity(g, perplexity, 1)
	if err != nil {
		fmt.Println(err)
		return
	}
	var sum float64
	for i := 0; i < P.N; i++ {
		for pos := P.Offsets[i]; pos < P.Offsets[i+1]; pos++ {
			sum += float64(P.Vals[pos])
		}
	}
	fmt.Printf("P has %d entries, sum %.6f\n", len(P.Vals), sum)
	fmt.Print("P row 0:")
	for pos := P.Offsets[0]; pos < P.Offsets[1]; pos++ {
		fmt.Printf(" (%d) %.4f", P.Cols[pos], P.Vals[pos])
	}
	fmt.Println()
	// Output:
	// k = 4
	// row 0 neighbours: [1 2 3 4] d²: [1 9 100 132.25]
	// row 4 neighbours: [3 5 2 1] d²: [2.25 6.25 72.25 110.25]
	// P has 28 entries, sum 1.000000
	// P row 0: (1) 0.1433 (2) 0.0234 (3) 0.0000 (4) 0.0000
}

// ExampleCalibrate: three neighbours at squared distances 0, 1 and 2, and the
// perplexity (7/4)·2^(4/7) whose β is ln 2 (worked by hand in the tests).
func ExampleCalibrate() {
	p := make([]float64, 3)
	beta, h, _ := knn.Calibrate(p, []float32{0, 1, 2}, 2.600515)
	fmt.Printf("β = %.4f, H = %.4f, p = %.4f\n", beta, h, p)
	// Output:
	// β = 0.6931, H = 0.9557, p = [0.5714 0.2857 0.1429]
}

// The same six points with uniform affinities over each row's nearest
// neighbour (k = 1): rows 0 and 1 are each other's nearest, so
// p_01 = (1 + 1)/(2·6) = 1/6; row 2's nearest is row 1, whose own nearest is
// row 0, so p_12 = (1 + 0)/(2·6) = 1/12. Likewise rows 3, 4 and 5.
func ExampleUniformAffinity() {
	x := core.Matrix{N: 6, D: 1, Data: []float32{0, 1, 3, 10, 11.5, 14}}
	g, err := knn.Exact(x, 1, knn.ExactOptions{})
	if err != nil {
		fmt.Println(err)
		return
	}
	P, err := knn.UniformAffinity(g, 1)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("P has %d entries\n", len(P.Vals))
	for _, i := range []int{1, 4} {
		fmt.Printf("P row %d:", i)
		for pos := P.Offsets[i]; pos < P.Offsets[i+1]; pos++ {
			fmt.Printf(" (%d) %.4f", P.Cols[pos], P.Vals[pos])
		}
		fmt.Println()
	}
	// Output:
	// P has 8 entries
	// P row 1: (0) 0.1667 (2) 0.0833
	// P row 4: (3) 0.1667 (5) 0.0833
}
