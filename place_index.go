package nightjar

import (
	"encoding/json"
	"fmt"
	"math/rand/v2"
	"slices"
	"sync"

	"nightjar/checkpoint"
	"nightjar/internal/par"
	"nightjar/knn"
)

// placeQueries is the number of new rows per unit of parallel work of the
// index search (fixed, so the result does not depend on the threads).
const placeQueries = 64

// The neighbour index of a large reference: a forest of random projection
// trees over the reference rows (Dasgupta & Freund, "Random projection trees
// and low dimensional manifolds", STOC 2008: each node splits its rows by the
// hyperplane bisecting two of them, until a leaf holds at most leaf rows)
// and the reference's own k-nearest-neighbour graph. A new row descends each
// tree to a leaf; the leaves' rows start a best-first search of the graph
// (the search of Dong, Charikar & Li's NN-descent graphs as used for
// queries, and of HNSW's bottom layer, Malkov & Yashunin, IEEE TPAMI 42(4),
// 2020): the nearest unexpanded nbCandidate is expanded — its first fan graph
// neighbours are measured — until the nearest unexpanded nbCandidate is
// farther than (1+slack) times the ef-th nearest found. The ef nearest found
// are then ranked by their float64 distances and the first k kept. Every
// step is a pure function of the new row, the index and the parameters: the
// same row gets the same neighbours in any batch, shard or thread.

// indexParams are the settings of the index and its search.
type indexParams struct {
	Trees int     `json:"trees"`
	Leaf  int     `json:"leaf"`
	Fan   int     `json:"fan"`   // graph neighbours used per reference row
	Ef    int     `json:"ef"`    // candidates kept by the search (≥ k)
	Slack float64 `json:"slack"` // search slack ε
	Seed  uint64  `json:"seed"`
}

// rpTree is one random projection tree. Internal node v splits by
// normal[v]·x ≥ offset[v] (right) or not (left); a child c ≥ 0 is an
// internal node, c < 0 the leaf −c−1, whose rows are rows[leafStart[l]:
// leafStart[l+1]].
type rpTree struct {
	d           int
	normals     []float32
	offsets     []float64
	left, right []int32
	leafStart   []int32
	rows        []int32
}

// refIndex is a loaded or built index over the rows of a refRows.
type refIndex struct {
	p     indexParams
	trees []rpTree
	graph []int32 // N × p.Fan
}

// buildTree builds tree number t over the rows of x.
func buildTree(x Matrix, leaf int, seed uint64, t int) rpTree {
	tr := rpTree{d: x.D}
	rng := rand.New(rand.NewPCG(seed, 0x5e1ec7+uint64(t)))
	rows := make([]int32, x.N)
	for i := range rows {
		rows[i] = int32(i)
	}
	side := make([]bool, x.N)
	var split func(rs []int32) int32
	split = func(rs []int32) int32 {
		if len(rs) <= leaf {
			tr.leafStart = append(tr.leafStart, int32(len(tr.rows)))
			tr.rows = append(tr.rows, rs...)
			return -int32(len(tr.leafStart))
		}
		v := int32(len(tr.offsets))
		a := rs[rng.IntN(len(rs))]
		b := rs[rng.IntN(len(rs)-1)]
		if b == a {
			b = rs[len(rs)-1]
		}
		xa, xb := x.Row(int(a)), x.Row(int(b))
		var off float64
		for j := range xa {
			nv := xa[j] - xb[j]
			tr.normals = append(tr.normals, nv)
			off += float64(nv) * (float64(xa[j]) + float64(xb[j])) / 2
		}
		tr.offsets = append(tr.offsets, off)
		tr.left, tr.right = append(tr.left, 0), append(tr.right, 0)
		normal := tr.normals[int(v)*x.D : int(v+1)*x.D]
		nr := 0
		for k, r := range rs {
			side[k] = rpDot(normal, x.Row(int(r))) >= off
			if side[k] {
				nr++
			}
		}
		if nr == 0 || nr == len(rs) { // duplicates: halve the list
			for k := range rs {
				side[k] = k >= len(rs)/2
			}
		}
		// Stable partition: left rows first, in their order.
		part := make([]int32, 0, len(rs))
		for k, r := range rs {
			if !side[k] {
				part = append(part, r)
			}
		}
		nl := len(part)
		for k, r := range rs {
			if side[k] {
				part = append(part, r)
			}
		}
		copy(rs, part)
		l := split(rs[:nl])
		r := split(rs[nl:])
		tr.left[v], tr.right[v] = l, r
		return v
	}
	split(rows)
	tr.leafStart = append(tr.leafStart, int32(len(tr.rows)))
	return tr
}

