package bench

import (
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"slices"
	"sync"

	"nightjar/ingest"
)

// Space is a set of points with squared Euclidean distances between them: the
// input matrix (InputSpace) or a map (MapSpace). The scores below compute, for
// each sampled row, its distances to every row, so they cost O(|S|·N·D).
type Space interface {
	// Len returns the number of points N.
	Len() int
	// Dist2Row sets out[j] to the squared distance between points i and j for
	// every j (out[i] = 0). len(out) must be Len().
	Dist2Row(i int, out []float64)
}

// InputSpace returns the rows of x as a Space. Distances are accumulated in
// float64 from the float32 values.
func InputSpace(x ingest.Matrix) Space { return inputSpace(x) }

// MapSpace returns a map of N = len(y)/dims points of dims coordinates each
// (row-major) as a Space. It panics if dims < 1 or len(y) is not a multiple of dims.
func MapSpace(y []float64, dims int) Space {
	if dims < 1 || len(y)%dims != 0 {
		panic(fmt.Sprintf("bench.MapSpace: len(y) = %d, dims = %d", len(y), dims))
	}
	return mapSpace{y: y, dims: dims}
}

type inputSpace ingest.Matrix

func (s inputSpace) Len() int { return s.N }

func (s inputSpace) Dist2Row(i int, out []float64) {
	d := s.D
	xi := s.Data[i*d : (i+1)*d]
	for j := range s.N {
		xj := s.Data[j*d : (j+1)*d]
		var acc float64
		for f, v := range xi {
			t := float64(v) - float64(xj[f])
			acc += t * t
		}
		out[j] = acc
	}
}

// dist2Rows fills outs[r][j] with the squared distance between rows[r] and j,
// for up to four rows at once: each row j of the matrix is read from memory once
// per four sampled rows, and the four independent sums keep the FPU busy. This
// pass is the whole cost of the scores (O(|S|·N·D)), hence the hand tuning.
func (s inputSpace) dist2Rows(rows []int32, outs [][]float64) {
	d := s.D
	for len(rows) > 0 {
		m := min(len(rows), 4)
		var a [4][]float64
		for r := range 4 {
			a[r] = make([]float64, d)
			src := rows[min(r, m-1)] // pad with the last row; its result is dropped
			for f, v := range s.Data[int(src)*d : (int(src)+1)*d] {
				a[r][f] = float64(v)
			}
		}
		a0, a1, a2, a3 := a[0], a[1][:d], a[2][:d], a[3][:d]
		var o [4][]float64
		for r := range 4 {
			o[r] = outs[min(r, m-1)]
		}
		for j := range s.N {
			xj := s.Data[j*d : (j+1)*d]
			xj = xj[:len(a0)]
			var s0, s1, s2, s3 float64
			for f, v32 := range xj {
				v := float64(v32)
				t0, t1, t2, t3 := v-a0[f], v-a1[f], v-a2[f], v-a3[f]
				s0 += t0 * t0
				s1 += t1 * t1
				s2 += t2 * t2
				s3 += t3 * t3
			}
			// padding rows repeat the last real row: same values, same slot
			o[3][j] = s3
			o[2][j] = s2
			o[1][j] = s1
			o[0][j] = s0
		}
		rows, outs = rows[m:], outs[m:]
	}
}

type mapSpace struct {
	y    []float64
	dims int
}

func (s mapSpace) Len() int { return len(s.y) / s.dims }

func (s mapSpace) Dist2Row(i int, out []float64) {
	d := s.dims
	yi := s.y[i*d : (i+1)*d]
	if d == 2 {
		a, b := yi[0], yi[1]
		for j := range out {
			u, v := a-s.y[2*j], b-s.y[2*j+1]
			out[j] = u*u + v*v
		}
		return
	}
	for j := range out {
		yj := s.y[j*d : (j+1)*d]
		var acc float64
		for f, v := range yi {
			t := v - yj[f]
			acc += t * t
		}
		out[j] = acc
	}
}

