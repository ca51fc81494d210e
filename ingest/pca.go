package ingest

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas32"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/mat"

	"nightjar/internal/par"

	"nightjar/internal/core"
)

// PCABlockRows is the number of rows per block when accumulating the covariance.
// Blocks are aligned on multiples of PCABlockRows from the first row, whatever the
// chunking of the input, so FitPCA and ReadReduced give the same bits.
const PCABlockRows = 4096

// PCA holds principal components of a D-column matrix.
type PCA struct {
	// Mean is the column mean, length D.
	Mean []float64
	// Components holds the K unit-length principal directions, K×D row-major, in
	// order of decreasing variance. The sign of each is fixed so that its entry of
	// largest magnitude (the first such) is positive.
	Components []float64
	// Variance holds the K variances along the components (eigenvalues of the sample
	// covariance with denominator N−1), descending.
	Variance []float64
	// K and D are the numbers of components and input columns.
	K, D int
	// N is the number of rows the components were fitted on.
	N int64
	// TotalVariance is the sum of the variances of the D columns (the trace of
	// the covariance), so Σ Variance / TotalVariance is the share of the
	// variance the components keep.
	TotalVariance float64
	// Passes is the number of passes over the rows that the fit made: 1 for the
	// exact covariance (D ≤ RandomizedAbove), more for the randomised iteration.
	Passes int
	// Normalised reports that the rows were scaled to unit Euclidean length
	// before the fit (Reduction.Normalise); Project and ProjectTo then scale
	// each row the same way first.
	Normalised bool
	// AngleBound is, for the randomised iteration, the largest residual bound
	// on the angle (radians) between a well separated component and the exact
	// one (see the package documentation); 0 for the exact path.
	AngleBound float64
}

// FitPCA computes the first k principal components of the N×D matrix m, on up to
// threads goroutines (below 1 means 1); the result does not depend on threads.
//
// The mean and covariance are accumulated in float64 over blocks of PCABlockRows
// rows: each block's mean and centred scatter matrix are computed (blocks in
// parallel) and merged in block order with the pairwise update of Chan, Golub &
// LeVeque (see the package documentation), so the result is bit-identical whatever
// the number of threads and is free of the cancellation of the one-pass
// sum-of-squares formula. The D×D covariance (denominator N−1, as gonum's stat.PC)
// is then decomposed with gonum's mat.EigenSym. Memory is O(D²) plus
// O(PCABlockRows·D) per thread.
//
// Above RandomizedAbove columns, FitPCA uses randomised subspace iteration
// instead (see the package documentation): a few passes over the rows, O(N·D·k)
// time and O(D·k) memory beyond the matrix, components that agree with the exact
// ones to the accuracy stated there.
//
// It returns an error if k < 1, k > D, N < 2, or the eigendecomposition fails.
func FitPCA(m core.Matrix, k, threads int) (*PCA, error) {
	if k < 1 || k > m.D {
		return nil, fmt.Errorf("pca: k = %d components requested for D = %d columns; want 1 ≤ k ≤ D", k, m.D)
	}
	if m.D > RandomizedAbove {
		return fitSubspace(m, k, threads)
	}
	acc := newCovAcc(m.D, threads)
	acc.add(m)
	return acc.pca(k)
}

// covAcc accumulates the mean and centred scatter matrix of a stream of rows.
type covAcc struct {
	d       int
	n       int64
	mean    []float64
	m2      []float64 // D×D, upper triangle used
	pending []float32 // rows of an unfinished block
	threads int       // at least 1
}

// newCovAcc returns an accumulator for rows of d columns that works on up to
// threads goroutines (below 1 means 1).
func newCovAcc(d, threads int) *covAcc {
	return &covAcc{d: d, mean: make([]float64, d), m2: make([]float64, d*d), threads: max(1, threads)}
}

// blockStats is the mean and centred scatter of one block.
type blockStats struct {
	n    int64
	mean []float64
	m2   []float64
}

// add feeds the rows of m (m.D must equal the accumulator's D).
func (a *covAcc) add(m core.Matrix) {
	if m.D != a.d {
		panic(fmt.Sprintf("ingest: covariance of %d columns fed %d", a.d, m.D))
	}
	full := PCABlockRows * a.d
	data := m.Data[:m.N*m.D]
	var jobs [][]float32
	if len(a.pending) > 0 {
		take := min(full-len(a.pending), len(data))
		a.pending = append(a.pending, data[:take]...)
		data = data[take:]
		if len(a.pending) == full {
			jobs = append(jobs, a.pending)
		}
	}
	for len(data) >= full {
		jobs = append(jobs, data[:full])
		data = data[full:]
	}
	a.run(jobs)
	if len(jobs) > 0 && len(a.pending) == full {
		a.pending = a.pending[:0]
	}
	if len(data) > 0 {
		if a.pending == nil {
			a.pending = make([]float32, 0, full)
		}
		a.pending = append(a.pending, data...)
	}
}

