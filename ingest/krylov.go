package ingest

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/mat"

	"nightjar/internal/core"
)

// rowsOf views the first rows×d values of x as a matrix.
func rowsOf(x []float64, rows, d int) blas64.General {
	return blas64.General{Rows: rows, Cols: d, Stride: d, Data: x[:rows*d]}
}

// rayleighRitz extends T = basis·prodsᵀ by the newest block, computes its
// eigenpairs (gonum mat.EigenSym), the first k Ritz vectors V = Wᵀ·basis and,
// for the well separated ones, the residual bound ‖C·v − θ·v‖ / gap on the
// sine of the angle to the eigenvector (Saad, "Numerical Methods for Large
// Eigenvalue Problems", 2nd ed., 2011, theorem 3.6, with the gap between Ritz
// values standing in for the gap between eigenvalues), and records the
// captured variance of the first k.
func (s *subspace) rayleighRitz() error {
	d := s.d
	m := len(s.basis) / d
	old := m - len(s.q)/d
	gram := make([]float64, m*m)
	for i := range old {
		copy(gram[i*m:i*m+old], s.gram[i*old:(i+1)*old])
	}
	// New columns a = basis·(C·Q_new)ᵀ and rows b = Q_new·prodsᵀ, averaged.
	nb := m - old
	a := make([]float64, m*nb)
	b := make([]float64, nb*m)
	blas64.Gemm(blas.NoTrans, blas.Trans, 1, rowsOf(s.basis, m, d), rowsOf(s.prods[old*d:], nb, d), 0, rowsOf(a, m, nb))
	blas64.Gemm(blas.NoTrans, blas.Trans, 1, rowsOf(s.q, nb, d), rowsOf(s.prods, m, d), 0, rowsOf(b, nb, m))
	for i := range m {
		for j := old; j < m; j++ {
			v := (a[i*nb+j-old] + b[(j-old)*m+i]) / 2
			gram[i*m+j], gram[j*m+i] = v, v
		}
	}
	s.gram = gram
	var eig mat.EigenSym
	if !eig.Factorize(mat.NewSymDense(m, slices.Clone(gram)), true) {
		return errors.New("pca: eigendecomposition of the projected covariance did not converge")
	}
	vals := eig.Values(nil) // ascending
	var w mat.Dense
	eig.VectorsTo(&w)
	k := min(s.k, m)
	s.ritz = make([]float64, min(k+1, m))
	for c := range s.ritz {
		s.ritz[c] = math.Max(vals[m-1-c], 0)
	}
	wk := make([]float64, m*k) // the eigenvectors of the k largest values, as columns
	for i := range m {
		for c := range k {
			wk[i*k+c] = w.At(i, m-1-c)
		}
	}
	s.vecs = make([]float64, k*d)
	cv := make([]float64, k*d)
	blas64.Gemm(blas.Trans, blas.NoTrans, 1, rowsOf(wk, m, k), rowsOf(s.basis, m, d), 0, rowsOf(s.vecs, k, d))
	blas64.Gemm(blas.Trans, blas.NoTrans, 1, rowsOf(wk, m, k), rowsOf(s.prods, m, d), 0, rowsOf(cv, k, d))
	captured := 0.0
	s.angle = 0
	for c := range k {
		captured += s.ritz[c]
		if c+1 >= len(s.ritz) || s.ritz[c] < separated*s.ritz[c+1] || (c > 0 && s.ritz[c-1] < separated*s.ritz[c]) {
			continue
		}
		gap := s.ritz[c] - s.ritz[c+1]
		if c > 0 {
			gap = min(gap, s.ritz[c-1]-s.ritz[c])
		}
		theta := vals[m-1-c]
		v, cvc := s.vecs[c*d:(c+1)*d], cv[c*d:(c+1)*d]
		r := 0.0
		for j := range d {
			e := cvc[j] - theta*v[j]
			r += e * e
		}
		s.angle = max(s.angle, math.Sqrt(r)/gap)
	}
	s.captured = append(s.captured, captured)
	s.angles = append(s.angles, s.angle)
	return nil
}

// converged reports whether the captured variance of the first k Ritz values
// grew by less than ritzTol (relative) in the last pass and the well separated
// Ritz vectors have converged to angleTol.
func (s *subspace) converged() bool {
	m := len(s.captured)
	if m < 2 {
		return false
	}
	last, prev := s.captured[m-1], s.captured[m-2]
	floor := s.angles[m-1] > s.angles[m-2]/2 // no longer halving: at the precision's floor
	return last <= 0 || (math.Abs(last-prev) <= ritzTol*last && (s.angle <= angleTol || floor))
}