// NeighbourScores holds the neighbourhood scores of a map at one k, computed
// on a sample of rows.
type NeighbourScores struct {
	K, Rows         int     // neighbourhood size and number of sampled rows
	Trustworthiness float64 // see Trustworthiness
	Continuity      float64 // see Continuity
	Preservation    float64 // see Preservation
}

// Neighbourhood computes trustworthiness, continuity and neighbourhood
// preservation in one pass (they share the distance computations, which are the
// whole cost: O(|S|·N·(D + dims))). See Trustworthiness for the definitions,
// the arguments and the panics.
func Neighbourhood(x ingest.Matrix, y []float64, dims, k int, sample []int32, threads int) NeighbourScores {
	n := x.N
	if len(x.Data) != n*x.D {
		panic(fmt.Sprintf("bench: matrix %d×%d holds %d values", n, x.D, len(x.Data)))
	}
	if dims < 1 || len(y) != n*dims {
		panic(fmt.Sprintf("bench: map holds %d values, want N·dims = %d·%d", len(y), n, dims))
	}
	if k < 1 || 2*k >= n {
		panic(fmt.Sprintf("bench: k = %d, need 1 ≤ k < N/2 = %d/2", k, n))
	}
	rows := sampleRows(sample, n)
	in, out := inputSpace(x), mapSpace{y: y, dims: dims}

	type part struct{ trust, cont, shared int64 }
	parts := runBlocks(len(rows), threads, func() func(lo, hi int) part {
		w := newRankWork(n, k)
		return func(lo, hi int) (p part) {
			blk := rows[lo:hi]
			in.dist2Rows(blk, w.din[:len(blk)])
			for r, i := range blk {
				din := w.din[r]
				out.Dist2Row(int(i), w.dout)
				kin := w.nearest(din, int(i), w.kin)
				kout := w.nearest(w.dout, int(i), w.kout)
				// U: in the map's k nearest, not in the input's; ranked in input space.
				w.targets = setMinus(w.targets[:0], kout, kin)
				p.trust += w.rankSum(din, int(i), w.targets) - int64(k)*int64(len(w.targets))
				// V: in the input's k nearest, not in the map's; ranked in map space.
				w.targets = setMinus(w.targets[:0], kin, kout)
				p.cont += w.rankSum(w.dout, int(i), w.targets) - int64(k)*int64(len(w.targets))
				p.shared += int64(k - len(w.targets))
			}
			return p
		}
	})
	var trust, cont, shared int64
	for _, p := range parts { // block order; integer sums, exact anyway
		trust += p.trust
		cont += p.cont
		shared += p.shared
	}
	s := float64(len(rows))
	norm := 2 / (s * float64(k) * (2*float64(n) - 3*float64(k) - 1))
	return NeighbourScores{
		K: k, Rows: len(rows),
		Trustworthiness: 1 - norm*float64(trust),
		Continuity:      1 - norm*float64(cont),
		Preservation:    float64(shared) / (s * float64(k)),
	}
}

// Trustworthiness returns T(k) of the map y for the input x (Venna & Kaski 2001,
// "Neighborhood preservation in nonlinear projection methods: an experimental
// study", ICANN):
//
//	T(k) = 1 − 2 / (|S|·k·(2N − 3k − 1)) · Σ_{i∈S} Σ_{j∈U_k(i)} (r(i, j) − k)
//
// where U_k(i) holds the rows among i's k nearest in the map but not among its k
// nearest in the input, and r(i, j) is j's rank by input-space distance from i
// (nearest = 1). With S = all rows this is the published formula; on a sample S
// only N·k is replaced by |S|·k. T = 1 when no map neighbour is a stranger in the
// input; a random map scores about 0.5.
//
// x is the N×D input; y the N×dims map, row-major; sample lists the rows i to
// average over (nil = all rows; see Sample); threads ≤ 0 means GOMAXPROCS. Ranks
// are exact: for each sampled row every distance in both spaces is computed, at a
// cost of O(|S|·N·D). Equal distances are ordered by row index, so the result is
// well defined and does not depend on threads. Trustworthiness panics unless
// 1 ≤ k < N/2 (the normaliser's range of validity), len(y) = N·dims, and every
// sampled row is in [0, N).
func Trustworthiness(x ingest.Matrix, y []float64, dims, k int, sample []int32, threads int) float64 {
	return Neighbourhood(x, y, dims, k, sample, threads).Trustworthiness
}