// dot returns a·b accumulated in float64.
func rpDot(a, b []float32) float64 {
	b = b[:len(a)]
	var s float64
	for j, v := range a {
		s += float64(v) * float64(b[j])
	}
	return s
}

// leafOf returns the rows of the leaf q descends to.
func (tr *rpTree) leafOf(q []float32) []int32 {
	v := int32(0)
	if len(tr.offsets) == 0 {
		return tr.rows
	}
	for v >= 0 {
		if rpDot(tr.normals[int(v)*tr.d:int(v+1)*tr.d], q) >= tr.offsets[v] {
			v = tr.right[v]
		} else {
			v = tr.left[v]
		}
	}
	l := -v - 1
	return tr.rows[tr.leafStart[l]:tr.leafStart[l+1]]
}

// buildIndex builds the index over the rows of r with the graph g (N×gk,
// the reference's own neighbour lists), keeping the first p.Fan of each list.
func buildIndex(r *refRows, g []int32, gk int, p indexParams, threads int) *refIndex {
	ix := &refIndex{p: p, trees: make([]rpTree, p.Trees)}
	par.Blocks(p.Trees, 1, threads, func(_, t, _, _ int) {
		ix.trees[t] = buildTree(r.x, p.Leaf, p.Seed, t)
	})
	n := r.x.N
	ix.graph = make([]int32, n*p.Fan)
	for i := range n {
		copy(ix.graph[i*p.Fan:(i+1)*p.Fan], g[i*gk:i*gk+p.Fan])
	}
	return ix
}

// searcher is one goroutine's scratch for searching the index.
type searcher struct {
	seen  []uint32 // per reference row: the epoch it was last seen in
	epoch uint32
	cand  []nbCandidate // min-heap by distance: to expand
	best  []nbCandidate // max-heap under worse: the ef nearest found
}

func newSearcher(n int) *searcher { return &searcher{seen: make([]uint32, n)} }

// search returns the k nearest reference rows of q (a row under the metric)
// found by the index, nearest first, with their float64-accumulated
// distances, into idx and d2 (length k). skip (−1 for none) is a reference
// row that may not be returned.
func (ix *refIndex) search(r *refRows, s *searcher, q []float32, k int, skip int32, idx []int32, d2 []float32) {
	s.epoch++
	if s.epoch == 0 { // wrapped: clear the marks
		clear(s.seen)
		s.epoch = 1
	}
	ef := max(ix.p.Ef, k)
	s.cand, s.best = s.cand[:0], s.best[:0]
	offer := func(i int32) {
		if s.seen[i] == s.epoch {
			return
		}
		s.seen[i] = s.epoch
		if i == skip {
			return
		}
		c := nbCandidate{knn.FastDist2(q, r.x.Row(int(i))), i}
		if len(s.best) == ef && !nbWorse(s.best[0], c) {
			return
		}
		s.cand = nbPushMin(s.cand, c)
		if len(s.best) < ef {
			s.best = append(s.best, c)
			nbSiftUp(s.best, len(s.best)-1)
		} else {
			s.best[0] = c
			nbSiftDown(s.best, 0)
		}
	}
	for t := range ix.trees {
		for _, i := range ix.trees[t].leafOf(q) {
			offer(i)
		}
	}
	slack := float32(1 + ix.p.Slack)
	fan := ix.p.Fan
	for len(s.cand) > 0 {
		var c nbCandidate
		c, s.cand = nbPopMin(s.cand)
		if len(s.best) == ef && c.d > slack*s.best[0].d {
			break
		}
		for _, u := range ix.graph[int(c.i)*fan : int(c.i+1)*fan] {
			offer(u)
		}
	}
	if len(s.best) < k {
		// The trees' leaves and the graph reached fewer than k rows (a
		// small component of the graph): measure every row instead.
		s.best = s.best[:0]
		for i := range int32(r.x.N) {
			if i != skip {
				s.best = append(s.best, nbCandidate{0, i})
			}
		}
	}
	for j := range s.best {
		s.best[j].d = knn.Dist2(q, r.x.Row(int(s.best[j].i)))
	}
	nbSort(s.best)
	for j := range k {
		idx[j], d2[j] = s.best[j].i, s.best[j].d
	}
}

