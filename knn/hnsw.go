package knn

import (
	"fmt"
	"math/rand"
	"sync"
	"time"

	"github.com/coder/hnsw"

	"nightjar/internal/core"
	"nightjar/internal/par"
)

// Starting lists from an HNSW index (Malkov & Yashunin 2020) built with
// github.com/coder/hnsw on a bounded sample of the rows, then NN-descent
// refinement.
//
// What the library lacks, and what this file adds by hand:
//   - Graph.Add is single-threaded and the index holds about 1 KB per row
//     (M = 16) besides the garbage its searches leave: an index over all rows
//     peaked at 0.54 GB at 100,000 rows and 5.5 GB at 1,000,000 (build
//     1,563 s, raw recall 0.13). We index a random sample of at most
//     IndexRows rows (20,000 by default, about 3 s to build on one core) and
//     query every row against it; the index is dropped before refinement.
//   - Its search is greedy and stops at the first expansion that does not
//     improve the best distance, and its result heap takes the last array
//     element of a binary min-heap for the worst result, so the results are
//     neither the nearest nor complete (raw recall@90 of an index over all
//     100,000 demo rows: 0.17). Worse, lists made only of such results are a
//     poor start for NN-descent, which needs the lists to reach across the
//     data: from that start three passes reached 0.69 where a random start
//     reaches 0.9998. We keep only the Ask (k/3 by default) nearest results
//     and fill the list with random rows, which gives NN-descent both local
//     candidates and the random links it relies on.
//   - A search can return fewer results than asked; the random filling covers
//     that too, so every row enters refinement with exactly k neighbours.
//   - Its structure depends on Go map iteration order (entry point of a
//     layer, neighbour replenishing), which Go randomises: the starting
//     lists, hence HNSW's result, can differ from run to run at the level
//     of a few entries. The refinement itself is deterministic.
//
// Concurrent queries: (*hnsw.Graph).Search only reads the layers (map reads,
// which Go allows concurrently), allocates its heaps and visited set per
// call, and calls our pure distance function; it does not touch the Rng.
// It is therefore safe from many goroutines once all Adds have returned.

// HNSWOptions configure HNSW. DefaultHNSW gives the defaults; a zero M,
// IndexRows, Ask or Shards also means its default.
type HNSWOptions struct {
	RefineOptions
	// M is the maximum number of links per node in the HNSW indexes.
	M int
	// IndexRows bounds the rows put in the HNSW index: a random sample of
	// IndexRows rows when N is larger.
	IndexRows int
	// Ask is the number of index results kept per row (1 ≤ Ask ≤ k); the
	// other k − Ask entries of the starting list are random rows.
	Ask int
	// Shards is the number of indexes built concurrently, each on an
	// interleaved part of the index rows; every row queries every index.
	Shards int
}

// DefaultHNSW returns the default options of HNSW for k neighbours:
// DefaultRefine's refinement, started from one index with M = 16 on at most
// 20,000 rows, keeping k/3 results per row.
//
// Measured at k = 90 on the 100,000-row demo scenario, recall@90 on a
// 1,000-row sample against the exact search, index on 20,000 rows: starting
// lists of k/3 index results + random rows 0.08, after 1, 2, 3 passes 0.31,
// 0.945, 1.000; keeping 60 or 90 index results gave 0.944 and 0.951 after
// two passes, an index on 50,000 rows 0.967, for more build and query time.
// M = 16 is the library's own default.
//
// Measured cost with these defaults (k = 90, 2 threads, idle machine;
// recall@90 against the exact search on 1,000 sampled rows, 10,000 at
// 1,000,000 rows; peak RSS of the whole process at the end of the neighbour
// phase, GOGC lowered to 20 while the index was built and queried):
//
//	data                      build  query  passes        recall   peak RSS
//	demo 100,000 × 50          2.3 s  4.6 s  3 in 32 s     0.99996  0.25 GB
//	MNIST 70,000 × 784         8.4 s  8.4 s  3 in 155 s    0.9965   1.11 GB
//	MNIST 70,000, PCA to 50    2.4 s  3.1 s  3 in 21 s     0.9980   1.10 GB
//	demo 1,000,000 × 50        3.0 s   87 s  4 in 464 s    0.9995   2.04 GB
//
// Each ran passes until the estimated recall reached the goal of 0.99.
// Descent reaches the same recall sooner (see DefaultDescent).
func DefaultHNSW(k int) HNSWOptions {
	return HNSWOptions{
		RefineOptions: DefaultRefine(),
		M:             16,
		IndexRows:     20_000,
		Ask:           max(1, k/3),
		Shards:        1,
	}
}

// resolve puts the defaults in place of zero fields, for k neighbours.
func (o *HNSWOptions) resolve(k int) {
	def := DefaultHNSW(k)
	o.RefineOptions.resolve()
	if o.M <= 0 {
		o.M = def.M
	}
	if o.IndexRows <= 0 {
		o.IndexRows = def.IndexRows
	}
	if o.Ask <= 0 {
		o.Ask = def.Ask
	}
	o.Ask = min(o.Ask, k)
	if o.Shards <= 0 {
		o.Shards = 1
	}
}