// Continuity returns C(k) of the map y for the input x (Venna & Kaski 2001): the
// trustworthiness formula with the roles of input and map swapped,
//
//	C(k) = 1 − 2 / (|S|·k·(2N − 3k − 1)) · Σ_{i∈S} Σ_{j∈V_k(i)} (r̂(i, j) − k)
//
// where V_k(i) holds the rows among i's k nearest in the input but not in the
// map, and r̂(i, j) is j's rank by map distance from i (nearest = 1). It measures
// how many true neighbours the map tore away. Arguments, cost, ties and panics
// as for Trustworthiness.
func Continuity(x ingest.Matrix, y []float64, dims, k int, sample []int32, threads int) float64 {
	return Neighbourhood(x, y, dims, k, sample, threads).Continuity
}

// Preservation returns the neighbourhood preservation at k: the mean over the
// sampled rows i of |kNN_input(i) ∩ kNN_map(i)| / k, the share of each row's k
// nearest input neighbours that are also among its k nearest in the map (1 =
// every neighbourhood kept; a random map scores about k/N). Arguments, cost, ties
// and panics as for Trustworthiness.
func Preservation(x ingest.Matrix, y []float64, dims, k int, sample []int32, threads int) float64 {
	return Neighbourhood(x, y, dims, k, sample, threads).Preservation
}

// LabelAccuracy returns the leave-one-out k-nearest-neighbour accuracy of labels
// in the space s (a map, MapSpace, or the input, InputSpace): for each sampled
// row i, its k nearest other rows vote with their labels, and i counts as right
// when the winning label is its own. Ties between labels with the same number of
// votes go to the label of the nearest neighbour among the tied labels (equal
// distances ordered by row index). The result is the share of sampled rows
// predicted right, in [0, 1].
//
// labels has one entry per point; sample lists the rows to score (nil = all);
// threads ≤ 0 means GOMAXPROCS. Cost O(|S|·N·D). LabelAccuracy panics unless
// len(labels) = s.Len(), 1 ≤ k < s.Len() and every sampled row is in range.
func LabelAccuracy(s Space, labels []string, k int, sample []int32, threads int) float64 {
	n := s.Len()
	if len(labels) != n {
		panic(fmt.Sprintf("bench.LabelAccuracy: %d labels for %d points", len(labels), n))
	}
	if k < 1 || k >= n {
		panic(fmt.Sprintf("bench.LabelAccuracy: k = %d, need 1 ≤ k < N = %d", k, n))
	}
	rows := sampleRows(sample, n)
	parts := runBlocks(len(rows), threads, func() func(lo, hi int) int64 {
		w := newRankWork(n, k)
		votes := map[string]int{}
		return func(lo, hi int) (right int64) {
			blk := rows[lo:hi]
			if fast, ok := s.(inputSpace); ok {
				fast.dist2Rows(blk, w.din[:len(blk)])
			} else {
				for r, i := range blk {
					s.Dist2Row(int(i), w.din[r])
				}
			}
			for r, i := range blk {
				nb := w.nearest(w.din[r], int(i), w.kin) // nearest first
				clear(votes)
				best, bestVotes := "", 0
				for _, j := range nb {
					votes[labels[j]]++
				}
				// scanning nearest first, the first label to reach the top count
				// is the tied label with the nearest member
				for _, j := range nb {
					if v := votes[labels[j]]; v > bestVotes {
						best, bestVotes = labels[j], v
					}
				}
				if best == labels[i] {
					right++
				}
			}
			return right
		}
	})
	var right int64
	for _, p := range parts {
		right += p
	}
	return float64(right) / float64(len(rows))
}

