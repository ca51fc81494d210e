package knn

import (
	"fmt"
	"slices"
	"sync"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas32"

	"nightjar/internal/core"
	"nightjar/internal/par"
)

// ExactLimit is the largest number of rows Exact accepts. Exact costs N²·D
// multiply-adds. BenchmarkExact (D = 50, k = 90) measured on the project
// machine (AMD EPYC, 2 cores, shared) 85–111 million row pairs per CPU-second:
// N = 20,000 took 4.7 CPU-s, N = 100,000 took 90 CPU-s, i.e. about 45 s of
// wall time on 2 idle cores. At the limit, 200,000 rows, that is about
// 3 minutes on 2 idle cores (6 CPU-minutes), the most an exact reference path
// should cost; above it the time grows fourfold per doubling of N and the
// approximate methods (Descent, HNSW) are the only sensible ones.
const ExactLimit = 200_000

// Block sizes of the exact search. A block of queryBlock query rows is the unit
// of parallel work (fixed, so results do not depend on the thread count); the
// distances from a block to all rows are computed refTile rows at a time.
// queryBlock × refTile is kept below 4 gonum blocks of 64×64 so that
// blas32.Gemm stays on its serial path and does not start goroutines of its
// own inside ours.
const (
	queryBlock = 64
	refTile    = 192
)

// ExactOptions configure Exact and ExactRows.
type ExactOptions struct {
	Options
	// Progress, when non-nil, is called after each finished block of 64
	// rows with the number of rows done so far and the total. Calls are
	// serialised and done is increasing; the last call has done == total.
	Progress func(done, total int64)
}

// TooLargeError is returned by Exact for more rows than ExactLimit.
type TooLargeError struct {
	Rows, Limit int
}

// Error says how many rows were given and what to use instead.
func (e *TooLargeError) Error() string {
	return fmt.Sprintf("exact neighbours are limited to %d rows (the cost grows as N²), this table has %d: use an approximate method (descent or hnsw)", e.Limit, e.Rows)
}

// Exact returns the exact k-nearest-neighbour graph of the N rows of x under
// opt.Metric: for every row its k nearest other rows, nearest first, with
// their squared distances. Ties in distance are broken by the lower row index,
// so the graph is fully determined by x, k and the metric, and is
// bit-identical for any opt.Threads. A row is never its own neighbour, but an
// exact duplicate of it is a neighbour at distance 0. Each distance is the sum
// of squared coordinate differences accumulated in float64 and rounded once to
// float32 (under Cosine, of the L2-normalised rows).
//
// Preconditions: 1 ≤ k ≤ N−1 and N ≤ ExactLimit (else a *TooLargeError);
// len(x.Data) == N·D. Under Cosine, a row of zeros gives a *ZeroRowError.
// Memory: a centred copy of x (N·D float32; under Cosine also a normalised
// copy) plus the N×k result.
func Exact(x core.Matrix, k int, opt ExactOptions) (*core.Graph, error) {
	if x.N > ExactLimit {
		return nil, &TooLargeError{Rows: x.N, Limit: ExactLimit}
	}
	idx, d2, err := search(x, nil, k, opt)
	if err != nil {
		return nil, err
	}
	return &core.Graph{N: x.N, K: k, Index: idx, Dist2: d2}, nil
}

// ExactRows returns the exact k nearest neighbours, among all N rows of x, of
// the listed rows only: row rows[q]'s neighbours are index[q·k:(q+1)·k], nearest
// first, with squared distances in dist2 at the same positions. The answer for a
// row is the same as its row of Exact (same tie rule, self excluded). It has no
// limit on N: the cost is len(rows)·N·D, and memory a centred copy of x (and
// under Cosine a normalised one). Progress counts listed rows.
//
// Preconditions: 1 ≤ k ≤ N−1; every listed row in [0, N) (else an error).
func ExactRows(x core.Matrix, rows []int32, k int, opt ExactOptions) (index []int32, dist2 []float32, err error) {
	for q, r := range rows {
		if r < 0 || int(r) >= x.N {
			return nil, nil, fmt.Errorf("exact neighbours: row %d of the list is %d, outside [0, %d)", q, r, x.N)
		}
	}
	if len(rows) == 0 {
		if k < 1 || k >= x.N {
			return nil, nil, fmt.Errorf("exact neighbours: k = %d must be between 1 and N−1 = %d", k, x.N-1)
		}
		return []int32{}, []float32{}, nil
	}
	return search(x, rows, k, opt)
}

