package knn

import (
	"fmt"
	"sync"

	"nightjar/internal/core"
	"nightjar/internal/par"
)

// Reference is a table prepared once for exact searches of other rows among
// its rows, such as new rows placed into the map of a finished run: its rows
// under the metric, centred and tiled as Exact uses them.
type Reference struct {
	rows     core.Matrix
	metric   Metric
	c, norms []float32
	mean     []float64
}

// NewReference prepares the N rows of x for Search under metric m. Memory:
// a centred copy of x (under Cosine also a normalised one). A row of zeros
// under Cosine gives a *ZeroRowError.
func NewReference(x core.Matrix, m Metric) (*Reference, error) {
	rows, err := metricRows(x, m)
	if err != nil {
		return nil, err
	}
	r := &Reference{rows: rows, metric: m}
	r.c, r.norms, r.mean = centreRows(rows)
	return r, nil
}

// Rows returns the reference rows under the metric (L2-normalised under
// Cosine), the rows Search measures distances to.
func (r *Reference) Rows() core.Matrix { return r.rows }

// MetricRows returns x under the metric m: x itself for Euclidean (no copy),
// an L2-normalised copy for Cosine (a *ZeroRowError for a row of zeros).
// Search takes its queries in this form.
func MetricRows(x core.Matrix, m Metric) (core.Matrix, error) { return metricRows(x, m) }

// Search returns the exact k nearest reference rows of each row of q (rows
// already under the metric, MetricRows), k per query, nearest first, with
// their squared distances: the same distances, tie rule and screen as Exact.
// exclude is nil, or names for each query a reference row it may not have
// (−1 for none). opt.Metric is not used; opt.Progress counts queries.
//
// Preconditions: 1 ≤ k ≤ N (k ≤ N−1 with exclude); q has the reference's
// columns.
func (r *Reference) Search(q core.Matrix, k int, exclude []int32, opt ExactOptions) (index []int32, dist2 []float32, err error) {
	n := r.rows.N
	if k < 1 || k > n || (exclude != nil && k > n-1) {
		return nil, nil, fmt.Errorf("exact neighbours: k = %d for %d reference rows", k, n)
	}
	if q.D != r.rows.D {
		return nil, nil, fmt.Errorf("exact neighbours: the queries have %d columns, the reference %d", q.D, r.rows.D)
	}
	if exclude != nil && len(exclude) != q.N {
		return nil, nil, fmt.Errorf("exact neighbours: %d exclusions for %d queries", len(exclude), q.N)
	}
	index = make([]int32, q.N*k)
	dist2 = make([]float32, q.N*k)
	coef := float32(2 * float64(q.D+8) * 0x1p-24) // the screen's bound, as in search
	threads := opt.threads()
	scratch := make([]*exactScratch, threads)
	var mu sync.Mutex
	var done int64
	par.Blocks(q.N, queryBlock, threads, func(w, _, lo, hi int) {
		if scratch[w] == nil {
			scratch[w] = newExactScratch(q.D, k)
		}
		scratch[w].loadQueries(q, r.mean, exclude, lo, hi)
		scratch[w].block(r.rows, r.c, r.norms, hi-lo, k, coef, index[lo*k:hi*k], dist2[lo*k:hi*k])
		if opt.Progress != nil {
			mu.Lock()
			done += int64(hi - lo)
			opt.Progress(done, int64(q.N))
			mu.Unlock()
		}
	})
	return index, dist2, nil
}

// loadQueries loads rows lo..hi−1 of q as queries: centred by the
// reference's column means (as centreRows centres the reference), with
// their norms and the rows they leave out.
func (s *exactScratch) loadQueries(q core.Matrix, mean []float64, exclude []int32, lo, hi int) {
	D := q.D
	for b := range hi - lo {
		row := q.Data[(lo+b)*D : (lo+b+1)*D]
		var sum float64
		for l, v := range row {
			cv := float32(float64(v) - mean[l])
			s.q[b*D+l] = cv
			sum += float64(cv) * float64(cv)
		}
		s.rows[b], s.qn[b], s.skip[b] = row, float32(sum), -1
		if exclude != nil {
			s.skip[b] = exclude[lo+b]
		}
	}
}

// Dist2 is the squared Euclidean distance between a and b (same length) as
// the exact search reports it: accumulated in float64, rounded once.
func Dist2(a, b []float32) float32 { return exactDist2(a, b) }

// FastDist2 is the float32 squared distance with four partial sums in a
// fixed order that the approximate searches rank candidates by: the same
// bits for (a, b) and (b, a) on every call.
func FastDist2(a, b []float32) float32 { return dist2(a, b) }