// run computes the stats of the blocks, a group of a.threads at a time in parallel
// (so that at most that many D×D scatter matrices wait), and merges them in block
// order.
func (a *covAcc) run(jobs [][]float32) {
	for len(jobs) > 0 {
		g := min(len(jobs), a.threads)
		res := par.Map(g, 1, a.threads, func() func(lo, hi int) blockStats {
			var scratch []float64
			return func(lo, _ int) (s blockStats) {
				s, scratch = blockMoments(jobs[lo], a.d, scratch)
				return s
			}
		})
		for _, r := range res {
			a.merge(r)
		}
		jobs = jobs[g:]
	}
}

// blockMoments returns the mean and centred scatter (upper triangle) of the rows in
// x (n×d row-major), using scratch (grown as needed) for the centred copy.
func blockMoments(x []float32, d int, scratch []float64) (blockStats, []float64) {
	n := len(x) / d
	mean := make([]float64, d)
	for i := 0; i < n; i++ {
		row := x[i*d : (i+1)*d]
		for j, v := range row {
			mean[j] += float64(v)
		}
	}
	for j := range mean {
		mean[j] /= float64(n)
	}
	if cap(scratch) < n*d {
		scratch = make([]float64, n*d)
	}
	// The centred block is stored transposed (d×n) so that Syrk forms XᵀX from dot
	// products of contiguous rows, faster in gonum than the transposed variant.
	c := scratch[:n*d]
	for i := 0; i < n; i++ {
		for j := 0; j < d; j++ {
			c[j*n+i] = float64(x[i*d+j]) - mean[j]
		}
	}
	m2 := make([]float64, d*d)
	blas64.Syrk(blas.NoTrans, 1,
		blas64.General{Rows: d, Cols: n, Stride: n, Data: c}, 0,
		blas64.Symmetric{N: d, Stride: d, Uplo: blas.Upper, Data: m2})
	return blockStats{n: int64(n), mean: mean, m2: m2}, scratch
}

// merge folds block b into the running totals (Chan, Golub & LeVeque 1979):
// M2 = M2a + M2b + δδᵀ·na·nb/n, mean = meanA + δ·nb/n, with δ = meanB − meanA.
func (a *covAcc) merge(b blockStats) {
	if b.n == 0 {
		return
	}
	if a.n == 0 {
		a.n = b.n
		copy(a.mean, b.mean)
		copy(a.m2, b.m2)
		return
	}
	n := a.n + b.n
	f := float64(a.n) * float64(b.n) / float64(n)
	d := a.d
	delta := make([]float64, d)
	for j := range delta {
		delta[j] = b.mean[j] - a.mean[j]
	}
	for r := 0; r < d; r++ {
		fr := f * delta[r]
		for c := r; c < d; c++ {
			a.m2[r*d+c] += b.m2[r*d+c] + fr*delta[c]
		}
	}
	w := float64(b.n) / float64(n)
	for j := range a.mean {
		a.mean[j] += delta[j] * w
	}
	a.n = n
}

// flush merges the rows of an unfinished block.
func (a *covAcc) flush() {
	if len(a.pending) > 0 {
		a.run([][]float32{a.pending})
		a.pending = a.pending[:0]
	}
}

// pca finishes the accumulation and returns the first k components.
func (a *covAcc) pca(k int) (*PCA, error) {
	a.flush()
	d := a.d
	if k < 1 || k > d {
		return nil, fmt.Errorf("pca: k = %d components requested for D = %d columns; want 1 ≤ k ≤ D", k, d)
	}
	if a.n < 2 {
		return nil, fmt.Errorf("pca: %d rows; need at least 2", a.n)
	}
	cov := mat.NewSymDense(d, nil)
	inv := 1 / float64(a.n-1)
	for r := 0; r < d; r++ {
		for c := r; c < d; c++ {
			cov.SetSym(r, c, a.m2[r*d+c]*inv)
		}
	}
	var eig mat.EigenSym
	if !eig.Factorize(cov, true) {
		return nil, errors.New("pca: eigendecomposition of the covariance did not converge")
	}
	vals := eig.Values(nil) // ascending
	var vecs mat.Dense
	eig.VectorsTo(&vecs)
	p := &PCA{Mean: append([]float64(nil), a.mean...), Components: make([]float64, k*d), Variance: make([]float64, k), K: k, D: d, N: a.n, Passes: 1}
	for c := range d {
		p.TotalVariance += math.Max(cov.At(c, c), 0)
	}
	for c := 0; c < k; c++ {
		src := d - 1 - c
		p.Variance[c] = math.Max(vals[src], 0)
		row := p.Components[c*d : (c+1)*d]
		big := 0
		for j := 0; j < d; j++ {
			row[j] = vecs.At(j, src)
			if math.Abs(row[j]) > math.Abs(row[big]) {
				big = j
			}
		}
		if row[big] < 0 {
			for j := range row {
				row[j] = -row[j]
			}
		}
	}
	return p, nil
}

