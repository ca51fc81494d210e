package nightjar

import (
	"fmt"
	"math"
	"slices"
	"sync"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas32"

	"nightjar/internal/par"
	"nightjar/knn"
)

// The neighbours of new rows among the reference rows. Distances are
// squared Euclidean between rows under the metric (L2-normalised rows for
// cosine), each accumulated in float64 and rounded once to float32, as the
// knn package computes them; lists are sorted by (distance, reference row).
// The exact search compares every new row with every reference row, in
// blocks, screening with dot products from gonum's blas32.Gemm as the knn
// package's exact search does (see knn.ExactRows): a nbCandidate is rejected
// on the screen only when its screened distance minus a rounding-error bound
// exceeds the worst kept, so the result is the exact k nearest.

// refRows is the reference side of the neighbour search.
type refRows struct {
	x      Matrix // reference rows under the metric
	metric knn.Metric
	// For the exact search: column means, the centred rows in tiles of
	// placeTile rows (transposed inside a tile), their squared norms.
	mean  []float64
	tiles []float32
	norms []float32
}

// Block sizes of the exact search: placeQueries new rows per unit of
// parallel work, placeTile reference rows per dot-product tile.
const (
	placeQueries = 64
	placeTile    = 192
)

// newRefRows prepares the reference rows x for queries under metric; the
// centred tiles of the exact search are made only when exact is true.
func newRefRows(x Matrix, metric knn.Metric, exact bool) (*refRows, error) {
	m, err := metricMatrix(x, metric)
	if err != nil {
		return nil, err
	}
	r := &refRows{x: m, metric: metric}
	if exact {
		r.centre()
	}
	return r, nil
}

// metricMatrix returns x itself (euclidean) or its L2-normalised rows
// (cosine); a zero row under cosine is a *knn.ZeroRowError.
func metricMatrix(x Matrix, metric knn.Metric) (Matrix, error) {
	if metric != knn.Cosine {
		return x, nil
	}
	out := Matrix{N: x.N, D: x.D, Data: make([]float32, len(x.Data))}
	for i := range x.N {
		a := x.Row(i)
		var s float64
		for _, v := range a {
			s += float64(v) * float64(v)
		}
		if s == 0 {
			return Matrix{}, &knn.ZeroRowError{Row: i}
		}
		inv := 1 / math.Sqrt(s)
		b := out.Data[i*x.D : (i+1)*x.D]
		for j, v := range a {
			b[j] = float32(float64(v) * inv)
		}
	}
	return out, nil
}

// centre makes the centred, tiled copy of the reference rows.
func (r *refRows) centre() {
	m := r.x
	r.mean = make([]float64, m.D)
	for i := range m.N {
		for j, v := range m.Row(i) {
			r.mean[j] += float64(v)
		}
	}
	for j := range r.mean {
		r.mean[j] /= float64(m.N)
	}
	tiles := (m.N + placeTile - 1) / placeTile
	r.tiles = make([]float32, tiles*m.D*placeTile)
	r.norms = make([]float32, m.N)
	for i := range m.N {
		tile := r.tiles[(i/placeTile)*m.D*placeTile:]
		j := i % placeTile
		var s float64
		for l, v := range m.Row(i) {
			cv := float32(float64(v) - r.mean[l])
			tile[l*placeTile+j] = cv
			s += float64(cv) * float64(cv)
		}
		r.norms[i] = float32(s)
	}
}

// dist2 is the squared Euclidean distance of a and b accumulated in float64
// (two partial sums, as the knn package's exact distance) and rounded once.
func refDist2(a, b []float32) float32 {
	b = b[:len(a)]
	var s0, s1 float64
	j := 0
	for ; j+2 <= len(a); j += 2 {
		d0 := float64(a[j]) - float64(b[j])
		d1 := float64(a[j+1]) - float64(b[j+1])
		s0 += d0 * d0
		s1 += d1 * d1
	}
	if j < len(a) {
		d := float64(a[j]) - float64(b[j])
		s0 += d * d
	}
	return float32(s0 + s1)
}

// nbCandidate is a reference row and its squared distance.
type nbCandidate struct {
	d float32
	i int32
}

// worse reports whether a ranks after b: larger distance, or equal
// distance and larger row.
func nbWorse(a, b nbCandidate) bool { return a.d > b.d || (a.d == b.d && a.i > b.i) }

