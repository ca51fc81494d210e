// Package score measures how well a map keeps the structure of its input: the
// neighbourhood scores trustworthiness, continuity and neighbourhood
// preservation, the k-nearest-neighbour accuracy of labels, and the rank
// correlation of group centroid distances, on a seeded sample of rows (Sample).
//
// Distances come from a Space: InputSpace for the rows of the input matrix
// and MapSpace for a map, both with the squared Euclidean distance, or
// CosineSpace for input rows compared by direction, with the cosine distance
// 1 − ⟨x_i, x_j⟩/(‖x_i‖·‖x_j‖); all accumulated in float64. The neighbourhood
// and label scores use only the order of the distances from each row, with
// equal distances ordered by row index, so they are exact and well defined; a
// Space with another metric changes the order, not the scores.
//
// # Neighbourhood scores
//
// For a row i, let r(i, j) be the rank of row j by input distance from i and
// r̂(i, j) its rank by map distance (nearest = 1, i itself left out), and let
// U_k(i) hold the rows among i's k nearest in the map but not in the input, V_k(i)
// those among i's k nearest in the input but not in the map. Over the sampled rows
// S of N, trustworthiness and continuity (Venna & Kaski 2001, "Neighborhood
// preservation in nonlinear projection methods: an experimental study", ICANN,
// LNCS 2130) are
//
//	T(k) = 1 − 2/(|S|·k·(2N − 3k − 1)) · Σ_{i∈S} Σ_{j∈U_k(i)} (r(i, j) − k)
//	C(k) = 1 − 2/(|S|·k·(2N − 3k − 1)) · Σ_{i∈S} Σ_{j∈V_k(i)} (r̂(i, j) − k)
//
// With S = all rows the normaliser is the published 2/(N·k·(2N − 3k − 1)), valid
// for k < N/2; on a sample only N·k becomes |S|·k. Neighbourhood preservation is
// the mean share of kept neighbours,
//
//	P(k) = (1/|S|) Σ_{i∈S} |kNN_in(i) ∩ kNN_map(i)| / k.
//
// A row's k nearest are found with a bounded heap and the ranks of the few rows in
// U_k(i) or V_k(i) by one pass over all N distances, so each sampled row costs
// O(N·(D + dims)).
//
// # Labels and groups
//
// LabelAccuracy is leave-one-out k-nearest-neighbour classification (Cover & Hart
// 1967, "Nearest neighbor pattern classification", IEEE Trans. Inf. Theory 13):
// each sampled row is predicted by the majority label of its k nearest other rows,
// a tie going to the tied label with the nearest member, and the score is the
// share predicted right.
//
// CentroidRank compares the layout of the labelled groups: the Euclidean
// distances between every two group centroids (means of the group's rows) in the
// input and in the map (CentroidRankUnit: the centroids of the rows scaled to
// unit length, for inputs compared by direction), correlated by Kendall's rank
// correlation (Kendall 1938,
// "A new measure of rank correlation", Biometrika 30) with gonum's stat.Kendall:
//
//	τ = (concordant − discordant pairs of pairs) / (number of pairs of pairs).
//
// # Threads and bits
//
// The sampled rows are cut into blocks of scoreBlock rows run by par.Map on up to
// threads goroutines (below 1 means 1); each block returns integer sums, added in
// block order, so the scores do not depend on the thread count.
package score
