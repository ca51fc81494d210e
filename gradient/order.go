package gradient

import (
	"math"
	"slices"

	"nightjar/internal/core"
	"nightjar/internal/par"
)

// Locality order of the rows.
//
// The attractive pass reads y_j for every non-zero p_ij. With rows in input
// order those reads jump across the whole map: at N = 10^6 the map is 16 MB,
// so nearly every read misses the per-core cache, and the pass measured 73 %
// of a step (1.4 s of 1.9 s, 2 threads). Rows renumbered in breadth-first
// order over the graph of P keep a row's neighbours near it in memory, because
// a row's neighbours are numbered when the row is reached. This is the
// bandwidth-reducing idea of Cuthill & McKee (1969) without their degree sort;
// it is written here because it is a dozen lines and no library we use has a
// sparse-matrix reordering.

// localityOrder returns perm with perm[k] = the row placed k-th: rows in
// breadth-first order over the non-zeros of p, starting from row 0 and, when
// a component is exhausted, from the lowest row not yet reached; neighbours
// are taken in column order. It is deterministic.
func localityOrder(p core.CSR) []int32 {
	n := p.N
	perm := make([]int32, 0, n)
	seen := make([]bool, n)
	for start := 0; start < n; start++ {
		if seen[start] {
			continue
		}
		seen[start] = true
		perm = append(perm, int32(start))
		for head := len(perm) - 1; head < len(perm); head++ {
			i := perm[head]
			for _, j := range p.Cols[p.Offsets[i]:p.Offsets[i+1]] {
				if !seen[j] {
					seen[j] = true
					perm = append(perm, j)
				}
			}
		}
	}
	return perm
}

// permuteRows returns P with rows and columns renumbered: row k of the
// result is row perm[k] of p, column j becomes inv[j] (inv the inverse of
// perm), and each row is sorted by column again. The result has its own
// storage (as much again as p).
func permuteRows(p core.CSR, perm, inv []int32, threads int) core.CSR {
	q := core.CSR{N: p.N, Offsets: permutedOffsets(p, perm), Cols: make([]int32, len(p.Cols)), Vals: make([]float32, len(p.Vals))}
	eachRow(p, perm, threads, func(k int, row []uint64) {
		renumberRow(row, p, perm[k], inv)
		dst := q.Offsets[k]
		for e, v := range row {
			q.Cols[dst+int64(e)] = int32(v >> 32)
			q.Vals[dst+int64(e)] = math.Float32frombits(uint32(v))
		}
	})
	return q
}

// permuteRowsConsume returns what permuteRows returns for *p, but takes
// p's arrays over to hold half as much at once: each row's values are first
// written back in place in their new order while the new columns fill an
// array of their own; p's columns are then dropped, and the values moved
// to their new rows. At most p's columns, p's values and one new array are
// alive at once, 1.5 times P instead of twice (about 0.5 GB less at 10^6
// rows, 5 GB at 10^7). *p is cleared. No one else may hold its Cols or Vals,
// or their memory cannot be reclaimed; collect reclaims the columns and
// returns their pages (debug.FreeOSMemory) before the new values are
// allocated.
func permuteRowsConsume(p *core.CSR, perm, inv []int32, threads int, collect func()) core.CSR {
	q := core.CSR{N: p.N, Offsets: permutedOffsets(*p, perm), Cols: make([]int32, len(p.Cols))}
	eachRow(*p, perm, threads, func(k int, row []uint64) {
		renumberRow(row, *p, perm[k], inv)
		dst, src := q.Offsets[k], p.Offsets[perm[k]]
		for e, v := range row {
			q.Cols[dst+int64(e)] = int32(v >> 32)
			p.Vals[src+int64(e)] = math.Float32frombits(uint32(v))
		}
	})
	vals, off := p.Vals, p.Offsets
	*p = core.CSR{}
	collect()
	q.Vals = make([]float32, len(vals))
	par.Blocks(q.N, rowBlock, threads, func(_, _, lo, hi int) {
		for k := lo; k < hi; k++ {
			i := perm[k]
			copy(q.Vals[q.Offsets[k]:q.Offsets[k+1]], vals[off[i]:off[i+1]])
		}
	})
	return q
}

// permutedOffsets returns the row offsets of p with its rows in the order
// perm.
func permutedOffsets(p core.CSR, perm []int32) []int64 {
	off := make([]int64, p.N+1)
	for k, i := range perm {
		off[k+1] = off[k] + p.Offsets[i+1] - p.Offsets[i]
	}
	return off
}

// eachRow calls f for every new row k in parallel blocks, with a scratch
// slice as long as row perm[k] of p that f may use.
func eachRow(p core.CSR, perm []int32, threads int, f func(k int, row []uint64)) {
	longest := int64(0)
	for i := 0; i < p.N; i++ {
		longest = max(longest, p.Offsets[i+1]-p.Offsets[i])
	}
	scratch := make([][]uint64, threads)
	par.Blocks(p.N, rowBlock, threads, func(w, _, lo, hi int) {
		if scratch[w] == nil {
			scratch[w] = make([]uint64, longest)
		}
		for k := lo; k < hi; k++ {
			i := perm[k]
			f(k, scratch[w][:p.Offsets[i+1]-p.Offsets[i]])
		}
	})
}

// renumberRow fills row with row i of p, each entry packed as (new column,
// value bits) so that one integer sort orders the row by its new columns,
// and sorts it.
func renumberRow(row []uint64, p core.CSR, i int32, inv []int32) {
	src := p.Offsets[i]
	for e := range row {
		row[e] = uint64(inv[p.Cols[src+int64(e)]])<<32 | uint64(math.Float32bits(p.Vals[src+int64(e)]))
	}
	slices.Sort(row)
}
