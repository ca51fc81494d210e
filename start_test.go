package nightjar

import (
	"slices"
	"testing"
)

// TestPlaceAround is a hand-worked example of the placement. Rows 0 and 3
// are sampled at (0, 0) and (4, 0). Row 1 has affinities 0.1 to row 0 and
// 0.3 to row 3, so it goes to (0·0.1 + 4·0.3)/0.4 = (3, 0) in the first
// pass. Row 2 has affinities to rows 1 (0.2) and 3 (0.1): in the first pass
// only row 3 is placed, so row 2 goes to (4, 0) (passes do not see rows
// placed in the same pass). Row 4 has no affinities: the mean of the sampled
// rows, (2, 0).
func TestPlaceAround(t *testing.T) {
	// Symmetric P over 5 rows, columns ascending per row.
	P := CSR{N: 5,
		Offsets: []int64{0, 1, 4, 6, 8, 8},
		Cols:    []int32{1, 0, 2, 3, 1, 3, 1, 2},
		Vals:    []float32{0.1, 0.1, 0.2, 0.3, 0.2, 0.1, 0.3, 0.1},
	}
	got := placeAround(P, []int{0, 3}, []float64{0, 0, 4, 0}, 2)
	want := []float64{0, 0, 3, 0, 4, 0, 4, 0, 2, 0}
	for k := range want {
		if d := got[k] - want[k]; d > 1e-6 || d < -1e-6 {
			t.Fatalf("placeAround = %v, want %v", got, want)
		}
	}
}

func TestIDLikeColumns(t *testing.T) {
	cases := []struct {
		in   []string
		want []string
	}{
		{[]string{"pc_1", "pc_2"}, nil},
		{[]string{"id", "pc_1"}, []string{"id"}},
		{[]string{"ID", "Cell_ID", "width", "idle", "__index_level_0__", "Index"}, []string{"ID", "Cell_ID", "__index_level_0__", "Index"}},
		{[]string{"rowid", "row_id", "row", "grid"}, []string{"rowid", "row_id"}},
	}
	for _, c := range cases {
		if got := idLikeColumns(c.in); !slices.Equal(got, c.want) {
			t.Errorf("idLikeColumns(%q) = %q, want %q", c.in, got, c.want)
		}
	}
}