// Sample returns min(size, n) distinct row numbers drawn uniformly at random from
// [0, n), in increasing order, deterministic for (n, size, seed). size ≥ n gives
// all rows 0..n−1; size ≤ 0 gives an empty sample. Sample panics if n < 0 or
// n > math.MaxInt32+1.
func Sample(n, size int, seed uint64) []int32 {
	if n < 0 || n > math.MaxInt32+1 {
		panic(fmt.Sprintf("bench.Sample: n = %d out of range", n))
	}
	if size <= 0 {
		return []int32{}
	}
	if size >= n {
		out := make([]int32, n)
		for i := range out {
			out[i] = int32(i)
		}
		return out
	}
	rng := rand.New(rand.NewPCG(seed, 0x73616d706c65)) // "sample"
	// Floyd's algorithm (Bentley & Floyd 1987, CACM 30(9)): size draws, no n-sized array.
	chosen := make(map[int32]struct{}, size)
	out := make([]int32, 0, size)
	for j := n - size; j < n; j++ {
		t := int32(rng.IntN(j + 1))
		if _, dup := chosen[t]; dup {
			t = int32(j)
		}
		chosen[t] = struct{}{}
		out = append(out, t)
	}
	slices.Sort(out)
	return out
}

// sampleRows checks the sample (nil = all rows) against n.
func sampleRows(sample []int32, n int) []int32 {
	if sample == nil {
		return Sample(n, n, 0)
	}
	if len(sample) == 0 {
		panic("bench: empty sample")
	}
	for _, i := range sample {
		if i < 0 || int(i) >= n {
			panic(fmt.Sprintf("bench: sampled row %d outside [0, %d)", i, n))
		}
	}
	return sample
}

// scoreBlock is the number of sampled rows per work block.
const scoreBlock = 4

// runBlocks cuts [0, m) into fixed blocks of scoreBlock, lets up to threads
// goroutines take blocks (each with its own state from newWorker), and returns
// the per-block results in block order.
func runBlocks[T any](m, threads int, newWorker func() func(lo, hi int) T) []T {
	blocks := (m + scoreBlock - 1) / scoreBlock
	if threads <= 0 {
		threads = runtime.GOMAXPROCS(0)
	}
	threads = max(1, min(threads, blocks))
	res := make([]T, blocks)
	next := make(chan int, blocks)
	for b := range blocks {
		next <- b
	}
	close(next)
	var wg sync.WaitGroup
	for range threads {
		wg.Go(func() {
			work := newWorker()
			for b := range next {
				res[b] = work(b*scoreBlock, min(m, (b+1)*scoreBlock))
			}
		})
	}
	wg.Wait()
	return res
}

// rankWork is one goroutine's scratch space.
type rankWork struct {
	k         int
	din       [][]float64 // distances from each row of the block (input space, or the Space scored)
	dout      []float64   // distances from the current row in the map
	kin, kout []int32     // its k nearest, input and map
	targets   []int32
	heap      []int32
	tkeys     []int32
	hist      []int64
	tdist     []float64
}

func newRankWork(n, k int) *rankWork {
	w := &rankWork{
		k: k, din: make([][]float64, scoreBlock), dout: make([]float64, n),
		kin: make([]int32, k), kout: make([]int32, k),
		heap: make([]int32, 0, k),
	}
	for r := range w.din {
		w.din[r] = make([]float64, n)
	}
	return w
}

// less orders rows by (distance, index).
func less(d []float64, a, b int32) bool {
	return d[a] < d[b] || (d[a] == d[b] && a < b)
}