// search is the blocked exact search shared by Exact (rows == nil: all rows)
// and ExactRows.
//
// Distances are screened with ‖a‖² + ‖b‖² − 2a·b on a centred copy of the rows
// (centring changes no distance and keeps the norms, hence the cancellation
// error, small), the dot products coming from gonum's float32 blas32.Gemm.
// BenchmarkDistanceTile (64×192 tile, D = 50, medians of 5 on the shared
// 2-core machine under load): Gemm on transposed tiles 16 ns per pair, Gemm on
// row-major tiles 27 ns, a hand-written 2×4 register-blocked dot loop 63 ns, a
// plain loop of squared differences 133 ns; on the machine while quiet the
// row-major Gemm took 10 ns and a 4-way unrolled difference loop 20 ns. So the
// screen uses Gemm on transposed tiles.
//
// The screen is not trusted for ranking: each row keeps a bounded max-heap of
// its k best candidates keyed by the distance recomputed directly (float64
// sum of squared differences, exactDist2), and a candidate is rejected on the
// screen alone only when the screened distance minus a rounding-error bound
// still exceeds the heap's worst. The bound is 2·(D+8)·u·(‖a‖²+‖b‖²), u = 2⁻²⁴,
// twice the classical worst case for a float32 dot product of length D plus
// the additions (Higham, Accuracy and Stability of Numerical Algorithms, §3.1).
// So the result is the exact k smallest by (dist2, index), duplicates get
// exactly 0, and the screen only saves work.
func search(x core.Matrix, rows []int32, k int, opt ExactOptions) ([]int32, []float32, error) {
	if x.N < 2 {
		return nil, nil, fmt.Errorf("exact neighbours: need at least 2 rows, got %d", x.N)
	}
	if k < 1 || k >= x.N {
		return nil, nil, fmt.Errorf("exact neighbours: k = %d must be between 1 and N−1 = %d", k, x.N-1)
	}
	m, err := metricRows(x, opt.Metric)
	if err != nil {
		return nil, nil, fmt.Errorf("exact neighbours: %w", err)
	}
	c, norms, _ := centreRows(m)

	nq := x.N
	if rows != nil {
		nq = len(rows)
	}
	index := make([]int32, nq*k)
	dist := make([]float32, nq*k)
	coef := float32(2 * float64(m.D+8) * 0x1p-24)

	threads := opt.threads()
	scratch := make([]*exactScratch, threads) // one per worker, made on first use
	var mu sync.Mutex
	var done int64
	par.Blocks(nq, queryBlock, threads, func(w, _, lo, hi int) {
		if scratch[w] == nil {
			scratch[w] = newExactScratch(m.D, k)
		}
		scratch[w].loadTable(m, c, norms, rows, lo, hi)
		scratch[w].block(m, c, norms, hi-lo, k, coef, index[lo*k:hi*k], dist[lo*k:hi*k])
		if opt.Progress != nil {
			mu.Lock()
			done += int64(hi - lo)
			opt.Progress(done, int64(nq))
			mu.Unlock()
		}
	})
	return index, dist, nil
}

// centreRows returns m minus its column means (means summed in float64, in
// row order), laid out for the dot-product tiles, and the squared norms of the
// centred rows. The layout is tile-major and transposed inside a tile: rows
// t·refTile … t·refTile+refTile−1 form a D×refTile block (coordinate l of row
// t·refTile+j at offset t·D·refTile + l·refTile + j), the last tile padded with
// zeros. With the tile transposed, blas32.Gemm runs its A·B path, which is
// made of axpy operations of length refTile instead of dot products of length D:
// 1.5–1.8× faster at D = 50 on the project machine (BenchmarkDistanceTile).
func centreRows(m core.Matrix) (c, norms []float32, mean []float64) {
	mean = make([]float64, m.D)
	for i := 0; i < m.N; i++ {
		for j, v := range m.Data[i*m.D : (i+1)*m.D] {
			mean[j] += float64(v)
		}
	}
	for j := range mean {
		mean[j] /= float64(m.N)
	}
	tiles := (m.N + refTile - 1) / refTile
	c = make([]float32, tiles*m.D*refTile)
	norms = make([]float32, m.N)
	for i := 0; i < m.N; i++ {
		var s float64
		tile := c[(i/refTile)*m.D*refTile:]
		j := i % refTile
		for l, v := range m.Data[i*m.D : (i+1)*m.D] {
			cv := float32(float64(v) - mean[l])
			tile[l*refTile+j] = cv
			s += float64(cv) * float64(cv)
		}
		norms[i] = float32(s)
	}
	return c, norms, mean
}

// exactScratch is one worker's memory for the exact search.
type exactScratch struct {
	q    []float32 // queryBlock×D centred query rows
	dots []float32 // queryBlock×refTile dot products
	lb   []float32 // refTile screened lower bounds, one query row at a time
	heap []exCand  // queryBlock×k candidates
	// The block's queries: each one's row under the metric, the squared
	// norm of its centred row, and the row it may not have as a neighbour
	// (itself for a row of the table, −1 for none).
	rows [][]float32
	qn   []float32
	skip []int32
}

type exCand struct {
	d float32
	i int32
}

