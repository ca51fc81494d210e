//go:build amd64 && !purego

package gradient

// attractPairsSSE is written in attract_amd64.s: the even and odd sums of
// the first 2·pairs entries of a row, prefetching for the first fetched
// pairs the positions of the columns ahead bytes further on and, unless
// stream is 0, the columns and values stream bytes further on. cols and vals
// must address at least 2·pairs values, cols also fetched·2 + ahead/4
// values, and every column must index a row of y.
//
//go:noescape
func attractPairsSSE(y *float64, cols *int32, vals *float32, pairs, fetched, ahead, stream int, yx, yy, invA float64) (fx0, fy0, fx1, fy1 float64)

// attractRow returns attractRowGo's sums with the pairs of entries taken
// by the SSE2 kernel (two lanes, the same bits). Columns past len(cs), up
// to cap(cs), are read to prefetch positions: in the attractive pass they
// are the next rows' columns, so the first entries of the next row are
// fetched while this one is summed. P's columns and values further on are
// prefetched as well (attractStream), wherever they lie.
func attractRow(y []float64, cs []int32, vs []float32, yx, yy, invA float64) (fx, fy float64) {
	pairs := len(cs) / 2
	var fx0, fy0, fx1, fy1 float64
	if pairs > 0 {
		vs = vs[:len(cs)]
		// The kernel does no bounds checks: P's layout was validated
		// (columns in [0, N), ascending in a row), so the last column is
		// the largest; every column up to cap(cs) indexes y as well.
		_ = y[2*int(cs[len(cs)-1])+1]
		ahead, fetched := attractAhead, 0
		if ahead > 0 {
			// Pair p reads columns 2p+ahead and 2p+ahead+1, which must
			// be below cap(cs).
			fetched = min(pairs, max(0, (cap(cs)-ahead)/2))
		}
		fx0, fy0, fx1, fy1 = attractPairsSSE(&y[0], &cs[0], &vs[0], pairs, fetched, 4*ahead, 4*attractStream, yx, yy, invA)
	}
	return attractTail(y, cs, vs, yx, yy, invA, fx0, fy0, fx1, fy1)
}