// orthogonalise returns the rows of z (each of length D) made orthonormal to
// the basis so far and to each other: block classical Gram–Schmidt against the
// basis, run twice (z ← z − (z·basisᵀ)·basis, as two matrix products), then
// modified Gram–Schmidt within the block, run twice ("twice is enough": Giraud,
// Langou & Rozložník, Comput. Math. Appl. 50, 2005). At most D rows are
// returned in all. A row that vanishes against the others is replaced by a
// pseudo-random one orthogonalised the same way; vanished reports that every
// row did (the basis spans an invariant subspace: C maps it into itself).
func (s *subspace) orthogonalise(z []float64) (out []float64, vanished bool) {
	d := s.d
	have := len(s.basis) / d
	rows := min(len(z)/d, d-have)
	out = slices.Clone(z[:rows*d])
	if rows == 0 {
		return out, false
	}
	norms := make([]float64, rows)
	for r := range rows {
		norms[r] = blas64.Nrm2(blas64.Vector{N: d, Inc: 1, Data: out[r*d : (r+1)*d]})
	}
	s.project(out, rows)
	rng := rand.New(rand.NewPCG(subspaceSeed, subspaceStream+uint64(1+have)))
	vanished = true
	for r := range rows {
		v := out[r*d : (r+1)*d]
		for try := 0; ; try++ {
			for range 2 {
				for i := range r {
					subtract(v, out[i*d:(i+1)*d])
				}
			}
			after := blas64.Nrm2(blas64.Vector{N: d, Inc: 1, Data: v})
			if after > 1e-10*norms[r] && after > 0 {
				blas64.Scal(1/after, blas64.Vector{N: d, Inc: 1, Data: v})
				if try == 0 {
					vanished = false
				}
				break
			}
			for j := range v {
				v[j] = rng.NormFloat64()
			}
			norms[r] = blas64.Nrm2(blas64.Vector{N: d, Inc: 1, Data: v})
			s.project(v, 1)
		}
	}
	return out, vanished
}

// project removes from the rows of v (rows×D) their components in the span of
// the basis, twice.
func (s *subspace) project(v []float64, rows int) {
	d := s.d
	m := len(s.basis) / d
	if m == 0 {
		return
	}
	p := make([]float64, rows*m)
	for range 2 {
		blas64.Gemm(blas.NoTrans, blas.Trans, 1, rowsOf(v, rows, d), rowsOf(s.basis, m, d), 0, rowsOf(p, rows, m))
		blas64.Gemm(blas.NoTrans, blas.NoTrans, -1, rowsOf(p, rows, m), rowsOf(s.basis, m, d), 1, rowsOf(v, rows, d))
	}
}

// subtract removes from v its component along the unit vector u.
func subtract(v, u []float64) {
	vv := blas64.Vector{N: len(v), Inc: 1, Data: v}
	uu := blas64.Vector{N: len(u), Inc: 1, Data: u}
	blas64.Axpy(-blas64.Dot(vv, uu), uu, vv)
}

// result returns the first k components (the Ritz vectors of the last step,
// signs fixed as in the exact path).
func (s *subspace) result() (*PCA, error) {
	if s.ritz == nil {
		return nil, errors.New("pca: the subspace iteration has not run")
	}
	d, k := s.d, s.k
	if len(s.vecs) < k*d {
		return nil, fmt.Errorf("pca: the iteration found %d components of the %d wanted", len(s.vecs)/d, k)
	}
	p := &PCA{Mean: s.mean, Components: make([]float64, k*d), Variance: make([]float64, k), K: k, D: d, N: s.n,
		TotalVariance: s.total, Passes: s.pass, AngleBound: s.angle}
	for c := range k {
		p.Variance[c] = s.ritz[c]
		row := p.Components[c*d : (c+1)*d]
		copy(row, s.vecs[c*d:(c+1)*d])
		big := 0
		for j := range d {
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

// fitSubspace runs the iteration over the in-memory matrix m.
func fitSubspace(m core.Matrix, k, threads int) (*PCA, error) {
	s := newSubspace(m.D, k, threads)
	for {
		s.add(m)
		done, err := s.endPass()
		if err != nil {
			return nil, err
		}
		if done {
			return s.result()
		}
	}
}
