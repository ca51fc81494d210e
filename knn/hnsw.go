package knn

import (
	"fmt"
	"math/rand"
	"runtime"
	"runtime/debug"
	"sync"
	"time"

	"github.com/coder/hnsw"

	"nightjar/ingest"
)

// Approximate neighbours: starting lists from an HNSW index (Malkov &
// Yashunin 2018) built with github.com/coder/hnsw on a bounded sample of the
// rows, then NN-descent refinement (descent.go).
//
// What the library lacks, and what this file adds by hand:
//   - Graph.Add is single-threaded and the index holds about 1 KB per row
//     (M = 16) besides the garbage its searches leave: an index over all rows
//     peaked at 5.5 GB at 1,000,000 rows. We index a random sample of at most
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
//     lists, hence Approx's result, can differ from run to run at the level
//     of a few entries. Refine itself is deterministic.
//
// Measured cost (k = 90, 2 threads, default options, idle machine; recall@90
// against the exact search on 1,000 sampled rows, 10,000 at 1,000,000 rows;
// peak RSS of the whole process at the end of the neighbour phase):
//
//	data                      build  query  passes        recall   peak RSS
//	demo 100,000 × 50          2.3 s  4.6 s  3 in 32 s     0.99996  0.25 GB
//	MNIST 70,000 × 784         8.4 s  8.4 s  3 in 155 s    0.9965   1.11 GB
//	MNIST 70,000, PCA to 50    2.4 s  3.1 s  3 in 21 s     0.9980   1.10 GB
//	demo 1,000,000 × 50        3.0 s   87 s  4 in 464 s    0.9995   2.04 GB
//
// Each ran passes until the estimated recall reached the goal of 0.99 (the
// per-pass estimates of the 1,000,000-row run were not recorded: a bug, since
// fixed, dropped them from Approx's stats). The index over all rows that
// the sampled index replaced peaked at 0.54 GB at 100,000 rows and 5.5 GB at
// 1,000,000 (build 1,563 s, raw recall 0.13). Descent (random projection
// trees, no index) reaches the same recall sooner: demo 100,000 rows 0.9986
// in 12 s (one pass), 1,000,000 rows 0.99996 in 281 s (two passes), MNIST
// raw 0.9984 in 112 s, after PCA to 50 0.9987 in 19 s. That, and Descent
// repeating bit for bit, is why --neighbours auto uses Descent.
//
// Concurrent queries: (*hnsw.Graph).Search only reads the layers (map reads,
// which Go allows concurrently), allocates its heaps and visited set per
// call, and calls our pure distance function; it does not touch the Rng.
// It is therefore safe from many goroutines once all Adds have returned.

// queryGCPercent is the GOGC value Approx sets while it builds and queries
// the index, and Descent while it runs (see Approx).
const queryGCPercent = 20

