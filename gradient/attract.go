package gradient

// attractAhead is how many entries ahead of the one being summed the SSE2
// kernel prefetches a position (the pure-Go loop does not prefetch): far
// enough for a read from memory to arrive in time, near enough to stay in
// the cache until it is used. A large map's positions are scattered over
// more memory than the caches hold, and the processor cannot guess an
// address that is itself read from memory. On the 10^7-row demo's P
// (BenchmarkSavedAttraction, bench/RESULTS.md) distances of 24 to 64 took
// within a few per cent of each other and 17 % off the pass; 0 turns
// prefetching off for that comparison.
var attractAhead = 32

// attractStream is how many entries ahead the SSE2 kernel, while it
// prefetches positions (attractAhead > 0), also prefetches P's columns and
// values, as non-temporal data (PREFETCHNTA); 0 leaves them to the
// processor. Why it helps, as far as we can tell: P is read once per pass,
// in order, and at 10^7 rows it is 10.6 GB; read the ordinary way it
// passes through the shared cache and pushes out the map's positions
// (160 MB at 10^7 rows), which are read again and again in no order the
// processor can guess, while data fetched as non-temporal is kept out of
// most of the cache. On the 10^7-row demo's P
// (BenchmarkSavedAttraction, bench/RESULTS.md) 192 to 320 entries ahead
// took 14-18 % off the pass (on top of attractAhead's), 128 3-4 %, and
// 512 made it 3 % slower; on the 10^6-row P, whose positions stay in the
// cache anyway, 192 to 320 changed nothing and 128 cost 22 %.
var attractStream = 256

// attractRowGo returns the attractive sums Σ_j p_ij w_ij (y_i − y_j) of one
// row of a 2-D map, without the factor: cs and vs are the row's columns
// and values, (yx, yy) its position, invA = 1/α, and w_ij = 1/(1 +
// ‖y_i − y_j‖²/α). The even and odd entries are summed apart and added at
// the end, so that the divisions of neighbouring entries overlap (1.2 times
// faster than one sum, BenchmarkAttraction) and so that attractRow's SSE2
// kernel, whose two lanes hold the two sums, gives the same bits. The
// float64 conversions round every product before it is added: Go may
// otherwise fuse a multiply and an add on some processors (the language
// specification allows it), which would change the bits between machines.
func attractRowGo(y []float64, cs []int32, vs []float32, yx, yy, invA float64) (fx, fy float64) {
	vs = vs[:len(cs)]
	var fx0, fy0, fx1, fy1 float64
	for k := 0; k+1 < len(cs); k += 2 {
		s0, dx0, dy0 := attractTerm(y, cs[k], vs[k], yx, yy, invA)
		s1, dx1, dy1 := attractTerm(y, cs[k+1], vs[k+1], yx, yy, invA)
		fx0 += float64(s0 * dx0)
		fy0 += float64(s0 * dy0)
		fx1 += float64(s1 * dx1)
		fy1 += float64(s1 * dy1)
	}
	return attractTail(y, cs, vs, yx, yy, invA, fx0, fy0, fx1, fy1)
}

// attractTerm returns p_ij w_ij^(1/α) and y_i − y_j for entry (j, v) of
// the row at (yx, yy).
func attractTerm(y []float64, j int32, v float32, yx, yy, invA float64) (s, dx, dy float64) {
	i := 2 * int(j)
	dx, dy = yx-y[i], yy-y[i+1]
	return float64(v) / (1 + float64(float64(float64(dx*dx)+float64(dy*dy))*invA)), dx, dy
}

// attractTail adds the last entry of a row of odd length (cs and vs are
// the whole row) to the even sums, and returns the even and odd sums added.
func attractTail(y []float64, cs []int32, vs []float32, yx, yy, invA, fx0, fy0, fx1, fy1 float64) (fx, fy float64) {
	if k := len(cs) - 1; k%2 == 0 {
		s, dx, dy := attractTerm(y, cs[k], vs[k], yx, yy, invA)
		fx0 += float64(s * dx)
		fy0 += float64(s * dy)
	}
	return fx0 + fx1, fy0 + fy1
}
