package score

import (
	"fmt"

	"nightjar/internal/core"
)

// Space is a set of N points with a dissimilarity between every two of them:
// the input matrix (InputSpace) or a map (MapSpace), both with the squared
// Euclidean distance. The scores use only the order of the dissimilarities
// from each point (nearest neighbours and ranks), so a Space measuring another
// metric scores the map against that metric without any change to the scores.
type Space interface {
	// Len returns the number of points N.
	Len() int
	// DistRow sets out[j] to the dissimilarity between points i and j for
	// every j. out[i] must not exceed any other out[j] (it is 0 for a
	// distance). len(out) must be Len().
	DistRow(i int, out []float64)
}

// InputSpace returns the rows of x as a Space with the squared Euclidean
// distance, accumulated in float64 from the float32 values. It panics if
// len(x.Data) != N·D.
func InputSpace(x core.Matrix) Space {
	if len(x.Data) != x.N*x.D {
		panic(fmt.Sprintf("score.InputSpace: matrix %d×%d holds %d values", x.N, x.D, len(x.Data)))
	}
	return inputSpace(x)
}

// MapSpace returns a map of N = len(y)/dims points of dims coordinates each
// (row-major) as a Space with the squared Euclidean distance. It panics if
// dims < 1 or len(y) is not a multiple of dims.
func MapSpace(y []float64, dims int) Space {
	if dims < 1 || len(y)%dims != 0 {
		panic(fmt.Sprintf("score.MapSpace: len(y) = %d, dims = %d", len(y), dims))
	}
	return mapSpace{y: y, dims: dims}
}

// blockSpace is a Space that fills the rows of several points at once faster
// than one at a time.
type blockSpace interface {
	distRows(rows []int32, outs [][]float64)
}

// distRows sets outs[r] to the dissimilarities from point rows[r], as DistRow.
func distRows(s Space, rows []int32, outs [][]float64) {
	if b, ok := s.(blockSpace); ok {
		b.distRows(rows, outs)
		return
	}
	for r, i := range rows {
		s.DistRow(int(i), outs[r])
	}
}

type inputSpace core.Matrix

func (s inputSpace) Len() int { return s.N }

func (s inputSpace) DistRow(i int, out []float64) {
	d := s.D
	xi := s.Data[i*d : (i+1)*d]
	for j := range s.N {
		xj := s.Data[j*d : (j+1)*d]
		var acc float64
		for f, v := range xi {
			t := float64(v) - float64(xj[f])
			acc += t * t
		}
		out[j] = acc
	}
}

// distRows fills outs[r][j] with the squared distance between rows[r] and j,
// for up to four rows at once: each row j of the matrix is read from memory once
// per four sampled rows, and the four independent sums keep the FPU busy. This
// pass is the whole cost of the scores (O(|S|·N·D)), hence the hand tuning. The
// values equal DistRow's bit for bit (the same terms, squared, in the same order).
func (s inputSpace) distRows(rows []int32, outs [][]float64) {
	d := s.D
	for len(rows) > 0 {
		m := min(len(rows), 4)
		var a [4][]float64
		for r := range 4 {
			a[r] = make([]float64, d)
			src := rows[min(r, m-1)] // pad with the last row; its result is dropped
			for f, v := range s.Data[int(src)*d : (int(src)+1)*d] {
				a[r][f] = float64(v)
			}
		}
		a0, a1, a2, a3 := a[0], a[1][:d], a[2][:d], a[3][:d]
		var o [4][]float64
		for r := range 4 {
			o[r] = outs[min(r, m-1)]
		}
		for j := range s.N {
			xj := s.Data[j*d : (j+1)*d]
			xj = xj[:len(a0)]
			var s0, s1, s2, s3 float64
			for f, v32 := range xj {
				v := float64(v32)
				t0, t1, t2, t3 := v-a0[f], v-a1[f], v-a2[f], v-a3[f]
				s0 += t0 * t0
				s1 += t1 * t1
				s2 += t2 * t2
				s3 += t3 * t3
			}
			// padding rows repeat the last real row: same values, same slot
			o[3][j] = s3
			o[2][j] = s2
			o[1][j] = s1
			o[0][j] = s0
		}
		rows, outs = rows[m:], outs[m:]
	}
}

type mapSpace struct {
	y    []float64
	dims int
}

func (s mapSpace) Len() int { return len(s.y) / s.dims }

func (s mapSpace) DistRow(i int, out []float64) {
	d := s.dims
	yi := s.y[i*d : (i+1)*d]
	if d == 2 {
		a, b := yi[0], yi[1]
		for j := range out {
			u, v := a-s.y[2*j], b-s.y[2*j+1]
			out[j] = u*u + v*v
		}
		return
	}
	for j := range out {
		yj := s.y[j*d : (j+1)*d]
		var acc float64
		for f, v := range yi {
			t := v - yj[f]
			acc += t * t
		}
		out[j] = acc
	}
}