// HNSW returns an approximate k-nearest-neighbour graph of the rows of x:
// HNSW indexes (Malkov & Yashunin 2020; opt.Shards of them) over a random
// sample of at most opt.IndexRows rows, every row's starting list made of the
// opt.Ask nearest index results and random rows up to k, then NN-descent
// refinement as in Refine. Dist2 holds squared Euclidean distances (of the
// normalised rows for Cosine). In the stats, BuildSeconds and QuerySeconds
// are the times of the start.
//
// The start is not bit-reproducible (the index depends on Go's map order,
// see the file comment); the refinement is, for any opt.Threads.
//
// Memory beyond the graph (8·N·k bytes) and the refinement's work arrays is
// about 1 KB per index row, and the index's searches leave about 20 KB of
// garbage per query: with the default GOGC = 100 the heap grows to twice
// the live graph before each collection (1.9 GB resident at 1,000,000 rows).
// HNSW changes no process-wide setting; a caller that watches peak memory
// may lower GOGC around the call (see Build).
//
// It needs 1 ≤ k ≤ x.N−1 and len(x.Data) == x.N·x.D; under Cosine a row of
// zeros gives a *ZeroRowError.
func HNSW(x core.Matrix, k int, opt HNSWOptions) (*core.Graph, Stats, error) {
	var st Stats
	if err := checkInput(x, k); err != nil {
		return nil, st, fmt.Errorf("neighbours by HNSW: %w", err)
	}
	opt.resolve(k)
	rows, err := metricRows(x, opt.Metric)
	if err != nil {
		return nil, st, fmt.Errorf("neighbours by HNSW: %w", err)
	}
	t0 := time.Now()
	shards := buildShards(rows, k, &opt)
	buildSec := time.Since(t0).Seconds()
	t0 = time.Now()
	g := queryShards(rows, k, shards, &opt)
	querySec := time.Since(t0).Seconds()
	// The indexes are no longer referenced: refinement can reuse their memory.

	st, err = refineRows(g, rows, opt.RefineOptions)
	st.BuildSeconds, st.QuerySeconds = buildSec, querySec
	if err != nil {
		return nil, st, fmt.Errorf("neighbours by HNSW: %w", err)
	}
	return g, st, nil
}

// buildShards builds the indexes of HNSW over the index rows: a random
// sample of at most opt.IndexRows rows (all rows if N ≤ IndexRows), in
// increasing order, cut into opt.Shards interleaved parts (fewer when the
// sample is small), built concurrently, each single-threaded inside the
// library.
func buildShards(rows core.Matrix, k int, opt *HNSWOptions) []*hnsw.Graph[int32] {
	sample := SampleRows(rows.N, opt.IndexRows, opt.Seed^0x5a3c)
	shardsN := max(1, min(opt.Shards, len(sample)/(2*(opt.Ask+1))))
	shards := make([]*hnsw.Graph[int32], shardsN)
	var built int64
	var mu sync.Mutex
	total := int64(len(sample))
	par.Blocks(shardsN, 1, opt.Threads, func(_, s, _, _ int) {
		g := &hnsw.Graph[int32]{
			Distance: dist2,
			M:        opt.M,
			Ml:       0.25,
			EfSearch: opt.Ask + 1,
			Rng:      rand.New(rand.NewSource(int64(mix64(opt.Seed + uint64(s))))),
		}
		const chunk = 4096
		cnt := 0
		for t := s; t < len(sample); t += shardsN {
			i := int(sample[t])
			g.Add(hnsw.MakeNode(int32(i), rows.Row(i)))
			cnt++
			if cnt%chunk == 0 {
				mu.Lock()
				built += chunk
				opt.report("build", built, total)
				mu.Unlock()
			}
		}
		mu.Lock()
		built += int64(cnt % chunk)
		opt.report("build", built, total)
		mu.Unlock()
		shards[s] = g
	})
	return shards
}

// queryShards queries every index for every row and returns the starting
// graph: the opt.Ask nearest results of a row, the list filled with random
// distinct rows up to k (refinement recomputes every distance).
func queryShards(rows core.Matrix, k int, shards []*hnsw.Graph[int32], opt *HNSWOptions) *core.Graph {
	n := rows.N
	g := &core.Graph{N: n, K: k, Index: make([]int32, n*k), Dist2: make([]float32, n*k)}
	var queried int64
	var mu sync.Mutex
	par.Blocks(n, descentBlock, opt.Threads, func(_, _, lo, hi int) {
		cand := make([]int32, 0, max(k, len(shards)*(opt.Ask+1)))
		cd := make([]float32, 0, cap(cand))
		seen := make(map[int32]struct{}, cap(cand))
		var keys []uint64
		for i := lo; i < hi; i++ {
			xi := rows.Row(i)
			cand, cd = cand[:0], cd[:0]
			clear(seen)
			for _, sg := range shards {
				for _, nd := range sg.Search(xi, opt.Ask+1) {
					if int(nd.Key) == i {
						continue
					}
					if _, ok := seen[nd.Key]; ok {
						continue
					}
					seen[nd.Key] = struct{}{}
					cand = append(cand, nd.Key)
					cd = append(cd, dist2(xi, nd.Value))
				}
			}
			keys = sortRow(cand, cd, keys)
			cand = cand[:min(len(cand), opt.Ask)]
			row := g.Index[i*k : (i+1)*k]
			copy(row, cand)
			fillRandom(row, len(cand), i, n, opt.Seed^0x41f7, seen)
		}
		mu.Lock()
		queried += int64(hi - lo)
		opt.report("query", queried, int64(n))
		mu.Unlock()
	})
	return g
}
