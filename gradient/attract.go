package gradient

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
	k := 0
	for ; k+1 < len(cs); k += 2 {
		j0, j1 := int(cs[k]), int(cs[k+1])
		dx0, dy0 := yx-y[2*j0], yy-y[2*j0+1]
		dx1, dy1 := yx-y[2*j1], yy-y[2*j1+1]
		s0 := float64(vs[k]) / (1 + float64(float64(float64(dx0*dx0)+float64(dy0*dy0))*invA))
		s1 := float64(vs[k+1]) / (1 + float64(float64(float64(dx1*dx1)+float64(dy1*dy1))*invA))
		fx0 += float64(s0 * dx0)
		fy0 += float64(s0 * dy0)
		fx1 += float64(s1 * dx1)
		fy1 += float64(s1 * dy1)
	}
	return attractTail(y, cs[k:], vs[k:], yx, yy, invA, fx0, fy0, fx1, fy1)
}

// attractTail adds the last entry of an odd row (cs and vs hold at most
// the row's entries after its pairs; only a last odd one is used) to the
// even sums, and returns the even and odd sums added.
func attractTail(y []float64, cs []int32, vs []float32, yx, yy, invA, fx0, fy0, fx1, fy1 float64) (fx, fy float64) {
	if len(cs)%2 == 1 {
		k := len(cs) - 1
		j := int(cs[k])
		dx, dy := yx-y[2*j], yy-y[2*j+1]
		s := float64(vs[k]) / (1 + float64(float64(float64(dx*dx)+float64(dy*dy))*invA))
		fx0 += float64(s * dx)
		fy0 += float64(s * dy)
	}
	return fx0 + fx1, fy0 + fy1
}