// ApproxOptions configures Approx and Refine. The zero value of a field means
// "use the default" of DefaultApprox, except MaxPasses where 0 means no
// refinement.
type ApproxOptions struct {
	// Threads (≤ 0: all cores), Metric, and Progress, which here restarts
	// from 0 at each phase (use PhaseProgress to tell phases apart).
	Options

	// M is the maximum number of links per node in the HNSW indexes.
	M int
	// IndexRows bounds the rows put in the HNSW index: a random sample of
	// IndexRows rows when N is larger (0 = default).
	IndexRows int
	// Ask is the number of index results kept per row (1 ≤ Ask ≤ k); the
	// other k − Ask entries of the starting list are random rows.
	Ask int
	// Shards is the number of indexes built concurrently, each on an
	// interleaved part of the index rows; every row queries every index.
	// 0 = 1.
	Shards int
	// MaxPasses caps the NN-descent passes.
	MaxPasses int
	// InPlace lets Descent reorder the rows of x in place while it runs,
	// restoring them before it returns, instead of working on a reordered
	// copy: N·D·4 bytes less at its peak (200 MB at 1,000,000 × 50). Nothing
	// else may read or write x during the call. Approx ignores it.
	InPlace bool
	// Trees is the number of random projection trees whose leaves give
	// Descent its starting lists (Dasgupta & Freund 2008); < 0 starts from
	// random rows instead. Approx ignores it.
	Trees int
	// LeafRows bounds the rows in a tree's leaf; it is raised to k+1 at
	// least, so that a leaf can fill a list.
	LeafRows int
	// Sample is the NN-descent sampling rate ρ in (0, 1] (Dong et al. 2011):
	// each pass joins up to ⌈ρk⌉ new and ⌈ρk⌉ old neighbours of a row, and as
	// many of each kind of reverse neighbour.
	Sample float64
	// Delta stops refinement when a pass updates fewer than Delta·N·k entries.
	Delta float64
	// StopRecall stops refinement once the recall@k of the graph, estimated
	// before the first pass and after each pass on StopRows sampled rows
	// against the exact search, reaches it; > 1 never stops on it. The
	// sample is drawn apart from any later check (its own seed) and costs
	// StopRows·N·D once.
	StopRecall float64
	// StopRows is the size of that sample (capped at N).
	StopRows int
	// Seed drives every random choice (HNSW levels, filling, sampling).
	Seed uint64
	// PhaseProgress, if not nil, is called with the phase name ("build",
	// "query", "refine 1", "refine 2", …) and rows done out of total (for
	// "build", the index rows).
	PhaseProgress func(phase string, done, total int64)
}

// DefaultApprox returns the default options for n rows and k neighbours.
//
// The HNSW start (Approx), measured at k = 90 on the 100,000-row demo
// scenario, recall@90 on a 1,000-row sample against the exact search, index
// on 20,000 rows: starting lists of k/3 index results + random rows 0.08,
// after 1, 2, 3 passes 0.31, 0.945, 1.000; keeping 60 or 90 index results
// gave 0.944 and 0.951 after two passes, an index on 50,000 rows 0.967, for
// more build and query time. M = 16 is the library's own default.
//
// The tree start (Descent), 8 trees of at most 2k rows: on the invented
// clustered rows of the tests at 100,000 rows, start recall 0.55 with 4
// trees, 0.78 with 8, 0.88 with 12, and after one pass 0.987, 0.998, 0.999;
// 8 trees with leaves of 128 or 6 of 256 rows did no better. On the
// 1,000,000-row demo scenario: 0.633 at the start, 0.9875 after one pass,
// 1.0000 after two (recall@90 on 10,000 rows: 0.99996).
//
// Refinement: ρ = 0.5 follows Dong et al. 2011 (their recommended trade-off,
// from memory). It stops at an estimated recall of 0.99 on 300 rows, a
// fixed pass count being either too few for large tables (three passes from
// random lists reached 0.953 at 1,000,000 rows) or wasted on easy ones;
// MaxPasses = 6 only bounds hard cases. Threads and Metric are left zero
// (all cores, Euclidean).
func DefaultApprox(n, k int) ApproxOptions {
	return ApproxOptions{
		M:          16,
		IndexRows:  20_000,
		Ask:        max(1, k/3),
		Shards:     1,
		MaxPasses:  6,
		Trees:      8,
		LeafRows:   2 * k,
		Sample:     0.5,
		Delta:      0.001,
		StopRecall: 0.99,
		StopRows:   300,
		Seed:       1,
	}
}

// ApproxStats reports the time spent in each phase of Approx or Refine.
type ApproxStats struct {
	BuildSeconds, QuerySeconds float64
	Passes                     int       // NN-descent passes run
	PassSeconds                []float64 // per pass
	Updates                    []int64   // list entries changed per pass
	// PassRecall is the recall estimated on the StopRows sample before the
	// first pass and after each pass run (empty when StopRecall > 1 or
	// MaxPasses is 0); ProbeSeconds is the time of its exact search.
	PassRecall   []float64
	ProbeSeconds float64
}

