package knn

import (
	"math"

	"nightjar/internal/core"
	"nightjar/internal/par"
)

// Starting lists for NN-descent from random projection trees (Dasgupta &
// Freund 2008, "Random projection trees and low dimensional manifolds",
// STOC). A tree splits its rows in two by the hyperplane that bisects two
// rows drawn at random, and again until a node holds at most leaf rows; rows
// that share a leaf are likely to be near one another. Each row starts with
// the k nearest of the rows it shares a leaf with in any of the trees, and
// random rows where those are fewer than k. Written by hand: no library in
// the module graph offers such trees, and the start must be the same bits for
// any thread count (every tree draws from its own generator, and a row's list
// is computed from the finished trees alone).

// rpTree is one random projection tree, kept only as its leaves: perm holds
// the rows in leaf order, leaf r covering perm[start[r]:start[r+1]], and
// leafOf[i] is the leaf of row i.
type rpTree struct {
	perm   []int32
	start  []int32
	leafOf []int32
}

// buildRPTree splits the rows of x into leaves of at most leaf rows. seed and
// tree select the random choices.
func buildRPTree(x core.Matrix, leaf int, seed, tree uint64) rpTree {
	n, dim := x.N, x.D
	t := rpTree{perm: make([]int32, n), leafOf: make([]int32, n)}
	for i := range t.perm {
		t.perm[i] = int32(i)
	}
	r := newRowRand(seed, 1<<42+tree, 0)
	side := make([]bool, n)
	w := make([]float32, dim)
	type span struct{ lo, hi int }
	stack := []span{{0, n}}
	for len(stack) > 0 {
		s := stack[len(stack)-1]
		stack = stack[:len(stack)-1]
		rows := t.perm[s.lo:s.hi]
		if len(rows) <= leaf {
			t.start = append(t.start, int32(s.lo))
			continue
		}
		cut := splitRows(x, rows, side, w, &r)
		// Push the right part first so that leaves come out in perm order.
		stack = append(stack, span{s.lo + cut, s.hi}, span{s.lo, s.lo + cut})
	}
	t.start = append(t.start, int32(n))
	for l := 0; l+1 < len(t.start); l++ {
		for _, i := range t.perm[t.start[l]:t.start[l+1]] {
			t.leafOf[i] = int32(l)
		}
	}
	return t
}

// splitRows reorders rows so that those nearer to a than to b, for two rows
// a and b drawn at random, come first, and returns their count. When that
// leaves a side empty (all rows on one side of the hyperplane, as with
// duplicate rows), it cuts a random shuffle of rows in two halves instead.
// side and w are scratch space of at least len(rows) and x.D entries.
func splitRows(x core.Matrix, rows []int32, side []bool, w []float32, r *rowRand) int {
	dim := x.D
	m := len(rows)
	a := int(rows[r.intn(m)])
	b := int(rows[r.intn(m)])
	xa := x.Data[a*dim : (a+1)*dim]
	xb := x.Data[b*dim : (b+1)*dim]
	// Nearer to a: w·x > (‖a‖² − ‖b‖²)/2 with w = a − b.
	var t float32
	for l := range w {
		w[l] = xa[l] - xb[l]
		t += (xa[l]*xa[l] - xb[l]*xb[l]) / 2
	}
	cut := 0
	for j, i := range rows {
		xi := x.Data[int(i)*dim : (int(i)+1)*dim]
		var dot float32
		for l, v := range w {
			dot += v * xi[l]
		}
		side[j] = dot > t
		if side[j] {
			cut++
		}
	}
	if cut == 0 || cut == m {
		partialShuffle(rows, m/2, r)
		return m / 2
	}
	// Stable in-place partition would cost a buffer; a two-pointer swap
	// keeps the order random enough and is all that is needed.
	lo, hi := 0, m-1
	for lo < hi {
		for lo < hi && side[lo] {
			lo++
		}
		for lo < hi && !side[hi] {
			hi--
		}
		if lo < hi {
			rows[lo], rows[hi] = rows[hi], rows[lo]
			side[lo], side[hi] = side[hi], side[lo]
		}
	}
	return cut
}

// rpStart fills g.Index (g.N rows of g.K) with starting lists from trees
// random projection trees of at most leaf rows each, built concurrently on
// up to threads goroutines. A row's leaf-mates come first, sorted by
// (distance, index) with their dist2 distances in g.Dist2; random rows fill
// the rest of a row that has fewer than k of them, at distance +Inf (refine
// recomputes every distance and sorts the rows again).
//
// The trees are taken one after the other. Within a tree the leaves are
// disjoint, so they are processed in parallel without locks: a leaf's rows
// are gathered into a contiguous block (the pairs of a leaf then cost one
// read of each row from memory instead of one per pair) and each row merges
// its sorted leaf-mates into its list.
func rpStart(g *core.Graph, x core.Matrix, trees, leaf int, seed uint64, threads int) {
	rpClear(g)
	rpAddTrees(g, x, 0, trees, leaf, seed, threads)
	rpFill(g, seed, threads)
}