// exact returns the k nearest reference rows of each row of q (rows under
// the metric already), row-major k per row, nearest first. exclude, when
// not nil, names for each query a reference row it may not have (−1 for
// none): the leave-one-out of a reference row re-placed. progress, when not
// nil, is called with the rows done.
func (r *refRows) exact(q Matrix, k int, exclude []int32, threads int, progress func(done int64)) ([]int32, []float32, error) {
	if k < 1 || k > r.x.N || (exclude != nil && k > r.x.N-1) {
		return nil, nil, fmt.Errorf("neighbours of new rows: k = %d for %d reference rows", k, r.x.N)
	}
	if q.D != r.x.D {
		return nil, nil, fmt.Errorf("neighbours of new rows: %d features, the reference has %d", q.D, r.x.D)
	}
	index := make([]int32, q.N*k)
	dist := make([]float32, q.N*k)
	coef := float32(2 * float64(q.D+8) * 0x1p-24) // knn's screening bound
	threads = max(1, threads)
	scratch := make([]*exactScratch, threads)
	var mu sync.Mutex
	var done int64
	par.Blocks(q.N, placeQueries, threads, func(w, _, lo, hi int) {
		if scratch[w] == nil {
			scratch[w] = &exactScratch{q: make([]float32, placeQueries*q.D), dots: make([]float32, placeQueries*placeTile),
				qn: make([]float32, placeQueries), heap: make([]nbCandidate, placeQueries*k)}
		}
		scratch[w].block(r, q, lo, hi, k, coef, exclude, index[lo*k:hi*k], dist[lo*k:hi*k])
		if progress != nil {
			mu.Lock()
			done += int64(hi - lo)
			progress(done)
			mu.Unlock()
		}
	})
	return index, dist, nil
}

type exactScratch struct {
	q    []float32 // centred query rows
	dots []float32
	qn   []float32 // their squared norms
	heap []nbCandidate
}

// block finds the neighbours of queries lo..hi−1.
func (s *exactScratch) block(r *refRows, q Matrix, lo, hi, k int, coef float32, exclude []int32, index []int32, dist []float32) {
	D, N, bn := q.D, r.x.N, hi-lo
	for b := range bn {
		var nsum float64
		for l, v := range q.Row(lo + b) {
			cv := float32(float64(v) - r.mean[l])
			s.q[b*D+l] = cv
			nsum += float64(cv) * float64(cv)
		}
		s.qn[b] = float32(nsum)
	}
	fill := make([]int, bn)
	qa := blas32.General{Rows: bn, Cols: D, Stride: D, Data: s.q[:bn*D]}
	for t0 := 0; t0 < N; t0 += placeTile {
		tn := min(placeTile, N-t0)
		blas32.Gemm(blas.NoTrans, blas.NoTrans, 1, qa,
			blas32.General{Rows: D, Cols: tn, Stride: placeTile, Data: r.tiles[t0*D : (t0+placeTile)*D]},
			0, blas32.General{Rows: bn, Cols: tn, Stride: placeTile, Data: s.dots})
		for b := range bn {
			skip := int32(-1)
			if exclude != nil {
				skip = exclude[lo+b]
			}
			h := s.heap[b*k : (b+1)*k]
			a := q.Row(lo + b)
			nq := s.qn[b] * (1 - coef)
			dots := s.dots[b*placeTile : b*placeTile+tn]
			for j := range tn {
				id := int32(t0 + j)
				if id == skip {
					continue
				}
				if fill[b] < k {
					h[fill[b]] = nbCandidate{refDist2(a, r.x.Row(int(id))), id}
					fill[b]++
					if fill[b] == k {
						nbHeapify(h)
					}
					continue
				}
				if nq+r.norms[id]*(1-coef)-2*dots[j] >= h[0].d {
					continue
				}
				c := nbCandidate{refDist2(a, r.x.Row(int(id))), id}
				if nbWorse(h[0], c) {
					h[0] = c
					nbSiftDown(h, 0)
				}
			}
		}
	}
	for b := range bn {
		h := s.heap[b*k : (b+1)*k]
		nbSort(h)
		for j, c := range h {
			index[b*k+j], dist[b*k+j] = c.i, c.d
		}
	}
}

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
