package knn

import (
	"math"
	"slices"
	"sort"
	"testing"

	"nightjar/internal/core"
)

// naiveQueries is the O(M·N·D) reference for queries outside the table: every
// distance summed in float64 in the plainest way (for Cosine 2 − 2·cos from
// the raw rows), sorted by (distance rounded to float32, row).
func naiveQueries(ref, q core.Matrix, k int, m Metric) []int32 {
	var out []int32
	for i := 0; i < q.N; i++ {
		type pair struct {
			d float64
			j int
		}
		ps := make([]pair, ref.N)
		for j := 0; j < ref.N; j++ {
			var d, aa, bb, ab float64
			for l := 0; l < ref.D; l++ {
				a, b := float64(q.Data[i*q.D+l]), float64(ref.Data[j*ref.D+l])
				d += (a - b) * (a - b)
				aa += a * a
				bb += b * b
				ab += a * b
			}
			if m == Cosine {
				d = math.Max(0, 2-2*ab/math.Sqrt(aa*bb))
			}
			ps[j] = pair{d, j}
		}
		sort.Slice(ps, func(a, b int) bool {
			da, db := float32(ps[a].d), float32(ps[b].d)
			return da < db || (da == db && ps[a].j < ps[b].j)
		})
		for _, p := range ps[:k] {
			out = append(out, int32(p.j))
		}
	}
	return out
}

// TestReferenceSearch: the exact search of rows outside the table agrees
// with the double loop above (a query that copies a reference row finds it
// at distance 0), for both metrics (Euclidean up to k = N); searching the
// table's own rows, each excluding itself, gives the bits of Exact.
func TestReferenceSearch(t *testing.T) {
	all := randMatrix(530, 7, 41, 0.2, 1)
	ref := core.Matrix{N: 400, D: 7, Data: all.Data[:400*7]}
	q := core.Matrix{N: 130, D: 7, Data: all.Data[400*7:]}
	copy(q.Data[:7], ref.Data[5*7:6*7])
	for _, m := range []Metric{Euclidean, Cosine} {
		r, err := NewReference(ref, m)
		if err != nil {
			t.Fatal(err)
		}
		qm, err := MetricRows(q, m)
		if err != nil {
			t.Fatal(err)
		}
		ks := []int{1, 12, 400}
		if m == Cosine {
			// 2 − 2·cos and the squared distance of normalised rows round
			// differently: far down the list near-ties may swap.
			ks = ks[:2]
		}
		for _, k := range ks {
			idx, d2, err := r.Search(qm, k, nil, ExactOptions{Options: Options{Threads: 2}})
			if err != nil {
				t.Fatal(err)
			}
			if want := naiveQueries(ref, q, k, m); !slices.Equal(idx, want) {
				t.Errorf("%s, k = %d: neighbours differ from the double loop", m, k)
			}
			if idx[0] != 5 || d2[0] != 0 {
				t.Errorf("%s, k = %d: the copy of row 5 found %d at %g", m, k, idx[0], d2[0])
			}
		}
		g, err := Exact(ref, 9, ExactOptions{Options: Options{Metric: m}})
		if err != nil {
			t.Fatal(err)
		}
		self := make([]int32, ref.N)
		for i := range self {
			self[i] = int32(i)
		}
		idx, d2, err := r.Search(r.Rows(), 9, self, ExactOptions{})
		if err != nil {
			t.Fatal(err)
		}
		if !slices.Equal(idx, g.Index) || !slices.Equal(d2, g.Dist2) {
			t.Errorf("%s: the table's rows, each excluding itself, differ from Exact", m)
		}
		if _, _, err := r.Search(r.Rows(), 400, self, ExactOptions{}); err == nil {
			t.Errorf("%s: k = N with exclusions was accepted", m)
		}
	}
}