// rpClear empties every list of g: index −1 at +Inf.
func rpClear(g *core.Graph) {
	inf := float32(math.Inf(1))
	for i := range g.Index {
		g.Index[i], g.Dist2[i] = -1, inf
	}
}

// rpAddTrees merges into g's lists the leaf-mates of trees from to to−1
// (each tree's randomness depends on seed and its number only). A list is
// the top k of the union of what it held and the candidates under the order
// (distance, index), so adding trees 8 to 11 to the lists of trees 0 to 7
// gives the lists of trees 0 to 11 at once.
func rpAddTrees(g *core.Graph, x core.Matrix, from, to, leaf int, seed uint64, threads int) {
	k, dim := g.K, x.D
	forest := make([]rpTree, to-from)
	par.Blocks(len(forest), 1, threads, func(_, t, _, _ int) {
		forest[t] = buildRPTree(x, leaf, seed, uint64(from+t))
	})
	for _, t := range forest {
		leaves := len(t.start) - 1
		par.Blocks(leaves, 16, threads, func(_, _, lo, hi int) {
			block := make([]float32, 0, leaf*dim)
			pd := make([]float32, leaf*leaf)
			ci := make([]int32, 0, leaf)
			cd := make([]float32, 0, leaf)
			mi := make([]int32, k)
			md := make([]float32, k)
			var keys []uint64
			for l := lo; l < hi; l++ {
				rows := t.perm[t.start[l]:t.start[l+1]]
				m := len(rows)
				block = block[:0]
				for _, i := range rows {
					block = append(block, x.Data[int(i)*dim:(int(i)+1)*dim]...)
				}
				for a := 0; a < m; a++ {
					xa := block[a*dim : (a+1)*dim]
					b := a + 1
					for ; b+4 <= m; b += 4 {
						d0, d1, d2, d3 := dist2x4(xa, block[b*dim:], block[(b+1)*dim:], block[(b+2)*dim:], block[(b+3)*dim:])
						pd[a*m+b], pd[b*m+a] = d0, d0
						pd[a*m+b+1], pd[(b+1)*m+a] = d1, d1
						pd[a*m+b+2], pd[(b+2)*m+a] = d2, d2
						pd[a*m+b+3], pd[(b+3)*m+a] = d3, d3
					}
					for ; b < m; b++ {
						dd := dist2(xa, block[b*dim:(b+1)*dim])
						pd[a*m+b], pd[b*m+a] = dd, dd
					}
				}
				for a, i := range rows {
					ci, cd = ci[:0], cd[:0]
					for b, v := range rows {
						if b != a {
							ci = append(ci, v)
							cd = append(cd, pd[a*m+b])
						}
					}
					keys = sortRow(ci, cd, keys)
					row := int(i) * k
					mergeTop(g.Index[row:row+k], g.Dist2[row:row+k], ci, cd, mi, md)
				}
			}
		})
	}
}

// rpFill completes, with random rows at +Inf, the lists that have fewer
// than k distinct leaf-mates in all trees.
func rpFill(g *core.Graph, seed uint64, threads int) {
	n, k := g.N, g.K
	par.Blocks(n, descentBlock, threads, func(_, _, lo, hi int) {
		seen := make(map[int32]struct{}, k)
		for i := lo; i < hi; i++ {
			row := g.Index[i*k : (i+1)*k]
			have := k
			for have > 0 && row[have-1] < 0 {
				have--
			}
			if have < k {
				fillRandom(row, have, i, n, seed, seen)
			}
		}
	})
}

// mergeTop replaces the sorted list (idx, d) by the k = len(idx) first
// entries of its union with the sorted candidates (ci, cd) under the order
// (distance, index), an entry present in both counted once (a pair's
// distance is the same bits wherever it is computed). Empty slots hold index
// −1 at +Inf and sort last. mi and md are scratch of length k.
func mergeTop(idx []int32, d []float32, ci []int32, cd []float32, mi []int32, md []float32) {
	k := len(idx)
	a, b := 0, 0
	for o := 0; o < k; o++ {
		switch {
		case b == len(ci) || (a < k && idx[a] >= 0 && (d[a] < cd[b] || (d[a] == cd[b] && idx[a] < ci[b]))):
			mi[o], md[o] = idx[a], d[a]
			a++
		case a < k && idx[a] == ci[b] && d[a] == cd[b]:
			mi[o], md[o] = idx[a], d[a]
			a++
			b++
		default:
			mi[o], md[o] = ci[b], cd[b]
			b++
		}
	}
	copy(idx, mi)
	copy(d, md)
}
