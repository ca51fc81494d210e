// Package knn builds k-nearest-neighbour graphs (exact, and approximate through
// HNSW with NN-descent refinement), measures their recall, and turns a graph
// into the sparse symmetric t-SNE input affinities P calibrated by perplexity.
package knn

// Graph is a k-nearest-neighbour graph over N rows. Row i's neighbours are
// Index[i*K : (i+1)*K], nearest first, with squared distances in the same
// positions of Dist2. A row is never its own neighbour.
type Graph struct {
	N, K  int
	Index []int32
	Dist2 []float32
}

// CSR is a sparse N×N matrix in compressed sparse row form: the entries of row
// i are Cols[Offsets[i]:Offsets[i+1]] with values Vals[...] at the same positions,
// columns ascending within a row. len(Offsets) == N+1.
type CSR struct {
	N       int
	Offsets []int64
	Cols    []int32
	Vals    []float32
}
