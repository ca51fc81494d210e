package ingest

import (
	"fmt"
	"math"
	"math/rand/v2"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas32"

	"nightjar/internal/core"
	"nightjar/internal/par"
)

// RandomizedAbove is the number of columns above which FitPCA and the
// reductions of Dataset.Read use randomised subspace iteration instead of the
// D×D covariance; tables of at most this many columns keep the exact path.
const RandomizedAbove = 500

// Parameters of the randomised block Krylov iteration (see the package
// documentation): blocks of ℓ = k + minOversample vectors (the oversampling
// Halko, Martinsson & Tropp recommend, section 4.2); it stops
// once the captured variance of the first k Ritz values grows by less than
// ritzTol (relative) in a pass and every well separated one of them (ratio
// above separated to both neighbours) has a residual bound on its angle below
// angleTol, after at least minPasses and at most maxPasses passes over the
// rows, or when the blocks span the whole space or an invariant subspace. An
// angle bound that no longer halves in a pass has reached the floor that the
// float32 products leave, and counts as converged.
const (
	minOversample = 10
	ritzTol       = 3e-4
	separated     = 1.1
	angleTol      = 5e-4
	minPasses     = 3
	maxPasses     = 12
)

// subspaceSeed fixes the random start of the iteration: the components depend
// on the data only.
const subspaceSeed, subspaceStream = 0x6e696768746a6172, 0x73756273706163

// subspace runs randomised block Krylov iteration on the covariance C of a
// stream of rows fed pass after pass (each pass the same rows in the same
// order): pass t multiplies C by the block Q_t, and Q_{t+1} is C·Q_t made
// orthonormal to every earlier block.
type subspace struct {
	d, k, l   int
	threads   int
	blockRows int
	pass      int   // passes finished
	n         int64 // rows of a pass
	rows      int64 // rows fed in the current pass

	shift  []float32 // centre of pass 1 (the first block's column means)
	sum    []float64 // pass 1: Σ (x − shift)
	sq     []float64 // pass 1: Σ (x − shift)²
	mean   []float64
	centre []float32 // what rows are centred by in this pass
	total  float64   // trace of the covariance

	basis []float64 // the blocks Q_0, Q_1, … one after the other: m×D, orthonormal rows
	prods []float64 // C times each row of basis, m×D
	q     []float64 // the block multiplied in this pass (the last rows of basis)
	q32   []float32 // the same as float32
	z     []float64 // its product, accumulated over the pass
	gram  []float64 // T = basis·prodsᵀ (symmetrised), m×m

	pending []float32
	scratch [][]float32 // per worker: the centred block, its transpose, its product with q and that transposed
	parts   [][]float32 // per job of a group: the block's product
	colSums [][]float64 // per job of a group (pass 1): Σ c and Σ c²

	ritz     []float64 // Ritz values of the last Rayleigh–Ritz step, descending (first k+1)
	vecs     []float64 // the first k Ritz vectors, k×D
	captured []float64 // Σ of the first k Ritz values after each Rayleigh–Ritz step
	angle    float64   // the largest residual bound of a well separated Ritz vector's angle
	angles   []float64 // its value after each Rayleigh–Ritz step
	complete bool      // the blocks span the whole space or an invariant subspace
}

// newSubspace prepares the iteration for k components of rows of d columns,
// on up to threads goroutines (below 1 means 1).
func newSubspace(d, k, threads int) *subspace {
	l := min(d, k+minOversample)
	s := &subspace{d: d, k: k, l: l, threads: max(1, threads), blockRows: subspaceBlock(d)}
	rng := rand.New(rand.NewPCG(subspaceSeed, subspaceStream))
	omega := make([]float64, l*d)
	for i := range omega {
		omega[i] = rng.NormFloat64()
	}
	q0, _ := s.orthogonalise(omega)
	s.basis, s.q = q0, q0
	s.q32 = toFloat32(q0, nil)
	s.z = make([]float64, len(q0))
	s.sum, s.sq = make([]float64, d), make([]float64, d)
	return s
}

// subspaceBlock is the rows per block for d columns: about a million values,
// between 256 and 4096 rows.
func subspaceBlock(d int) int { return min(4096, max(256, (1<<20)/max(d, 1))) }

func toFloat32(x []float64, dst []float32) []float32 {
	if cap(dst) < len(x) {
		dst = make([]float32, len(x))
	}
	dst = dst[:len(x)]
	for i, v := range x {
		dst[i] = float32(v)
	}
	return dst
}

// add feeds rows of the current pass (m.D must be d). Rows are cut into blocks
// aligned on multiples of blockRows from the pass's first row, whatever the
// chunks they come in, so the result does not depend on the chunking.
func (s *subspace) add(m core.Matrix) {
	if m.D != s.d {
		panic(fmt.Sprintf("ingest: subspace of %d columns fed %d", s.d, m.D))
	}
	full := s.blockRows * s.d
	data := m.Data[:m.N*m.D]
	var jobs [][]float32
	if len(s.pending) > 0 {
		take := min(full-len(s.pending), len(data))
		s.pending = append(s.pending, data[:take]...)
		data = data[take:]
		if len(s.pending) == full {
			jobs = append(jobs, s.pending)
		}
	}
	for len(data) >= full {
		jobs = append(jobs, data[:full])
		data = data[full:]
	}
	s.run(jobs)
	if len(jobs) > 0 && len(s.pending) == full {
		s.pending = s.pending[:0]
	}
	if len(data) > 0 {
		if s.pending == nil {
			s.pending = make([]float32, 0, full)
		}
		s.pending = append(s.pending, data...)
	}
}

