package nightjar

import (
	"fmt"
	"slices"

	"nightjar/knn"
)

// The neighbours of new rows among the reference rows. Distances are
// squared Euclidean between rows under the metric (L2-normalised rows for
// cosine), each accumulated in float64 and rounded once to float32
// (knn.Dist2); lists are sorted by (distance, reference row). The exact
// search is knn.Reference.Search: every new row against every reference
// row, screened with gonum's blas32.Gemm as the knn package's own exact
// search, so the result is the exact k nearest.

// refRows is the reference side of the neighbour search.
type refRows struct {
	x      Matrix // reference rows under the metric
	metric knn.Metric
	ref    *knn.Reference // prepared for the exact search; nil without it
}

// newRefRows prepares the reference rows x for queries under metric; the
// centred tiles of the exact search are made only when exact is true.
func newRefRows(x Matrix, metric knn.Metric, exact bool) (*refRows, error) {
	if !exact {
		m, err := knn.MetricRows(x, metric)
		if err != nil {
			return nil, err
		}
		return &refRows{x: m, metric: metric}, nil
	}
	ref, err := knn.NewReference(x, metric)
	if err != nil {
		return nil, err
	}
	return &refRows{x: ref.Rows(), metric: metric, ref: ref}, nil
}

// exact returns the k nearest reference rows of each row of q (rows under
// the metric already), row-major k per row, nearest first. exclude, when
// not nil, names for each query a reference row it may not have (−1 for
// none): the leave-one-out of a reference row re-placed. progress, when not
// nil, is called with the rows done.
func (r *refRows) exact(q Matrix, k int, exclude []int32, threads int, progress func(done int64)) ([]int32, []float32, error) {
	if r.ref == nil {
		return nil, nil, fmt.Errorf("neighbours of new rows: the reference was not prepared for the exact search")
	}
	opt := knn.ExactOptions{Options: knn.Options{Threads: threads}}
	if progress != nil {
		opt.Progress = func(done, _ int64) { progress(done) }
	}
	idx, d2, err := r.ref.Search(q, k, exclude, opt)
	if err != nil {
		return nil, nil, fmt.Errorf("neighbours of new rows: %w", err)
	}
	return idx, d2, nil
}

// nbCandidate is a reference row and its squared distance.
type nbCandidate struct {
	d float32
	i int32
}

// worse reports whether a ranks after b: larger distance, or equal
// distance and larger row.
func nbWorse(a, b nbCandidate) bool { return a.d > b.d || (a.d == b.d && a.i > b.i) }

// nbSort sorts candidates nearest first.
func nbSort(h []nbCandidate) {
	slices.SortFunc(h, func(a, b nbCandidate) int {
		switch {
		case nbWorse(b, a):
			return -1
		case nbWorse(a, b):
			return 1
		}
		return 0
	})
}

// heapify arranges h as a max-heap under worse (worst at h[0]).
func nbHeapify(h []nbCandidate) {
	for i := len(h)/2 - 1; i >= 0; i-- {
		nbSiftDown(h, i)
	}
}

func nbSiftDown(h []nbCandidate, i int) {
	n := len(h)
	for {
		l := 2*i + 1
		if l >= n {
			return
		}
		w := l
		if r := l + 1; r < n && nbWorse(h[r], h[l]) {
			w = r
		}
		if !nbWorse(h[w], h[i]) {
			return
		}
		h[i], h[w] = h[w], h[i]
		i = w
	}
}
