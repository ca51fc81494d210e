//go:build !amd64 || purego

package knn

// dist2x4 returns dist2(a, b0), …, dist2(a, b3). This is the pure-Go
// version for processors without the SSE kernel (or with the purego build
// tag); it gives the same bits. Each b must be at least as long as a.
func dist2x4(a, b0, b1, b2, b3 []float32) (float32, float32, float32, float32) {
	return dist2(a, b0), dist2(a, b1), dist2(a, b2), dist2(a, b3)
}