// exWorse reports whether a ranks after b: larger distance, or equal distance
// and larger index.
func exWorse(a, b exCand) bool {
	return a.d > b.d || (a.d == b.d && a.i > b.i)
}

func newExactScratch(d, k int) *exactScratch {
	return &exactScratch{
		q:    make([]float32, queryBlock*d),
		dots: make([]float32, queryBlock*refTile),
		lb:   make([]float32, refTile),
		heap: make([]exCand, queryBlock*k),
		rows: make([][]float32, queryBlock),
		qn:   make([]float32, queryBlock),
		skip: make([]int32, queryBlock),
	}
}

// loadTable loads rows lo..hi−1 of the table as queries (positions in rows,
// or row numbers when rows is nil): their centred coordinates from the tiles
// c, their norms, and each one leaves itself out.
func (s *exactScratch) loadTable(m core.Matrix, c, norms []float32, rows []int32, lo, hi int) {
	D := m.D
	for q := range hi - lo {
		r := lo + q
		if rows != nil {
			r = int(rows[lo+q])
		}
		tile, j := c[(r/refTile)*D*refTile:], r%refTile
		for l := 0; l < D; l++ {
			s.q[q*D+l] = tile[l*refTile+j]
		}
		s.rows[q], s.qn[q], s.skip[q] = m.Data[r*D:(r+1)*D], norms[r], int32(r)
	}
}

// block finds the neighbours among the rows of m (centred in the tiles c,
// with norms) of the bn queries loaded, and writes them, sorted, into index
// and dist.
func (s *exactScratch) block(m core.Matrix, c, norms []float32, bn, k int, coef float32, index []int32, dist []float32) {
	D, N := m.D, m.N
	fill := make([]int, bn) // candidates held per query so far
	qa := blas32.General{Rows: bn, Cols: D, Stride: D, Data: s.q[:bn*D]}
	for t0 := 0; t0 < N; t0 += refTile {
		tn := min(refTile, N-t0)
		blas32.Gemm(blas.NoTrans, blas.NoTrans, 1, qa,
			blas32.General{Rows: D, Cols: tn, Stride: refTile, Data: c[t0*D : (t0+refTile)*D]},
			0, blas32.General{Rows: bn, Cols: tn, Stride: refTile, Data: s.dots})
		nr := norms[t0 : t0+tn]
		for q := 0; q < bn; q++ {
			r := int(s.skip[q])
			h := s.heap[q*k : (q+1)*k]
			a := s.rows[q]
			nq := s.qn[q] * (1 - coef)
			dots := s.dots[q*refTile : q*refTile+tn]
			j := 0
			// Fill the heap with the first k other rows, exact distances.
			for ; fill[q] < k && j < tn; j++ {
				id := t0 + j
				if id == r {
					continue
				}
				h[fill[q]] = exCand{exactDist2(a, m.Data[id*D:(id+1)*D]), int32(id)}
				fill[q]++
				if fill[q] == k {
					exHeapify(h)
				}
			}
			if j == tn {
				continue
			}
			// Screen: lower bound of the true distance; only rows whose
			// bound is below the heap's worst get their exact distance.
			lb := s.lb[:tn]
			for jj := j; jj < tn; jj++ {
				lb[jj] = nq + nr[jj]*(1-coef) - 2*dots[jj]
			}
			top := h[0].d
			for ; j < tn; j++ {
				if lb[j] >= top {
					continue
				}
				id := t0 + j
				if id == r {
					continue
				}
				cd := exCand{exactDist2(a, m.Data[id*D:(id+1)*D]), int32(id)}
				if exWorse(h[0], cd) {
					h[0] = cd
					exSiftDown(h, 0)
					top = h[0].d
				}
			}
		}
	}
	s.emit(bn, k, index, dist)
}

// emit sorts the heaps of the first bn queries, nearest first, into index
// and dist.
func (s *exactScratch) emit(bn, k int, index []int32, dist []float32) {
	for q := 0; q < bn; q++ {
		h := s.heap[q*k : (q+1)*k]
		slices.SortFunc(h, func(a, b exCand) int {
			if exWorse(b, a) {
				return -1
			}
			if exWorse(a, b) {
				return 1
			}
			return 0
		})
		for j, cd := range h {
			index[q*k+j] = cd.i
			dist[q*k+j] = cd.d
		}
	}
}

// exHeapify arranges h as a max-heap under worse (worst at h[0]).
func exHeapify(h []exCand) {
	for i := len(h)/2 - 1; i >= 0; i-- {
		exSiftDown(h, i)
	}
}

func exSiftDown(h []exCand, i int) {
	n := len(h)
	for {
		l := 2*i + 1
		if l >= n {
			return
		}
		w := l
		if r := l + 1; r < n && exWorse(h[r], h[l]) {
			w = r
		}
		if !exWorse(h[w], h[i]) {
			return
		}
		h[i], h[w] = h[w], h[i]
		i = w
	}
}
