package knn

import (
	"fmt"
	"math"
	"slices"
	"sync"
	"sync/atomic"
	"time"

	"nightjar/internal/core"
	"nightjar/internal/par"
)

// The passes of NN-descent refinement (Dong, Charikar & Li 2011, "Efficient
// k-nearest neighbor graph construction for generic similarity measures",
// WWW). Written by hand because no Go library in the module graph offers it,
// and because the result must be the same bits whatever the thread count.
//
// Determinism. Each pass has three phases, each cut into fixed-size blocks of
// rows:
//  1. sampling: every row samples up to ρk "new" and ρk "old" entries of its
//     own list with a generator seeded by (seed, pass, row) and marks the
//     sampled new ones old;
//  2. reverse lists, built in row order, then sampled per row the same way;
//  3. local join: for each row v, every pair (a, b) of its candidates with at
//     least one new member is offered to a's and b's lists when d(a, b) is not
//     worse than their current k-th distance.
//
// A list keeps the k best entries under the total order (distance, index) and
// rejects an entry it already holds, so its final content after a pass is the
// top k of (old list ∪ offers): a set function that does not depend on the
// order in which offers arrive. Offers are therefore applied under a per-row
// mutex as they are found, and the result is bit-identical for any thread
// count. The k-th distance a list holds at any moment of the pass is never
// below its final one, so an offer beyond it cannot be in the final top k and
// is dropped without taking the lock; the k-th distance is published through
// an atomic word, so this check needs no lock and its outcome does not depend
// on timing. The update count of a pass is the number of entries present at
// the end of the pass that were not there at its start, also order-free.

// descentBlock is the number of rows in one unit of parallel work.
const descentBlock = 256

// Entry states in a neighbour list.
const (
	stateOld      uint8 = 0 // already joined
	stateNew      uint8 = 1 // not yet joined
	stateInserted uint8 = 2 // entered the list during the current pass
)

// descentParams are the resolved settings of one refinement.
type descentParams struct {
	threads   int
	sample    float64 // ρ
	delta     float64 // δ
	maxPasses int
	seed      uint64
	progress  func(phase string, done, total int64)
	// Optional stop on estimated recall: after the start and after each
	// pass, the recall of the graph on the rows probe, whose exact lists
	// (probe-major, k each) are truth, is estimated, and refinement stops
	// once it reaches stopRecall.
	stopRecall float64
	probe      []int32
	truth      []int32
}

// descentResult reports what a refinement did.
type descentResult struct {
	passes  int
	seconds []float64
	updates []int64
	recall  []float64 // estimated recall at the start and after each pass (with a probe)
}

// prepareGraph recomputes every squared distance of g with dist2 on rows of x,
// sorts each row by (distance, index) and checks that rows hold K distinct
// neighbours other than themselves. Recomputing makes the distance of a pair
// the same bits wherever it is met, which the duplicate check of insert relies on.
func prepareGraph(g *core.Graph, x core.Matrix, threads int) error {
	n, k := g.N, g.K
	var errs par.FirstError
	par.Blocks(n, descentBlock, threads, func(_, _, lo, hi int) {
		seen := make(map[int32]struct{}, k)
		var keys []uint64
		for i := lo; i < hi; i++ {
			idx := g.Index[i*k : (i+1)*k]
			d := g.Dist2[i*k : (i+1)*k]
			clear(seen)
			xi := x.Data[i*x.D : (i+1)*x.D]
			for j, v := range idx {
				bad := ""
				switch {
				case v < 0 || int(v) >= n:
					bad = "out of range"
				case int(v) == i:
					bad = "is the row itself"
				}
				if _, ok := seen[v]; ok && bad == "" {
					bad = "repeated"
				}
				if bad != "" {
					errs.Set(lo, fmt.Errorf("row %d, neighbour %d (%d) %s", i, j, v, bad))
					return
				}
				seen[v] = struct{}{}
				d[j] = dist2(xi, x.Data[int(v)*x.D:(int(v)+1)*x.D])
			}
			keys = sortRow(idx, d, keys)
		}
	})
	return errs.Err()
}