// siftUp restores the max-heap (under worse) above position i.
func nbSiftUp(h []nbCandidate, i int) {
	for i > 0 {
		p := (i - 1) / 2
		if !nbWorse(h[i], h[p]) {
			return
		}
		h[i], h[p] = h[p], h[i]
		i = p
	}
}

// pushMin and popMin keep a min-heap by (distance, row).
func nbPushMin(h []nbCandidate, c nbCandidate) []nbCandidate {
	h = append(h, c)
	i := len(h) - 1
	for i > 0 {
		p := (i - 1) / 2
		if !nbWorse(h[p], h[i]) {
			break
		}
		h[i], h[p] = h[p], h[i]
		i = p
	}
	return h
}

func nbPopMin(h []nbCandidate) (nbCandidate, []nbCandidate) {
	top := h[0]
	last := len(h) - 1
	h[0] = h[last]
	h = h[:last]
	i := 0
	for {
		l := 2*i + 1
		if l >= len(h) {
			break
		}
		m := l
		if r := l + 1; r < len(h) && nbWorse(h[l], h[r]) {
			m = r
		}
		if !nbWorse(h[i], h[m]) {
			break
		}
		h[i], h[m] = h[m], h[i]
		i = m
	}
	return top, h
}

// approx returns the neighbours of the rows of q found by the index, as
// refRows.exact does.
func (ix *refIndex) approx(r *refRows, q Matrix, k int, exclude []int32, threads int, progress func(done int64)) ([]int32, []float32, error) {
	if k < 1 || k > r.x.N || (exclude != nil && k > r.x.N-1) {
		return nil, nil, fmt.Errorf("neighbours of new rows: k = %d for %d reference rows", k, r.x.N)
	}
	if q.D != r.x.D {
		return nil, nil, fmt.Errorf("neighbours of new rows: %d features, the reference has %d", q.D, r.x.D)
	}
	index := make([]int32, q.N*k)
	dist := make([]float32, q.N*k)
	threads = max(1, threads)
	ss := make([]*searcher, threads)
	var mu sync.Mutex
	var done int64
	par.Blocks(q.N, placeQueries, threads, func(w, _, lo, hi int) {
		if ss[w] == nil {
			ss[w] = newSearcher(r.x.N)
		}
		for i := lo; i < hi; i++ {
			skip := int32(-1)
			if exclude != nil {
				skip = exclude[i]
			}
			ix.search(r, ss[w], q.Row(i), k, skip, index[i*k:(i+1)*k], dist[i*k:(i+1)*k])
		}
		if progress != nil {
			mu.Lock()
			done += int64(hi - lo)
			progress(done)
			mu.Unlock()
		}
	})
	return index, dist, nil
}

// The index is saved in the reference run directory as the artifact
// placement-index.njs.
const (
	fileIndex = "placement-index"
	kindIndex = "placement-index"
)

