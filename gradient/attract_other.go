//go:build !amd64 || purego

package gradient

// attractRow is attractRowGo on processors without the SSE2 kernel (or
// with the purego build tag).
func attractRow(y []float64, cs []int32, vs []float32, yx, yy, invA float64) (fx, fy float64) {
	return attractRowGo(y, cs, vs, yx, yy, invA)
}
