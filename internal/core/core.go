package core

import (
	"fmt"
	"math"
)

// Matrix is an N×D matrix of float32 values stored row-major in one slice:
// element (i, j) is Data[i*D+j]. len(Data) must equal N*D.
type Matrix struct {
	N, D int
	Data []float32
}

// Row returns row i as a sub-slice of Data (no copy). It panics if i is out of range.
func (m Matrix) Row(i int) []float32 {
	return m.Data[i*m.D : (i+1)*m.D : (i+1)*m.D]
}

// Graph is a k-nearest-neighbour graph over N rows. Row i's neighbours are
// Index[i*K : (i+1)*K], nearest first, with squared distances in the same
// positions of Dist2. A row is never its own neighbour.
type Graph struct {
	N, K  int
	Index []int32
	Dist2 []float32
}

// Validate checks the graph's layout: sizes N·K, neighbour numbers in
// [0, N) and never the row itself. It costs one pass over the entries.
func (g *Graph) Validate() error {
	if g.N < 1 || g.K < 1 {
		return fmt.Errorf("neighbour graph: N = %d, K = %d, need both at least 1", g.N, g.K)
	}
	if len(g.Index) != g.N*g.K || len(g.Dist2) != g.N*g.K {
		return fmt.Errorf("neighbour graph: %d indices and %d distances for N·K = %d", len(g.Index), len(g.Dist2), g.N*g.K)
	}
	for e, c := range g.Index {
		if c < 0 || int(c) >= g.N {
			return fmt.Errorf("neighbour graph: row %d has neighbour %d outside [0, %d)", e/g.K, c, g.N)
		}
		if int(c) == e/g.K {
			return fmt.Errorf("neighbour graph: row %d is its own neighbour", c)
		}
	}
	return nil
}

// CSR is a sparse N×N matrix in compressed sparse row form: the entries of
// row i are Cols[Offsets[i]:Offsets[i+1]] with values Vals at the same
// positions, columns ascending within a row, len(Offsets) == N+1.
//
// As the t-SNE input affinities P it also has no diagonal entries, finite
// non-negative values summing to 1, and is symmetric (p_ij = p_ji stored in
// both rows); Validate checks all of that but the symmetry.
type CSR struct {
	N       int
	Offsets []int64
	Cols    []int32
	Vals    []float32
}

// Validate checks that p is a valid affinity matrix: offsets, column range
// and order, no diagonal entries, finite non-negative values summing to 1
// within 1e-4. Symmetry is not checked. It costs one pass over the entries.
func (p *CSR) Validate() error {
	if err := p.ValidateLayout(); err != nil {
		return err
	}
	var sum float64
	for e, v := range p.Vals {
		f := float64(v)
		if !(f >= 0) || math.IsInf(f, 0) {
			return fmt.Errorf("affinities: entry %d (column %d) has value %v, want finite ≥ 0", e, p.Cols[e], v)
		}
		sum += f
	}
	if math.Abs(sum-1) > 1e-4 {
		return fmt.Errorf("affinities: values sum to %.8g, want 1", sum)
	}
	return nil
}

// ValidateLayout checks the sparse layout alone: N ≥ 2, N+1 offsets that
// start at 0, never decrease and end at the number of entries, columns in
// [0, N), strictly ascending within a row, no diagonal entries. The values
// are not looked at.
func (p *CSR) ValidateLayout() error {
	if p.N < 2 {
		return fmt.Errorf("affinities: N = %d, need at least 2 rows", p.N)
	}
	if len(p.Offsets) != p.N+1 {
		return fmt.Errorf("affinities: %d row offsets for N = %d, want N+1", len(p.Offsets), p.N)
	}
	if p.Offsets[0] != 0 || p.Offsets[p.N] != int64(len(p.Cols)) || len(p.Cols) != len(p.Vals) {
		return fmt.Errorf("affinities: offsets run from %d to %d but there are %d columns and %d values",
			p.Offsets[0], p.Offsets[p.N], len(p.Cols), len(p.Vals))
	}
	for i := 0; i < p.N; i++ {
		lo, hi := p.Offsets[i], p.Offsets[i+1]
		if hi < lo {
			return fmt.Errorf("affinities: row %d has decreasing offsets %d > %d", i, lo, hi)
		}
		prev := int32(-1)
		for e := lo; e < hi; e++ {
			j := p.Cols[e]
			if j < 0 || int(j) >= p.N {
				return fmt.Errorf("affinities: row %d has column %d outside [0, %d)", i, j, p.N)
			}
			if j <= prev {
				return fmt.Errorf("affinities: row %d columns not strictly ascending at %d", i, j)
			}
			if int(j) == i {
				return fmt.Errorf("affinities: row %d has a diagonal entry", i)
			}
			prev = j
		}
	}
	return nil
}
