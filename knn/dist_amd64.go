//go:build amd64 && !purego

package knn

// dist2x4SSE is written in dist_amd64.s. The pointers must each address n
// float32 values; n may be 0.
//
//go:noescape
func dist2x4SSE(a, b0, b1, b2, b3 *float32, n int) (d0, d1, d2, d3 float32)

// dist2x4 returns dist2(a, b0), …, dist2(a, b3), the same bits, four at a
// time with packed SSE instructions (part of every amd64 processor, so no
// feature check is needed). Each b must be at least as long as a.
func dist2x4(a, b0, b1, b2, b3 []float32) (float32, float32, float32, float32) {
	n := len(a)
	if n == 0 {
		return 0, 0, 0, 0
	}
	b0, b1, b2, b3 = b0[:n], b1[:n], b2[:n], b3[:n]
	return dist2x4SSE(&a[0], &b0[0], &b1[0], &b2[0], &b3[0], n)
}