// nearest fills out (len k) with the k rows nearest to i by d, nearest first,
// excluding i, using a bounded max-heap; equal distances are ordered by index.
func (w *rankWork) nearest(d []float64, i int, out []int32) []int32 {
	k := w.k
	h := w.heap[:0]
	// the heap's root is the worst of the current best k
	for j := range d {
		if j == i {
			continue
		}
		jj := int32(j)
		if len(h) < k {
			h = append(h, jj)
			// sift up
			c := len(h) - 1
			for c > 0 {
				p := (c - 1) / 2
				if !less(d, h[p], h[c]) {
					break
				}
				h[p], h[c] = h[c], h[p]
				c = p
			}
			continue
		}
		if !less(d, jj, h[0]) {
			continue
		}
		h[0] = jj
		siftDown(d, h, 0)
	}
	// heap sort: pop worst to the back
	for end := len(h) - 1; end > 0; end-- {
		h[0], h[end] = h[end], h[0]
		siftDown(d, h[:end], 0)
	}
	w.heap = h
	copy(out, h)
	return out[:len(h)]
}

func siftDown(d []float64, h []int32, p int) {
	for {
		c := 2*p + 1
		if c >= len(h) {
			return
		}
		if c+1 < len(h) && less(d, h[c], h[c+1]) {
			c++
		}
		if !less(d, h[p], h[c]) {
			return
		}
		h[p], h[c] = h[c], h[p]
		p = c
	}
}

// setMinus appends to dst the members of a that are not in b (both short).
func setMinus(dst, a, b []int32) []int32 {
	for _, v := range a {
		if !slices.Contains(b, v) {
			dst = append(dst, v)
		}
	}
	return dst
}

// rankSum returns Σ_{t∈targets} rank(t), where rank(t) = 1 + #{l ≠ i : (d[l], l) <
// (d[t], t)} — the exact rank of t among all rows by distance from i. One pass
// over the N rows: each row not beyond the farthest target is placed among the
// sorted targets (branch-free binary search on the distances, then the index
// tie rule) and counted in a histogram.
func (w *rankWork) rankSum(d []float64, i int, targets []int32) int64 {
	m := len(targets)
	if m == 0 {
		return 0
	}
	t := append(w.tkeys[:0], targets...)
	slices.SortFunc(t, func(a, b int32) int {
		if less(d, a, b) {
			return -1
		}
		if less(d, b, a) {
			return 1
		}
		return 0
	})
	w.tkeys = t
	if cap(w.hist) < m+1 {
		w.hist = make([]int64, m+1)
		w.tdist = make([]float64, m)
	}
	hist := w.hist[:m+1]
	clear(hist)
	td := w.tdist[:m]
	for q, v := range t {
		td[q] = d[v]
	}
	first, dl := td[0], td[m-1]
	for l, dv := range d {
		if dv > dl {
			continue
		}
		if dv < first {
			hist[0]++
			continue
		}
		// p = #targets with distance < dv (lower bound, written so the compiler
		// can use conditional moves), then targets at the same distance with a
		// smaller or equal index (row l itself when it is a target).
		base, n := 0, m
		for n > 1 {
			half := n / 2
			if td[base+half-1] < dv {
				base += half
			}
			n -= half
		}
		p := base
		if td[p] < dv {
			p++
		}
		for p < m && td[p] == dv && t[p] <= int32(l) {
			p++
		}
		hist[p]++
	}
	// row i itself has distance 0 and was counted above every target it precedes
	// in (distance, index) order; take it out again.
	hist[rankPos(td, t, d[i], int32(i))]--
	var sum, below int64
	for q := range m {
		below += hist[q]
		sum += below + 1
	}
	return sum
}

// rankPos is the number of targets whose (distance, index) key is ≤ (dv, l).
func rankPos(td []float64, t []int32, dv float64, l int32) int {
	p := 0
	for p < len(td) && (td[p] < dv || (td[p] == dv && t[p] <= l)) {
		p++
	}
	return p
}
