// Package knn finds the k nearest neighbours of every row of a table and
// turns the neighbour graph into the sparse, symmetric input affinities P of
// t-SNE, calibrated by perplexity. It also measures how good an approximate
// graph is (recall).
//
// # Neighbours
//
// Distances are squared Euclidean, d²_ij = ‖x_i − x_j‖². Under the Cosine
// metric they are taken between L2-normalised rows, where
// ‖a/‖a‖ − b/‖b‖‖² = 2 − 2·cos(a, b). A row is never its own neighbour;
// lists are sorted by (distance, row number).
//
// For a perplexity u, each row needs
//
//	k = min(N − 1, ⌊3·u⌋)
//
// neighbours (van der Maaten 2014, "Accelerating t-SNE using tree-based
// algorithms", JMLR 15, §4.1): Neighbours computes it, CheckPerplexity
// refuses a u with 3·u > N − 1.
//
// Three searches find them; Build runs one of them with its defaults:
//
//   - Exact: every pair, O(N²·D), the reference; limited to ExactLimit rows.
//   - Descent: NN-descent (Dong, Charikar & Li 2011, "Efficient k-nearest
//     neighbor graph construction for generic similarity measures", WWW),
//     which improves every row's list by joining the neighbours of its
//     neighbours, started from the leaves of random projection trees
//     (Dasgupta & Freund 2008, "Random projection trees and low dimensional
//     manifolds", STOC): a tree splits the rows by the hyperplane bisecting
//     two random rows until a leaf holds at most a few k rows, and rows
//     sharing a leaf are likely near. The same seed gives the same bits for
//     any number of threads.
//   - HNSW: the same refinement started from the results of a hierarchical
//     navigable small world index (Malkov & Yashunin, "Efficient and
//     robust approximate nearest neighbor search using Hierarchical
//     Navigable Small World graphs", IEEE TPAMI 42(4), 2020, online 2018) built
//     on a sample of the rows. Its start is not bit-reproducible.
//
// Refinement stops when the estimated recall reaches a goal, measured on a
// sample S of rows against the exact search:
//
//	recall@k = (1/|S|) · Σ_{i∈S} |A(i) ∩ E(i)| / k
//
// where A(i) is row i's approximate list and E(i) its exact one. Recall
// computes the same figure for any graph.
//
// # Affinities
//
// Row i's conditional probabilities over its k neighbours are
//
//	p_{j|i} = exp(−β_i·d²_ij) / Σ_{l ∈ kNN(i)} exp(−β_i·d²_il),  β_i = 1/(2σ_i²),
//
// with β_i found by binary search so that the perplexity of P_i matches the
// one asked for, 2^{H(P_i)} = u with H(P_i) = −Σ_j p_{j|i}·log₂ p_{j|i}
// (equivalently, in natural logarithms, −Σ p ln p = ln u): van der Maaten &
// Hinton 2008, "Visualizing data using t-SNE", JMLR 9, §2. Calibrate does
// this for one row. Affinity then symmetrises,
//
//	p_ij = (p_{j|i} + p_{i|j}) / 2N
//
// (same paper, §3), into an N×N matrix in compressed sparse row form that
// sums to 1.
//
// UniformAffinity skips the calibration: p_{j|i} = 1/k over row i's k
// neighbours, symmetrised the same way, so every entry is 1/(2Nk) or, for
// mutual neighbours, 1/(Nk). Böhm, Berens & Kobak ("Attraction-repulsion
// spectrum in neighbor embeddings", JMLR 23, 2022) find such affinities
// over a small k (15; from memory) give t-SNE maps close to perplexity
// 30's, on a sixth of the neighbours; CheckNeighbours refuses a k above N − 1.
//
// # Threads and memory
//
// Every parallel loop runs over fixed-size blocks of rows (internal/par), so
// results do not depend on the thread count; a thread count below 1 means 1.
// The package changes no process-wide setting: a caller that watches peak
// memory may lower GOGC around a large approximate search (see Build for
// the measurement).
package knn
