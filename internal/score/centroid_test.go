package score

import (
	"math"
	"testing"

	"nightjar/internal/core"
)

// TestCentroidRank uses hand-worked examples of Kendall's τ (Kendall 1938:
// τ = (concordant − discordant)/pairs, no ties).
func TestCentroidRank(t *testing.T) {
	// Groups a, b, c with input centroids 0, 1, 3 (1-D, two rows each around
	// the centroid): pair distances ab = 1, ac = 3, bc = 2.
	x := core.Matrix{N: 7, D: 1, Data: []float32{-0.5, 0.5, 1, 1, 2, 4, 99}}
	labels := []string{"a", "a", "b", "b", "c", "c", ""} // the unlabelled row is left out
	for _, tc := range []struct {
		name string
		y    []float64 // 2-D map
		want float64
	}{
		// Map centroids 0, 2, 3 on a line: distances 2, 3, 1. Of the three
		// pairs of pairs, (ab, ac) and (ac, bc) are concordant, (ab, bc)
		// discordant: τ = (2 − 1)/3.
		{"hand-worked", []float64{0, 0, 0, 0, 2, 5, 2, -5, 3, 1, 3, -1, 50, 50}, 1.0 / 3},
		// The input itself, scaled and rotated: every pair concordant.
		{"same layout", []float64{0, 0, 0, 0, 0, 2, 0, 2, 0, 6, 0, 6, 0, 0}, 1},
	} {
		if got := CentroidRank(x, tc.y, 2, labels); math.Abs(got-tc.want) > 1e-12 {
			t.Errorf("%s: τ = %v, want %v", tc.name, got, tc.want)
		}
	}
	if got := CentroidRank(x, make([]float64, 14), 2, []string{"a", "a", "b", "b", "", "", ""}); !math.IsNaN(got) {
		t.Errorf("two groups: %v, want NaN", got)
	}
}
