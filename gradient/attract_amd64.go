//go:build amd64 && !purego

package gradient

// attractPairsSSE is written in attract_amd64.s: the even and odd sums of
// the first 2·pairs entries of a row. cols and vals must address at least
// 2·pairs values and every column must index a row of y.
//
//go:noescape
func attractPairsSSE(y *float64, cols *int32, vals *float32, pairs int, yx, yy, invA float64) (fx0, fy0, fx1, fy1 float64)

// attractRow returns attractRowGo's sums with the pairs of entries taken
// by the SSE2 kernel (two lanes, the same bits).
func attractRow(y []float64, cs []int32, vs []float32, yx, yy, invA float64) (fx, fy float64) {
	pairs := len(cs) / 2
	var fx0, fy0, fx1, fy1 float64
	if pairs > 0 {
		vs = vs[:len(cs)]
		// The kernel does no bounds checks: P's layout was validated
		// (columns in [0, N), ascending in a row), so the last column is
		// the largest.
		_ = y[2*int(cs[len(cs)-1])+1]
		fx0, fy0, fx1, fy1 = attractPairsSSE(&y[0], &cs[0], &vs[0], pairs, yx, yy, invA)
	}
	return attractTail(y, cs, vs, yx, yy, invA, fx0, fy0, fx1, fy1)
}
