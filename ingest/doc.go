// Package ingest reads feature tables (Parquet, Arrow IPC file and stream, CSV
// and TSV, plain or gzip- or zstd-compressed) in chunks into a row-major float32
// matrix (core.Matrix), validates their values, carries id and label columns
// through, writes result tables as Parquet, and computes principal components.
//
// # Reading
//
// Read detects the format from the file's first and last bytes, selects the
// feature, id and label columns (Options), and fills the matrix chunk by chunk.
// A feature column is a number or a vector: a list, large list or fixed-size
// list of numbers of the same length in every row, which fills that many matrix
// columns. Every fault of the input is an *InputError whose one-line message
// names the file, and the column and 1-based row when they apply.
//
// A table may come in parts (OpenDataset): a directory of files, a glob pattern,
// or several paths, read one after the other into one matrix, as one table
// holding their rows in that order. The first part fixes the feature columns;
// every later part must have them (by name). Folder names of the form key=value
// (Hive's partitioned layout) become text columns that can be the id or the
// label, never features.
//
// Arrow IPC input is checked before Arrow's Go library sees it: the footer of a
// file and the message headers of a stream are read with the FlatBuffers
// accessors, and every length the library would allocate from (schema vectors,
// message metadata and body sizes, record batch blocks) must fit in the file.
// The library's readers size Go slices from those lengths themselves, outside any
// memory.Allocator, so a capped allocator alone cannot refuse a hostile file.
// Table.Hash fingerprints the matrix: the SHA-256 digest of D as a little-endian
// uint64 followed by the float32 values' little-endian bits in row-major order
// (Fingerprint computes it for a matrix made in memory).
//
// # Principal components
//
// FitPCA and ReadReduced compute the mean and covariance in float64 over blocks
// of PCABlockRows rows. Block b of n_b rows x_i has the mean and centred scatter
//
//	x̄_b = (1/n_b) Σ_i x_i,   M_b = Σ_i (x_i − x̄_b)(x_i − x̄_b)ᵀ
//
// (M_b = CᵀC for the centred block C, formed by BLAS dsyrk through gonum), and the
// blocks are merged in block order by the pairwise update of Chan, Golub & LeVeque
// ("Updating formulae and a pairwise algorithm for computing sample variances",
// Stanford CS report STAN-CS-79-773, 1979), of which Welford's one-row update is
// the case n_b = 1: for totals (n_a, x̄_a, M_a),
//
//	n = n_a + n_b,   δ = x̄_b − x̄_a,
//	x̄ = x̄_a + δ·n_b/n,   M = M_a + M_b + δδᵀ·n_a·n_b/n.
//
// The covariance is S = M/(N − 1), the denominator of gonum's stat.PC. Its
// eigen-decomposition S = V Λ Vᵀ is computed by gonum's mat.EigenSym (LAPACK's
// dsyev: reduction to tridiagonal form, then the implicit QL/QR algorithm; Golub &
// Van Loan, "Matrix Computations", chapter 8). The components are the eigenvectors
// of the k largest eigenvalues, in decreasing order; the variances are those
// eigenvalues, negative round-off clamped to 0. An eigenvector's sign is
// arbitrary, so each component is flipped if needed to make its entry of largest
// magnitude (the first such) positive. The score of row i on component c is
// y_ic = Σ_j (x_ij − x̄_j)·v_cj.
//
// # Wide tables
//
// Above RandomizedAbove columns the D×D covariance costs O(N·D²) time and
// O(D²) memory, so FitPCA and the reductions of Dataset.Read use randomised
// block Krylov iteration instead: the randomised range finder and power
// scheme of Halko, Martinsson & Tropp ("Finding structure with randomness",
// SIAM Review 53(2), 2011, algorithms 4.1 and 4.3) with the Rayleigh–Ritz
// step taken over every block computed, as in Halko, Martinsson, Shkolnisky &
// Tygert ("An algorithm for the principal component analysis of large data
// sets", SIAM J. Sci. Comput. 33(5), 2011). With S the covariance and Ω a
// D×ℓ Gaussian matrix (ℓ = k + 10, from a fixed seed), pass t over the rows
// computes
//
//	Z_t = S·Q_t = (1/(N−1)) Σ_i (x_i − x̄)·((x_i − x̄)ᵀ Q_t),
//
// where Q_0 is Ω made orthonormal and Q_{t+1} is Z_t made orthonormal to every
// earlier block (block Gram–Schmidt, twice). The first pass centres the rows
// on the mean of the first block of rows, s, and corrects afterwards:
// Σ (x−x̄)(x−x̄)ᵀQ = Σ (x−s)(x−s)ᵀQ − N·δ(δᵀQ) with δ = x̄ − s. After each pass
// the Rayleigh–Ritz step takes B = [Q_0 … Q_t], T = Bᵀ S B (from the stored
// products, symmetrised), its eigenpairs (θ_j, w_j) by gonum's mat.EigenSym, and
// the Ritz vectors v_j = B w_j: the components are the first k, the variances
// their θ_j. The iteration stops when Σ_{j≤k} θ_j grows by less than 3e-4
// (relative) in a pass and every well separated Ritz pair (θ_j at least 1.1
// times θ_{j+1} and 1.1 times below θ_{j−1}) has ‖S v_j − θ_j v_j‖ / gap_j ≤
// 5e-4, a bound on the sine of its angle to the exact component (Saad,
// "Numerical Methods for Large Eigenvalue Problems", 2011, theorem 3.6, with
// the gap to the neighbouring Ritz values) — or that bound no longer halves
// from one pass to the next (the floor the float32 products leave) — after
// 3 to 12 passes. Each pass
// costs O(N·D·ℓ) (two float32 matrix products per block of rows, by gonum's
// sgemm), the basis O(t·ℓ·D) memory. Checked against gonum's exact PCA in
// randpca_test.go.
//
// # Threads and bits
//
// Options.Threads and the threads arguments of FitPCA and Project bound the
// goroutines of the CSV parser and of the PCA (below 1 means 1; gonum's matrix
// products may use more goroutines of their own). Work is cut into blocks of
// fixed size (CSV: 1024 rows, PCA: PCABlockRows rows, randomised iteration:
// about a million values) by package par, each block writes only its own rows
// or its own partial result, and partial results are merged in block order, so
// the same input gives the same bits for any thread count and any chunk size.
//
// The package does not change process-wide state (no garbage collector calls,
// no GOMAXPROCS reads). See Read for what that means for peak memory.
package ingest