// finishGraph recomputes every distance of g with exactDist2 (float64 sums,
// the function of the exact search) and re-sorts the rows, so that a pair has
// the same reported distance in an approximate and an exact graph.
func finishGraph(g *core.Graph, x core.Matrix, threads int) {
	k := g.K
	par.Blocks(g.N, descentBlock, threads, func(_, _, lo, hi int) {
		var keys []uint64
		for i := lo; i < hi; i++ {
			idx := g.Index[i*k : (i+1)*k]
			d := g.Dist2[i*k : (i+1)*k]
			xi := x.Data[i*x.D : (i+1)*x.D]
			for j, v := range idx {
				d[j] = exactDist2(xi, x.Data[int(v)*x.D:(int(v)+1)*x.D])
			}
			keys = sortRow(idx, d, keys)
		}
	})
}

// sortRow sorts one neighbour list by (distance, index) and returns keys,
// its scratch space (grown when shorter than the list). Distances are not
// negative and indices not negative, so the float32 bits of a distance order
// like its value and each entry sorts as one uint64 key, distance bits above
// index: several times faster than sorting the two slices through
// sort.Interface, which showed in profiles of the tree start.
func sortRow(idx []int32, d []float32, keys []uint64) []uint64 {
	keys = keys[:0]
	for j, v := range idx {
		b := math.Float32bits(d[j])
		if b == 1<<31 { // −0 orders as +0
			b = 0
		}
		keys = append(keys, uint64(b)<<32|uint64(uint32(v)))
	}
	slices.Sort(keys)
	for j, key := range keys {
		idx[j] = int32(uint32(key))
		d[j] = math.Float32frombits(uint32(key >> 32))
	}
	return keys
}

// descent holds the working state of one refinement.
type descent struct {
	g     *core.Graph
	x     core.Matrix
	p     descentParams
	s     int             // samples per list, ⌈ρk⌉
	state []uint8         // N×K entry states
	worst []atomic.Uint32 // float32 bits of each list's current k-th distance
	locks []sync.Mutex

	fwdNew, fwdOld   []int32 // N×s forward samples
	fwdNewN, fwdOldN []int32 // their counts
	revNew, revOld   []int32 // reverse lists in CSR form
	revNewOff        []int64 // N+1 offsets
	revOldOff        []int64
	revNewN, revOldN []int32 // sampled prefix lengths
}

// refine runs NN-descent on g in place. g must hold K distinct neighbours per
// row, none the row itself; x holds the rows (already normalised for cosine).
func refine(g *core.Graph, x core.Matrix, p descentParams) (descentResult, error) {
	var res descentResult
	if g.N != x.N {
		return res, fmt.Errorf("refining neighbours: graph has %d rows, matrix %d", g.N, x.N)
	}
	if g.K == 0 || g.N < 2 {
		return res, nil
	}
	if len(g.Index) != g.N*g.K || len(g.Dist2) != g.N*g.K {
		return res, fmt.Errorf("refining neighbours: graph slices hold %d and %d entries, want %d", len(g.Index), len(g.Dist2), g.N*g.K)
	}
	if p.threads < 1 {
		p.threads = 1
	}
	if err := prepareGraph(g, x, p.threads); err != nil {
		return res, fmt.Errorf("refining neighbours: %w", err)
	}
	defer finishGraph(g, x, p.threads)
	if p.maxPasses <= 0 {
		return res, nil
	}
	if len(p.probe) > 0 {
		r := probeRecall(g, p.probe, p.truth)
		res.recall = append(res.recall, r)
		if r >= p.stopRecall {
			return res, nil
		}
	}
	n, k := g.N, g.K
	d := newDescent(g, x, p)
	s := d.s
	for pass := 1; pass <= p.maxPasses; pass++ {
		start := time.Now()
		d.sampleForward(uint64(pass))
		d.revNew = buildReverse(d.fwdNew, d.fwdNewN, s, n, d.revNewOff, d.revNew)
		d.revOld = buildReverse(d.fwdOld, d.fwdOldN, s, n, d.revOldOff, d.revOld)
		d.sampleReverse(uint64(pass))
		d.join(pass)
		upd := d.settle()
		res.passes = pass
		res.seconds = append(res.seconds, time.Since(start).Seconds())
		res.updates = append(res.updates, upd)
		if len(p.probe) > 0 {
			r := probeRecall(g, p.probe, p.truth)
			res.recall = append(res.recall, r)
			if r >= p.stopRecall {
				break
			}
		}
		if float64(upd) < p.delta*float64(n)*float64(k) {
			break
		}
	}
	return res, nil
}