// run multiplies the blocks, a group of s.threads at a time in parallel, and
// adds their products in block order.
func (s *subspace) run(jobs [][]float32) {
	if len(jobs) > 0 && s.pass == 0 && s.shift == nil {
		s.shift = blockMean(jobs[0], s.d)
		s.centre = s.shift
	}
	if s.scratch == nil {
		s.scratch = make([][]float32, s.threads)
		s.parts = make([][]float32, s.threads)
		s.colSums = make([][]float64, s.threads)
		for g := range s.parts {
			s.parts[g] = make([]float32, s.d*s.l)
			s.colSums[g] = make([]float64, 2*s.d)
		}
	}
	size := len(s.q32)
	for len(jobs) > 0 {
		g := min(len(jobs), s.threads)
		par.Blocks(g, 1, s.threads, func(w, _, lo, _ int) {
			s.multiply(jobs[lo], w, s.parts[lo][:size], s.colSums[lo])
		})
		for j := range g {
			for i, v := range s.parts[j][:size] {
				s.z[i] += float64(v)
			}
			if s.pass == 0 {
				cs := s.colSums[j]
				for c := range s.d {
					s.sum[c] += cs[c]
					s.sq[c] += cs[s.d+c]
				}
			}
			s.rows += int64(len(jobs[j]) / s.d)
		}
		jobs = jobs[g:]
	}
}

// blockMean returns the column means of the rows x.
func blockMean(x []float32, d int) []float32 {
	n := len(x) / d
	sum := make([]float64, d)
	for i := range n {
		for c, v := range x[i*d : (i+1)*d] {
			sum[c] += float64(v)
		}
	}
	out := make([]float32, d)
	for c := range out {
		out[c] = float32(sum[c] / float64(n))
	}
	return out
}

// multiply sets part (ℓ×D) to (c·qᵀ)ᵀ·c for the centred block c = x − centre,
// on worker w's scratch, and (pass 1) cs to Σ c and Σ c² per column: two
// float32 matrix products by gonum's sgemm.
func (s *subspace) multiply(x []float32, w int, part []float32, cs []float64) {
	d, l := s.d, len(s.q32)/s.d
	n := len(x) / d
	if need := n*d + n*l; cap(s.scratch[w]) < need {
		s.scratch[w] = make([]float32, need)
	}
	buf := s.scratch[w]
	c, b := buf[:n*d], buf[n*d:n*d+n*l]
	for i := range n {
		row := x[i*d : (i+1)*d]
		out := c[i*d : (i+1)*d]
		for j, v := range row {
			out[j] = v - s.centre[j]
		}
	}
	if s.pass == 0 {
		clear(cs)
		sum, sq := cs[:d], cs[d:2*d]
		for i := range n {
			for j, v := range c[i*d : (i+1)*d] {
				sum[j] += float64(v)
				sq[j] += float64(v) * float64(v)
			}
		}
	}
	cm := blas32.General{Rows: n, Cols: d, Stride: d, Data: c}
	bm := blas32.General{Rows: n, Cols: l, Stride: l, Data: b}
	blas32.Gemm(blas.NoTrans, blas.Trans, 1, cm, blas32.General{Rows: l, Cols: d, Stride: d, Data: s.q32}, 0, bm)
	blas32.Gemm(blas.Trans, blas.NoTrans, 1, bm, cm, 0, blas32.General{Rows: l, Cols: d, Stride: d, Data: part})
}

// endPass finishes a pass: the covariance times the block, a Rayleigh–Ritz
// step over every block so far, and the next block. done reports that the
// iteration has converged, used its passes, or spans the whole space or an
// invariant subspace.
func (s *subspace) endPass() (done bool, err error) {
	if len(s.pending) > 0 {
		s.run([][]float32{s.pending})
		s.pending = s.pending[:0]
	}
	if s.pass == 0 {
		s.n = s.rows
	} else if s.rows != s.n {
		return false, fmt.Errorf("pass %d saw %d rows, the first %d", s.pass+1, s.rows, s.n)
	}
	if s.n < 2 {
		return false, fmt.Errorf("pca: %d rows; need at least 2", s.n)
	}
	s.rows = 0
	if s.pass == 0 {
		s.firstPass()
	}
	inv := 1 / float64(s.n-1)
	for i := range s.z {
		s.z[i] *= inv
	}
	s.prods = append(s.prods, s.z...)
	if err := s.rayleighRitz(); err != nil {
		return false, err
	}
	s.pass++
	if s.pass >= maxPasses || (s.pass >= minPasses && s.converged()) {
		return true, nil
	}
	next, vanished := s.orthogonalise(s.z)
	if len(next) == 0 || vanished {
		return true, nil // the blocks span the whole space, or C maps them into themselves
	}
	s.basis = append(s.basis, next...)
	s.q = next
	s.q32 = toFloat32(next, s.q32)
	s.z = make([]float64, len(next))
	return false, nil
}

// firstPass turns the sums of pass 1 into the mean and the total variance, and
// corrects the product for the shift: with δ = mean − shift,
// Σ (x−mean)(x−mean)ᵀq = Σ (x−shift)(x−shift)ᵀq − n·δ(δᵀq).
func (s *subspace) firstPass() {
	n := float64(s.n)
	s.mean = make([]float64, s.d)
	delta := make([]float64, s.d)
	for c := range s.d {
		delta[c] = s.sum[c] / n
		s.mean[c] = float64(s.shift[c]) + delta[c]
		s.total += math.Max(s.sq[c]-n*delta[c]*delta[c], 0) / (n - 1)
	}
	q := s.q
	for r := range len(q) / s.d {
		var dq float64
		for c, dc := range delta {
			dq += dc * q[r*s.d+c]
		}
		z := s.z[r*s.d : (r+1)*s.d]
		for c, dc := range delta {
			z[c] -= n * dc * dq
		}
	}
	s.centre = toFloat32(s.mean, nil)
}