// indexSections encodes the index.
func indexSections(ix *refIndex, n, d int) ([]checkpoint.Section, error) {
	b, err := json.Marshal(ix.p)
	if err != nil {
		return nil, err
	}
	secs := []checkpoint.Section{
		{Name: "params", Data: b},
		{Name: "shape", Data: checkpoint.EncodeValues([]int64{int64(n), int64(d)})},
		{Name: "graph", Data: checkpoint.View(ix.graph)},
	}
	for t := range ix.trees {
		tr := &ix.trees[t]
		name := func(s string) string { return fmt.Sprintf("tree%d.%s", t, s) }
		secs = append(secs,
			checkpoint.Section{Name: name("normals"), Data: checkpoint.View(tr.normals)},
			checkpoint.Section{Name: name("offsets"), Data: checkpoint.View(tr.offsets)},
			checkpoint.Section{Name: name("left"), Data: checkpoint.View(tr.left)},
			checkpoint.Section{Name: name("right"), Data: checkpoint.View(tr.right)},
			checkpoint.Section{Name: name("leaves"), Data: checkpoint.View(tr.leafStart)},
			checkpoint.Section{Name: name("rows"), Data: checkpoint.View(tr.rows)})
	}
	return secs, nil
}

// indexFromSections decodes an index for n reference rows of d features and
// checks every link in it.
func indexFromSections(secs []checkpoint.Section, n, d int) (*refIndex, error) {
	ix := &refIndex{}
	if err := jsonSection(secs, "params", &ix.p); err != nil {
		return nil, err
	}
	p := ix.p
	if p.Trees < 1 || p.Trees > 64 || p.Leaf < 1 || p.Fan < 1 || p.Ef < 1 || !(p.Slack >= 0) {
		return nil, fmt.Errorf("placement index: bad parameters %+v", p)
	}
	shape, err := checkpoint.SectionValues[int64](secs, "shape")
	if err != nil {
		return nil, err
	}
	if len(shape) != 2 || shape[0] != int64(n) || shape[1] != int64(d) {
		return nil, fmt.Errorf("placement index was made for %v rows×features, the reference has %d×%d", shape, n, d)
	}
	if ix.graph, err = checkpoint.SharedSectionValues[int32](secs, "graph"); err != nil {
		return nil, err
	}
	if len(ix.graph) != n*p.Fan || !inRange(ix.graph, int32(n)) {
		return nil, fmt.Errorf("placement index: graph does not fit %d rows", n)
	}
	for t := range p.Trees {
		tr, err := treeFromSections(secs, t, n, d)
		if err != nil {
			return nil, err
		}
		ix.trees = append(ix.trees, tr)
	}
	return ix, nil
}

func treeFromSections(secs []checkpoint.Section, t, n, d int) (rpTree, error) {
	tr := rpTree{d: d}
	name := func(s string) string { return fmt.Sprintf("tree%d.%s", t, s) }
	var err error
	if tr.normals, err = checkpoint.SharedSectionValues[float32](secs, name("normals")); err != nil {
		return tr, err
	}
	if tr.offsets, err = checkpoint.SharedSectionValues[float64](secs, name("offsets")); err != nil {
		return tr, err
	}
	for _, f := range []struct {
		s   string
		dst *[]int32
	}{{"left", &tr.left}, {"right", &tr.right}, {"leaves", &tr.leafStart}, {"rows", &tr.rows}} {
		if *f.dst, err = checkpoint.SharedSectionValues[int32](secs, name(f.s)); err != nil {
			return tr, err
		}
	}
	nodes, leaves := len(tr.offsets), len(tr.leafStart)-1
	bad := len(tr.normals) != nodes*d || len(tr.left) != nodes || len(tr.right) != nodes || leaves != nodes+1 ||
		len(tr.rows) != n || !inRange(tr.rows, int32(n)) || tr.leafStart[0] != 0 || tr.leafStart[leaves] != int32(n) ||
		!slices.IsSorted(tr.leafStart)
	for v := 0; v < nodes && !bad; v++ {
		for _, c := range []int32{tr.left[v], tr.right[v]} {
			// Children come after their parent (pre-order), so a walk ends.
			bad = bad || (c >= 0 && (c <= int32(v) || c >= int32(nodes))) || (c < 0 && -c-1 >= int32(leaves))
		}
	}
	if bad {
		return tr, fmt.Errorf("placement index: tree %d is damaged", t)
	}
	return tr, nil
}

func inRange(v []int32, n int32) bool {
	for _, x := range v {
		if x < 0 || x >= n {
			return false
		}
	}
	return true
}
