package score

import "slices"

// scoreBlock is the number of sampled rows per work block (par.Map).
const scoreBlock = 4

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