func (o *ApproxOptions) resolve(n, k int) {
	def := DefaultApprox(n, k)
	o.Threads = o.threads()
	if o.M <= 0 {
		o.M = def.M
	}
	if o.IndexRows <= 0 {
		o.IndexRows = def.IndexRows
	}
	if o.Ask <= 0 {
		o.Ask = def.Ask
	}
	if o.Trees == 0 {
		o.Trees = def.Trees
	}
	if o.LeafRows <= 0 {
		o.LeafRows = def.LeafRows
	}
	o.LeafRows = max(o.LeafRows, k+1)
	o.Ask = min(o.Ask, k)
	if o.Shards <= 0 {
		o.Shards = 1
	}
	if o.Sample <= 0 || o.Sample > 1 {
		o.Sample = def.Sample
	}
	if o.Delta <= 0 {
		o.Delta = def.Delta
	}
	if o.StopRecall <= 0 {
		o.StopRecall = def.StopRecall
	}
	if o.StopRows <= 0 {
		o.StopRows = def.StopRows
	}
}

func (o *ApproxOptions) report(phase string, done, total int64) {
	if o.PhaseProgress != nil {
		o.PhaseProgress(phase, done, total)
	}
	if o.Progress != nil {
		o.Progress(done, total)
	}
}

func checkInput(x ingest.Matrix, k int) error {
	if x.N < 0 || x.D <= 0 || len(x.Data) != x.N*x.D {
		return fmt.Errorf("matrix is %d×%d but holds %d values", x.N, x.D, len(x.Data))
	}
	if k < 1 || k > x.N-1 {
		return fmt.Errorf("k = %d neighbours needs 1 ≤ k ≤ N−1 = %d", k, x.N-1)
	}
	return nil
}

// Approx returns an approximate k-nearest-neighbour graph of the rows of x:
// HNSW indexes (opt.Shards of them) over a random sample of at most
// opt.IndexRows rows, every row's starting list made of the opt.Ask nearest
// index results and random rows up to k, then NN-descent refinement (Refine).
// Memory beyond the graph (8·N·k bytes) and the refinement's work arrays is
// about 1 KB per index row. While it builds and queries, Approx lowers the
// process-wide GOGC to 20 (runtime/debug.SetGCPercent) unless it is already
// lower, and restores it afterwards; calls overlapping in time may therefore
// leave the lowered value in place. Dist2 holds squared Euclidean
// distances (of the normalised rows for Cosine).
// It needs 1 ≤ k ≤ x.N−1 and len(x.Data) == x.N·x.D. The HNSW phase is not
// bit-reproducible (see the file comment); the refinement is, for any Threads.
func Approx(x ingest.Matrix, k int, opt ApproxOptions) (*Graph, ApproxStats, error) {
	var st ApproxStats
	if err := checkInput(x, k); err != nil {
		return nil, st, fmt.Errorf("approximate neighbours: %w", err)
	}
	opt.resolve(x.N, k)
	rows, err := metricRows(x, opt.Metric)
	if err != nil {
		return nil, st, fmt.Errorf("approximate neighbours: %w", err)
	}
	n := x.N

	// The index rows: a random sample of at most IndexRows rows (all rows if
	// N ≤ IndexRows), in increasing order, cut into Shards interleaved parts.
	sample := SampleRows(n, opt.IndexRows, opt.Seed^0x5a3c)
	shardsN := max(1, min(opt.Shards, len(sample)/(2*(opt.Ask+1))))

	// The library's searches leave about 20 KB of garbage per query (visited
	// sets, heaps, key slices); with the default GOGC = 100 the heap would grow
	// to twice the live graph before each collection (1.9 GB resident at
	// 1,000,000 rows). Collect more often while building and querying: the
	// live heap is mostly pointer-free arrays, so a collection is cheap. A
	// stricter setting of the caller (or GC off) is kept, and the caller's
	// setting is restored before the refinement, which makes little garbage.
	restoreGC := sync.OnceFunc(lowerGC())
	defer restoreGC()

	// Build: shards concurrently, each single-threaded inside the library.
	t0 := time.Now()
	shards := make([]*hnsw.Graph[int32], shardsN)
	var built int64
	var bmu sync.Mutex
	total := int64(len(sample))
	forBlocks(shardsN, 1, opt.Threads, func(s, _ int) {
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
			g.Add(hnsw.MakeNode(int32(i), rows.Data[i*rows.D:(i+1)*rows.D:(i+1)*rows.D]))
			cnt++
			if cnt%chunk == 0 {
				bmu.Lock()
				built += chunk
				opt.report("build", built, total)
				bmu.Unlock()
			}
		}
		bmu.Lock()
		built += int64(cnt % chunk)
		opt.report("build", built, total)
		bmu.Unlock()
		shards[s] = g
	})
	st.BuildSeconds = time.Since(t0).Seconds()

	// Query every shard for every row; keep the Ask nearest results and fill
	// the list with random distinct rows.
	t0 = time.Now()
	g := &Graph{N: n, K: k, Index: make([]int32, n*k), Dist2: make([]float32, n*k)}
	var queried int64
	var qmu sync.Mutex
	forBlocks(n, descentBlock, opt.Threads, func(lo, hi int) {
		cand := make([]int32, 0, max(k, shardsN*(opt.Ask+1)))
		cd := make([]float32, 0, cap(cand))
		seen := make(map[int32]struct{}, cap(cand))
		var keys []uint64
		for i := lo; i < hi; i++ {
			xi := rows.Data[i*rows.D : (i+1)*rows.D]
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
			// Random rows up to k; refinement recomputes every distance.
			row := g.Index[i*k : (i+1)*k]
			copy(row, cand)
			fillRandom(row, len(cand), i, n, opt.Seed^0x41f7, seen)
		}
		qmu.Lock()
		queried += int64(hi - lo)
		opt.report("query", queried, int64(n))
		qmu.Unlock()
	})
	st.QuerySeconds = time.Since(t0).Seconds()
	shards = nil // drop the indexes before refinement
	runtime.GC()
	restoreGC()

	rs, err := refineRows(g, rows, opt)
	rs.BuildSeconds, rs.QuerySeconds = st.BuildSeconds, st.QuerySeconds
	st = rs
	if err != nil {
		return nil, st, fmt.Errorf("approximate neighbours: %w", err)
	}
	return g, st, nil
}