// Project returns the N×K scores of the rows of m on the components, row-major:
// element (i, c) is Σ_j (m[i,j] − Mean[j])·Components[c,j]. Rows are done in blocks
// of PCABlockRows on up to threads goroutines (below 1 means 1); each score depends
// only on its row, so the result does not depend on threads. It panics if
// m.D != p.D.
func (p *PCA) Project(m core.Matrix, threads int) []float64 {
	out := make([]float64, m.N*p.K)
	p.ProjectTo(out, m, threads)
	return out
}

// ProjectTo is Project writing into dst, which must have length m.N×K; it panics
// otherwise or if m.D != p.D. With Normalised, each row is first scaled to unit
// length, as the fit saw it (float32(x·(1/‖x‖)), the norm in float64); a row
// of zeros then gives NaN scores.
func (p *PCA) ProjectTo(dst []float64, m core.Matrix, threads int) {
	if m.D != p.D {
		panic(fmt.Sprintf("ingest: PCA fitted on %d columns applied to %d", p.D, m.D))
	}
	if len(dst) != m.N*p.K {
		panic(fmt.Sprintf("ingest: projection needs %d values, dst has %d", m.N*p.K, len(dst)))
	}
	if p.D > RandomizedAbove {
		p.projectWide(dst, m, threads)
		return
	}
	comps := blas64.General{Rows: p.K, Cols: p.D, Stride: p.D, Data: p.Components}
	scratch := make([][]float64, max(1, threads)) // centred rows, per worker
	par.Blocks(m.N, PCABlockRows, threads, func(w, _, lo, hi int) {
		n := hi - lo
		if cap(scratch[w]) < n*p.D {
			scratch[w] = make([]float64, n*p.D)
		}
		c := scratch[w][:n*p.D]
		for i := 0; i < n; i++ {
			row := m.Data[(lo+i)*p.D : (lo+i+1)*p.D]
			if p.Normalised {
				inv := 1 / math.Sqrt(sumSquares(row))
				for j, v := range row {
					c[i*p.D+j] = float64(float32(float64(v)*inv)) - p.Mean[j]
				}
				continue
			}
			for j, v := range row {
				c[i*p.D+j] = float64(v) - p.Mean[j]
			}
		}
		blas64.Gemm(blas.NoTrans, blas.Trans, 1,
			blas64.General{Rows: n, Cols: p.D, Stride: p.D, Data: c}, comps, 0,
			blas64.General{Rows: n, Cols: p.K, Stride: p.K, Data: dst[lo*p.K : hi*p.K]})
	})
}

// sumSquares returns Σ v² in float64.
func sumSquares(row []float32) float64 {
	var ss float64
	for _, v := range row {
		ss += float64(v) * float64(v)
	}
	return ss
}

// projectWide is ProjectTo for tables of more than RandomizedAbove columns:
// each row centred in float32 and its score on each component a float32 dot
// product (gonum's blas32.Dot, the same order of terms whatever the rows
// around it), so the scores do not depend on how the rows come in chunks.
func (p *PCA) projectWide(dst []float64, m core.Matrix, threads int) {
	d, k := p.D, p.K
	comps := make([]float32, k*d)
	for i, v := range p.Components {
		comps[i] = float32(v)
	}
	scratch := make([][]float32, max(1, threads))
	par.Blocks(m.N, subspaceBlock(d), threads, func(w, _, lo, hi int) {
		if scratch[w] == nil {
			scratch[w] = make([]float32, d)
		}
		c := blas32.Vector{N: d, Inc: 1, Data: scratch[w]}
		for i := lo; i < hi; i++ {
			row := m.Data[i*d : (i+1)*d]
			inv := 1.0
			if p.Normalised {
				inv = 1 / math.Sqrt(sumSquares(row))
			}
			for j, v := range row {
				if p.Normalised {
					v = float32(float64(v) * inv)
				}
				c.Data[j] = float32(float64(v) - p.Mean[j])
			}
			for q := range k {
				dst[i*k+q] = float64(blas32.Dot(c, blas32.Vector{N: d, Inc: 1, Data: comps[q*d : (q+1)*d]}))
			}
		}
	})
}