// newDescent allocates the working state of a refinement of g, with
// ⌈ρk⌉ samples per list (at least 1, at most k) and every entry new.
func newDescent(g *core.Graph, x core.Matrix, p descentParams) *descent {
	n, k := g.N, g.K
	s := int(math.Ceil(p.sample * float64(k)))
	s = max(1, min(s, k))
	d := &descent{g: g, x: x, p: p, s: s}
	d.state = make([]uint8, n*k)
	for i := range d.state {
		d.state[i] = stateNew
	}
	d.worst = make([]atomic.Uint32, n)
	d.locks = make([]sync.Mutex, n)
	d.fwdNew = make([]int32, n*s)
	d.fwdOld = make([]int32, n*s)
	d.fwdNewN = make([]int32, n)
	d.fwdOldN = make([]int32, n)
	d.revNewOff = make([]int64, n+1)
	d.revOldOff = make([]int64, n+1)
	d.revNewN = make([]int32, n)
	d.revOldN = make([]int32, n)
	return d
}

// sampleForward fills fwdNew/fwdOld and publishes each row's k-th distance.
// Sampled new entries become old.
func (d *descent) sampleForward(pass uint64) {
	k, s := d.g.K, d.s
	par.Blocks(d.g.N, descentBlock, d.p.threads, func(_, _, lo, hi int) {
		newPos := make([]int, 0, k)
		oldPos := make([]int, 0, k)
		for i := lo; i < hi; i++ {
			r := newRowRand(d.p.seed, 2*pass, uint64(i))
			row := i * k
			d.worst[i].Store(math.Float32bits(d.g.Dist2[row+k-1]))
			newPos, oldPos = newPos[:0], oldPos[:0]
			for j := 0; j < k; j++ {
				if d.state[row+j] == stateOld {
					oldPos = append(oldPos, j)
				} else {
					newPos = append(newPos, j)
				}
			}
			partialShuffle(newPos, s, &r)
			partialShuffle(oldPos, s, &r)
			nn := min(len(newPos), s)
			for t := 0; t < nn; t++ {
				j := newPos[t]
				d.fwdNew[i*s+t] = d.g.Index[row+j]
				d.state[row+j] = stateOld
			}
			d.fwdNewN[i] = int32(nn)
			no := min(len(oldPos), s)
			for t := 0; t < no; t++ {
				d.fwdOld[i*s+t] = d.g.Index[row+oldPos[t]]
			}
			d.fwdOldN[i] = int32(no)
		}
	})
}

// buildReverse returns, in CSR form with offsets off (len n+1), for every row v
// the rows u that hold v in their forward sample, in increasing u. buf is
// reused when large enough.
func buildReverse(fwd, cnt []int32, s, n int, off []int64, buf []int32) []int32 {
	clear(off)
	for u := 0; u < n; u++ {
		for _, v := range fwd[u*s : u*s+int(cnt[u])] {
			off[v+1]++
		}
	}
	for v := 0; v < n; v++ {
		off[v+1] += off[v]
	}
	total := off[n]
	if int64(cap(buf)) < total {
		buf = make([]int32, total)
	}
	buf = buf[:total]
	// Fill using off[v] as a cursor, then shift the offsets back.
	for u := 0; u < n; u++ {
		for _, v := range fwd[u*s : u*s+int(cnt[u])] {
			buf[off[v]] = int32(u)
			off[v]++
		}
	}
	for v := n; v > 0; v-- {
		off[v] = off[v-1]
	}
	off[0] = 0
	return buf
}

// sampleReverse keeps up to s random reverse neighbours per row (moved to the
// front of the row's CSR segment).
func (d *descent) sampleReverse(pass uint64) {
	s := d.s
	par.Blocks(d.g.N, descentBlock, d.p.threads, func(_, _, lo, hi int) {
		for i := lo; i < hi; i++ {
			r := newRowRand(d.p.seed, 2*pass+1, uint64(i))
			a := d.revNew[d.revNewOff[i]:d.revNewOff[i+1]]
			partialShuffle(a, s, &r)
			d.revNewN[i] = int32(min(len(a), s))
			b := d.revOld[d.revOldOff[i]:d.revOldOff[i+1]]
			partialShuffle(b, s, &r)
			d.revOldN[i] = int32(min(len(b), s))
		}
	})
}