// Refine improves g in place by NN-descent on the rows of x (Dong, Charikar &
// Li 2011): at most opt.MaxPasses passes with sampling rate opt.Sample,
// stopping early when a pass changes fewer than opt.Delta·N·K entries. g must
// have g.N == x.N rows of K distinct neighbours, none the row itself (any
// order); its distances are recomputed, so Dist2 may be empty of meaning on
// entry. On return rows are sorted nearest first (ties by lower index). The
// result is the same bits for any opt.Threads with the same opt.Seed.
// Refinement never removes a neighbour without adding a nearer one, so recall
// against the exact graph cannot fall except through distance ties.
func Refine(g *Graph, x ingest.Matrix, opt ApproxOptions) (ApproxStats, error) {
	if g == nil {
		return ApproxStats{}, fmt.Errorf("refining neighbours: nil graph")
	}
	if g.K > 0 {
		if err := checkInput(x, g.K); err != nil {
			return ApproxStats{}, fmt.Errorf("refining neighbours: %w", err)
		}
	}
	opt.resolve(x.N, g.K)
	rows, err := metricRows(x, opt.Metric)
	if err != nil {
		return ApproxStats{}, fmt.Errorf("refining neighbours: %w", err)
	}
	return refineRows(g, rows, opt)
}

// lowerGC sets the process-wide GOGC to queryGCPercent unless it is already
// lower (or off), and returns the function that restores the caller's
// setting.
func lowerGC() func() {
	old := debug.SetGCPercent(queryGCPercent)
	if old < queryGCPercent {
		debug.SetGCPercent(old)
	}
	return func() { debug.SetGCPercent(old) }
}

// probeSeed is mixed into ApproxOptions.Seed to draw the stopping sample, so
// that it is not the sample of a later Recall check with the same seed.
const probeSeed = 0x7e1a5b3c9d2f4e61

