package score

import (
	"fmt"
	"math"

	"nightjar/internal/core"
)

// CosineSpace returns the rows of x as a Space with the cosine distance
// 1 − ⟨x_i, x_j⟩ / (‖x_i‖·‖x_j‖), accumulated in float64 from the float32
// values (the norms computed once). A row's distance to itself is 0; a row of
// zeros, whose direction is undefined, is at distance 1 from every other row.
// It panics if len(x.Data) != N·D.
func CosineSpace(x core.Matrix) Space {
	if len(x.Data) != x.N*x.D {
		panic(fmt.Sprintf("score.CosineSpace: matrix %d×%d holds %d values", x.N, x.D, len(x.Data)))
	}
	s := cosineSpace{x: x, inv: make([]float64, x.N)}
	for i := range x.N {
		var ss float64
		for _, v := range x.Row(i) {
			ss += float64(v) * float64(v)
		}
		if ss > 0 {
			s.inv[i] = 1 / math.Sqrt(ss)
		}
	}
	return s
}

type cosineSpace struct {
	x   core.Matrix
	inv []float64 // 1/‖x_i‖, 0 for a zero row
}

func (s cosineSpace) Len() int { return s.x.N }

func (s cosineSpace) DistRow(i int, out []float64) {
	s.distRows([]int32{int32(i)}, [][]float64{out})
}

// distRows computes up to four rows at once, reading each row j of the
// matrix once per four sampled rows (as inputSpace does); the values equal a
// one-row computation's bit for bit (the same products summed in the same
// order).
func (s cosineSpace) distRows(rows []int32, outs [][]float64) {
	d := s.x.D
	data := s.x.Data
	for len(rows) > 0 {
		m := min(len(rows), 4)
		var a [4][]float64
		for r := range 4 {
			a[r] = make([]float64, d)
			src := rows[min(r, m-1)]
			for f, v := range data[int(src)*d : (int(src)+1)*d] {
				a[r][f] = float64(v)
			}
		}
		a0, a1, a2, a3 := a[0], a[1][:d], a[2][:d], a[3][:d]
		var inv [4]float64
		for r := range 4 {
			inv[r] = s.inv[rows[min(r, m-1)]]
		}
		for j := range s.x.N {
			xj := data[j*d : (j+1)*d]
			xj = xj[:len(a0)]
			var s0, s1, s2, s3 float64
			for f, v32 := range xj {
				v := float64(v32)
				s0 += v * a0[f]
				s1 += v * a1[f]
				s2 += v * a2[f]
				s3 += v * a3[f]
			}
			sums := [4]float64{s0, s1, s2, s3}
			for r := m - 1; r >= 0; r-- {
				outs[r][j] = cosineDistance(sums[r], inv[r], s.inv[j])
			}
		}
		for r := range m {
			outs[r][rows[r]] = 0
		}
		rows, outs = rows[m:], outs[m:]
	}
}

// cosineDistance is 1 − dot·invA·invB, or 1 when either row is zero.
func cosineDistance(dot, invA, invB float64) float64 {
	if invA == 0 || invB == 0 {
		return 1
	}
	return 1 - dot*invA*invB
}