// join runs the local join of every row.
func (d *descent) join(pass int) {
	n, s, dim := d.g.N, d.s, d.x.D
	var done int64
	var pmu sync.Mutex
	phase := fmt.Sprintf("refine %d", pass)
	par.Blocks(n, descentBlock, d.p.threads, func(_, _, lo, hi int) {
		mark := make(map[int32]struct{}, 4*s)
		newC := make([]int32, 0, 2*s)
		oldC := make([]int32, 0, 2*s)
		both := make([]int32, 0, 4*s)
		for v := lo; v < hi; v++ {
			clear(mark)
			newC, oldC = newC[:0], oldC[:0]
			add := func(list []int32, dst []int32) []int32 {
				for _, u := range list {
					if _, ok := mark[u]; !ok {
						mark[u] = struct{}{}
						dst = append(dst, u)
					}
				}
				return dst
			}
			newC = add(d.fwdNew[v*s:v*s+int(d.fwdNewN[v])], newC)
			newC = add(d.revNew[d.revNewOff[v]:d.revNewOff[v]+int64(d.revNewN[v])], newC)
			if len(newC) == 0 {
				continue
			}
			oldC = add(d.fwdOld[v*s:v*s+int(d.fwdOldN[v])], oldC)
			oldC = add(d.revOld[d.revOldOff[v]:d.revOldOff[v]+int64(d.revOldN[v])], oldC)
			// Every new candidate meets the new ones after it and all the
			// old ones: the rest of newC followed by oldC, four distances
			// at a time.
			both = append(append(both[:0], newC...), oldC...)
			for i, a := range newC {
				xa := d.x.Data[int(a)*dim : (int(a)+1)*dim]
				rest := both[i+1:]
				j := 0
				for ; j+4 <= len(rest); j += 4 {
					b0, b1, b2, b3 := rest[j], rest[j+1], rest[j+2], rest[j+3]
					d0, d1, d2, d3 := dist2x4(xa, d.row(b0), d.row(b1), d.row(b2), d.row(b3))
					d.offerPair(a, b0, d0)
					d.offerPair(a, b1, d1)
					d.offerPair(a, b2, d2)
					d.offerPair(a, b3, d3)
				}
				for _, b := range rest[j:] {
					d.offerPair(a, b, dist2(xa, d.row(b)))
				}
			}
		}
		if d.p.progress != nil {
			pmu.Lock()
			done += int64(hi - lo)
			d.p.progress(phase, done, int64(n))
			pmu.Unlock()
		}
	})
}

// row returns row i of the matrix being searched.
func (d *descent) row(i int32) []float32 {
	dim := d.x.D
	return d.x.Data[int(i)*dim : (int(i)+1)*dim]
}

// offerPair offers b to a's list and a to b's list at squared distance dd.
func (d *descent) offerPair(a, b int32, dd float32) {
	if dd <= math.Float32frombits(d.worst[a].Load()) {
		d.insert(a, b, dd)
	}
	if dd <= math.Float32frombits(d.worst[b].Load()) {
		d.insert(b, a, dd)
	}
}

// insert puts c into row a's list at distance dd if it ranks among the k best
// by (distance, index) and is not already there.
func (d *descent) insert(a, c int32, dd float32) {
	k := d.g.K
	row := int(a) * k
	d.locks[a].Lock()
	idx := d.g.Index[row : row+k]
	dst := d.g.Dist2[row : row+k]
	// lower bound of (dd, c)
	lo, hi := 0, k
	for lo < hi {
		m := int(uint(lo+hi) >> 1)
		if dst[m] < dd || (dst[m] == dd && idx[m] < c) {
			lo = m + 1
		} else {
			hi = m
		}
	}
	if lo == k || (idx[lo] == c && dst[lo] == dd) {
		d.locks[a].Unlock()
		return
	}
	st := d.state[row : row+k]
	copy(idx[lo+1:], idx[lo:k-1])
	copy(dst[lo+1:], dst[lo:k-1])
	copy(st[lo+1:], st[lo:k-1])
	idx[lo], dst[lo], st[lo] = c, dd, stateInserted
	d.worst[a].Store(math.Float32bits(dst[k-1]))
	d.locks[a].Unlock()
}

// settle counts the entries inserted during the pass and marks them new.
// Block counts are added in block order.
func (d *descent) settle() int64 {
	n, k := d.g.N, d.g.K
	counts := par.Map(n, descentBlock, d.p.threads, func() func(lo, hi int) int64 {
		return func(lo, hi int) int64 {
			var c int64
			for j := lo * k; j < hi*k; j++ {
				if d.state[j] == stateInserted {
					d.state[j] = stateNew
					c++
				}
			}
			return c
		}
	})
	var total int64
	for _, c := range counts {
		total += c
	}
	return total
}