func refineRows(g *Graph, rows ingest.Matrix, opt ApproxOptions) (ApproxStats, error) {
	var st ApproxStats
	p := descentParams{
		threads:    opt.Threads,
		sample:     opt.Sample,
		delta:      opt.Delta,
		maxPasses:  opt.MaxPasses,
		seed:       opt.Seed,
		progress:   opt.report,
		stopRecall: opt.StopRecall,
	}
	if opt.StopRecall <= 1 && opt.MaxPasses > 0 && g.K > 0 && g.N > g.K {
		t0 := time.Now()
		p.probe = SampleRows(g.N, opt.StopRows, opt.Seed^probeSeed)
		// rows is already normalised for the metric: Euclidean order on it is
		// the metric's order.
		truth, _, err := ExactRows(rows, p.probe, g.K, Options{Threads: opt.Threads})
		if err != nil {
			return st, err
		}
		p.truth = truth
		st.ProbeSeconds = time.Since(t0).Seconds()
		// The exact search leaves an N·D copy of the rows behind; collect
		// it (and the start's garbage) now, so that the refinement's
		// arrays reuse that memory instead of adding to it. The heap is
		// mostly pointer-free arrays, so a collection costs milliseconds.
		runtime.GC()
	}
	res, err := refine(g, rows, p)
	st.Passes, st.PassSeconds, st.Updates, st.PassRecall = res.passes, res.seconds, res.updates, res.recall
	return st, err
}

// Descent returns an approximate k-nearest-neighbour graph of the rows of x by
// NN-descent, started from the leaves of opt.Trees random projection trees
// (rptree.go) instead of HNSW candidates, or from k distinct random rows per
// row when opt.Trees < 0 (the starting point of Dong, Charikar & Li 2011).
// With trees it works on the rows renumbered for locality, in a copy (N·D
// float32 more memory) unless opt.InPlace, and maps the graph back. Unlike Approx it is
// bit-reproducible: the same x, k, opt.Seed and options give the same graph
// for any opt.Threads. opt.M, opt.Ask, opt.Shards and opt.IndexRows are
// ignored; BuildSeconds in the stats is the time of the start. Like Approx
// it lowers the process-wide GOGC while it runs and restores it after.
// Preconditions as for Approx.
func Descent(x ingest.Matrix, k int, opt ApproxOptions) (*Graph, ApproxStats, error) {
	var st ApproxStats
	if err := checkInput(x, k); err != nil {
		return nil, st, fmt.Errorf("neighbours by NN-descent: %w", err)
	}
	opt.resolve(x.N, k)
	rows, err := metricRows(x, opt.Metric)
	if err != nil {
		return nil, st, fmt.Errorf("neighbours by NN-descent: %w", err)
	}
	// The start and the probe leave garbage (trees, sort keys, the exact
	// search's copy of the rows) while the refinement's arrays are being
	// allocated: collect more often, as Approx does while it queries.
	defer lowerGC()()
	n := x.N
	g := &Graph{N: n, K: k, Index: make([]int32, n*k), Dist2: make([]float32, n*k)}
	t0 := time.Now()
	var order []int32
	if opt.Trees > 0 {
		// Work on rows renumbered in the leaf order of one more tree (see
		// rptree.go); the graph is mapped back at the end.
		order = buildRPTree(rows, opt.LeafRows, opt.Seed, 1<<20).perm
		switch {
		case opt.Metric == Cosine:
			permuteInPlace(rows, order) // rows is already Descent's own copy
		case opt.InPlace:
			permuteInPlace(rows, order)
			defer permuteInPlace(rows, inverse(order))
		default:
			rows = permuteRows(rows, order, opt.Threads)
		}
		rpStart(g, rows, opt.Trees, opt.LeafRows, opt.Seed, opt.Threads)
	} else {
		randomStart(g, opt.Seed, opt.Threads)
	}
	startSec := time.Since(t0).Seconds()
	rs, err := refineRows(g, rows, opt)
	rs.BuildSeconds = startSec
	if err != nil {
		return nil, rs, fmt.Errorf("neighbours by NN-descent: %w", err)
	}
	if order != nil {
		unpermuteGraph(g, order, opt.Threads)
	}
	return g, rs, nil
}
