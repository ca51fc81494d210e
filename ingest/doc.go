// Package ingest reads feature tables (Parquet, Arrow IPC file and stream, CSV) in
// chunks into a row-major float32 matrix (core.Matrix), validates their values,
// carries id and label columns through, writes result tables as Parquet, and
// computes principal components.
//
// # Reading
//
// Read detects the format from the file's first and last bytes, selects the
// feature, id and label columns (Options), and fills the matrix chunk by chunk.
// Every fault of the input is an *InputError whose one-line message names the
// file, and the column and 1-based row when they apply.
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
// # Threads and bits
//
// Options.Threads and the threads arguments of FitPCA and Project bound the
// goroutines of the CSV parser and of the PCA (below 1 means 1). Work is cut into
// blocks of fixed size (CSV: 1024 rows, PCA: PCABlockRows rows) by package par,
// each block writes only its own rows or its own partial result, and partial
// results are merged in block order, so the same input gives the same bits for
// any thread count and any chunk size.
//
// The package does not change process-wide state (no garbage collector calls,
// no GOMAXPROCS reads). See Read for what that means for peak memory.
package ingest
