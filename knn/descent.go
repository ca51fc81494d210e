package knn

import (
	"fmt"
	"time"

	"nightjar/internal/core"
	"nightjar/internal/par"
)

// RefineOptions configure NN-descent refinement: Refine, and the refinement
// that ends Descent and HNSW. DefaultRefine gives the defaults; a zero
// Sample, Delta, StopRecall or StopRows also means its default, while
// MaxPasses = 0 means no refinement.
type RefineOptions struct {
	// Threads and Metric.
	Options
	// Seed drives every random choice of the refinement (and of the start
	// of Descent and HNSW).
	Seed uint64
	// MaxPasses caps the NN-descent passes.
	MaxPasses int
	// Sample is the NN-descent sampling rate ρ in (0, 1] (Dong et al. 2011):
	// each pass joins up to ⌈ρk⌉ new and ⌈ρk⌉ old neighbours of a row, and as
	// many of each kind of reverse neighbour.
	Sample float64
	// Delta stops refinement when a pass updates fewer than Delta·N·k entries.
	Delta float64
	// StopRecall stops refinement once the recall@k of the graph, estimated
	// before the first pass and after each pass on StopRows sampled rows
	// against the exact search, reaches it; > 1 never stops on it. The
	// sample is drawn apart from any later Recall check (its own seed) and
	// costs StopRows·N·D once.
	StopRecall float64
	// StopRows is the size of that sample (capped at N).
	StopRows int
	// Progress, if not nil, is called with the phase name and rows done out
	// of total: "refine 1", "refine 2", … (HNSW adds "build", counting index
	// rows, and "query"). Calls are serialised; done restarts at each phase.
	Progress func(phase string, done, total int64)
}

// DefaultRefine returns the default refinement settings.
//
// ρ = 0.5 follows Dong et al. 2011 (their recommended trade-off, from
// memory). Refinement stops at an estimated recall of 0.99 on 300 rows, a
// fixed pass count being either too few for large tables (three passes from
// random lists reached 0.953 at 1,000,000 rows) or wasted on easy ones;
// MaxPasses = 6 only bounds hard cases. Threads and Metric are left zero
// (one thread, Euclidean).
func DefaultRefine() RefineOptions {
	return RefineOptions{
		MaxPasses:  6,
		Sample:     0.5,
		Delta:      0.001,
		StopRecall: 0.99,
		StopRows:   300,
		Seed:       1,
	}
}

// resolve puts the defaults in place of zero (or out-of-range) fields.
func (o *RefineOptions) resolve() {
	def := DefaultRefine()
	o.Threads = o.threads()
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

// report passes a phase's progress on to Progress, if set.
func (o *RefineOptions) report(phase string, done, total int64) {
	if o.Progress != nil {
		o.Progress(phase, done, total)
	}
}

// Stats report the time spent in each phase of an approximate search and
// what its refinement did. A phase that did not run has zero seconds.
type Stats struct {
	// TreeSeconds is Descent's start: its random projection trees (or its
	// random lists when Trees < 0); Trees is the number of trees it used.
	TreeSeconds float64
	Trees       int
	// BuildSeconds and QuerySeconds are HNSW's start: building its index
	// and querying it for every row.
	BuildSeconds, QuerySeconds float64
	// ProbeSeconds is the exact search on the stopping sample.
	ProbeSeconds float64
	// Passes is the number of NN-descent passes run; PassSeconds and
	// Updates (list entries changed) have one entry per pass.
	Passes      int
	PassSeconds []float64
	Updates     []int64
	// PassRecall is the recall estimated on the stopping sample before the
	// first pass and after each pass run (empty when StopRecall > 1 or
	// MaxPasses is 0).
	PassRecall []float64
}

// checkInput checks the table's size and 1 ≤ k ≤ N−1.
func checkInput(x core.Matrix, k int) error {
	if x.N < 0 || x.D <= 0 || len(x.Data) != x.N*x.D {
		return fmt.Errorf("matrix is %d×%d but holds %d values", x.N, x.D, len(x.Data))
	}
	if k < 1 || k > x.N-1 {
		return fmt.Errorf("k = %d neighbours needs 1 ≤ k ≤ N−1 = %d", k, x.N-1)
	}
	return nil
}

// Refine improves g in place by NN-descent on the rows of x (Dong, Charikar &
// Li 2011): at most opt.MaxPasses passes with sampling rate opt.Sample,
// stopping early when a pass changes fewer than opt.Delta·N·K entries or the
// estimated recall reaches opt.StopRecall. g must have g.N == x.N rows of K
// distinct neighbours, none the row itself (any order); its distances are
// recomputed, so Dist2 may be empty of meaning on entry. On return rows are
// sorted nearest first (ties by lower index). The result is the same bits
// for any opt.Threads with the same opt.Seed. Refinement never removes a
// neighbour without adding a nearer one, so recall against the exact graph
// cannot fall except through distance ties.
func Refine(g *core.Graph, x core.Matrix, opt RefineOptions) (Stats, error) {
	if g == nil {
		return Stats{}, fmt.Errorf("refining neighbours: nil graph")
	}
	if g.K > 0 {
		if err := checkInput(x, g.K); err != nil {
			return Stats{}, fmt.Errorf("refining neighbours: %w", err)
		}
	}
	opt.resolve()
	rows, err := metricRows(x, opt.Metric)
	if err != nil {
		return Stats{}, fmt.Errorf("refining neighbours: %w", err)
	}
	return refineRows(g, rows, opt)
}

// refineRows runs the refinement of g on rows already normalised for the
// metric, with resolved options, after the exact search of the stopping
// probe when there is one.
func refineRows(g *core.Graph, rows core.Matrix, opt RefineOptions) (Stats, error) {
	return refineProbed(g, rows, opt, nil, nil, 0)
}

// usesProbe tells whether a refinement of g with opt stops on a recall
// estimated on a probe.
func (opt RefineOptions) usesProbe(g *core.Graph) bool {
	return opt.StopRecall <= 1 && opt.MaxPasses > 0 && g.K > 0 && g.N > g.K
}

// refineProbed is refineRows with the stopping probe and its exact lists
// already found (in probeSec seconds) when probe is not nil.
func refineProbed(g *core.Graph, rows core.Matrix, opt RefineOptions, probe, truth []int32, probeSec float64) (Stats, error) {
	var st Stats
	if g.N != rows.N {
		return st, fmt.Errorf("refining neighbours: graph has %d rows, matrix %d", g.N, rows.N)
	}
	p := descentParams{
		threads:    opt.Threads,
		sample:     opt.Sample,
		delta:      opt.Delta,
		maxPasses:  opt.MaxPasses,
		seed:       opt.Seed,
		progress:   opt.Progress,
		stopRecall: opt.StopRecall,
	}
	switch {
	case probe != nil:
		p.probe, p.truth = probe, truth
		st.ProbeSeconds = probeSec
	case opt.usesProbe(g):
		t0 := time.Now()
		probe, truth, err := stopProbe(rows, g.K, opt.StopRows, opt.Seed, opt.Threads)
		if err != nil {
			return st, err
		}
		p.probe, p.truth = probe, truth
		st.ProbeSeconds = time.Since(t0).Seconds()
	}
	res, err := refine(g, rows, p)
	st.Passes, st.PassSeconds, st.Updates, st.PassRecall = res.passes, res.seconds, res.updates, res.recall
	return st, err
}

// DescentOptions configure Descent. DefaultDescent gives the defaults; a
// zero Trees or LeafRows also means its default.
type DescentOptions struct {
	RefineOptions
	// Trees is the number of random projection trees whose leaves give the
	// starting lists (Dasgupta & Freund 2008); < 0 starts from random rows
	// instead (the start of Dong et al. 2011).
	Trees int
	// LeafRows bounds the rows in a tree's leaf; it is raised to k+1 at
	// least, so that a leaf can fill a list.
	LeafRows int
	// StartRecall and MaxTrees grow the start on large tables: while the
	// recall of the start, estimated on the stopping probe, is below
	// StartRecall, TreeStep more trees are added, up to MaxTrees in all.
	// It needs the probe (StopRecall ≤ 1 and MaxPasses > 0); StartRecall 0
	// keeps Trees. Trees are added to the start, not rebuilt, so a run
	// whose first Trees reach StartRecall keeps its bits.
	StartRecall float64
	MaxTrees    int
	// InPlace lets Descent reorder the rows of x in place while it runs,
	// restoring them before it returns, instead of working on a reordered
	// copy: N·D·4 bytes less at its peak (200 MB at 1,000,000 × 50). Nothing
	// else may read or write x during the call.
	InPlace bool
}

// DefaultDescent returns the default options of Descent for k neighbours:
// DefaultRefine's refinement, started from 8 trees of at most 2k rows, grown
// by TreeStep trees at a time (up to 24) while the start's estimated recall
// is below 0.8.
//
// Why grow the start: on the 1,000,000-row demo scenario (k = 90, 2
// threads, 2026-12-03) 8 trees start at recall 0.633 and need two passes
// (242 s in all: start 43 s, passes 62 s and 124 s); 12 trees start at
// 0.766 and need one (158 s); 16 trees at 0.845 and one cheaper pass (136
// s: start 72 s, pass 54 s). At 100,000 rows 8 trees already start at 0.818
// and one pass reaches 0.9988 in 10.3 s, where 12 or 16 trees take 12–15 s:
// hence a goal on the start's recall rather than more trees for every
// table. A start that reaches 0.8 with its first 8 trees is unchanged. On
// 1,000,000 document embeddings (768 columns reduced to 50, cosine) 8 trees
// start at 0.358 and need four passes (443 s); grown to 24 they start at
// 0.653 and need three (394 s; both measured beside other work).
//
// Measured on the invented clustered rows of the tests at 100,000 rows:
// start recall 0.55 with 4 trees, 0.78 with 8, 0.88 with 12, and after one
// pass 0.987, 0.998, 0.999; 8 trees with leaves of 128 or 6 of 256 rows did
// no better. On the 1,000,000-row demo scenario: 0.633 at the start, 0.9875
// after one pass, 1.0000 after two (recall@90 on 10,000 rows: 0.99996).
//
// With these defaults (k = 90, 2 threads, idle machine, recall@90 against
// the exact search) Descent reached: demo 100,000 × 50, 0.9986 in 12 s (one
// pass); demo 1,000,000 × 50, 0.99996 in 281 s (two passes); MNIST
// 70,000 × 784, 0.9984 in 112 s; MNIST after PCA to 50, 0.9987 in 19 s —
// sooner than HNSW's start to the same recall (see DefaultHNSW), and bit for
// bit repeatable, so it is the method to prefer for large tables.
func DefaultDescent(k int) DescentOptions {
	return DescentOptions{RefineOptions: DefaultRefine(), Trees: 8, LeafRows: 2 * k, StartRecall: 0.8, MaxTrees: 24}
}

// TreeStep is the number of trees added at a time while the start's
// recall is below DescentOptions.StartRecall.
const TreeStep = 4

// resolve puts the defaults in place of zero fields, for k neighbours.
func (o *DescentOptions) resolve(k int) {
	def := DefaultDescent(k)
	o.RefineOptions.resolve()
	if o.Trees == 0 {
		o.Trees = def.Trees
	}
	if o.LeafRows <= 0 {
		o.LeafRows = def.LeafRows
	}
	o.LeafRows = max(o.LeafRows, k+1)
}

// Descent returns an approximate k-nearest-neighbour graph of the rows of x
// by NN-descent (Dong, Charikar & Li 2011), started from the leaves of
// opt.Trees random projection trees (Dasgupta & Freund 2008; more while the
// start's recall is below opt.StartRecall, see DescentOptions), or from k
// distinct random rows per row when opt.Trees < 0. With trees it works on
// the rows renumbered for locality, in a copy (N·D float32 more memory)
// unless opt.InPlace, and maps the graph back. The same x, k, opt.Seed and
// options give the same graph for any opt.Threads. Dist2 holds squared
// Euclidean distances (of the normalised rows for Cosine). In the stats,
// TreeSeconds is the time of the start and Trees its number of trees.
//
// Memory beyond the graph (8·N·k bytes): the refinement's work arrays and,
// while the start and the stopping probe run, their garbage (trees, sort
// keys, the exact search's copy of the rows). Descent changes no
// process-wide setting; a caller that watches peak memory may lower GOGC
// around the call (see Build).
//
// It needs 1 ≤ k ≤ x.N−1 and len(x.Data) == x.N·x.D; under Cosine a row of
// zeros gives a *ZeroRowError.
func Descent(x core.Matrix, k int, opt DescentOptions) (*core.Graph, Stats, error) {
	var st Stats
	if err := checkInput(x, k); err != nil {
		return nil, st, fmt.Errorf("neighbours by NN-descent: %w", err)
	}
	opt.resolve(k)
	rows, err := metricRows(x, opt.Metric)
	if err != nil {
		return nil, st, fmt.Errorf("neighbours by NN-descent: %w", err)
	}
	n := x.N
	g := &core.Graph{N: n, K: k, Index: make([]int32, n*k), Dist2: make([]float32, n*k)}
	t0 := time.Now()
	var order []int32
	if opt.Trees > 0 {
		// Work on rows renumbered in the leaf order of one more tree; the
		// graph is mapped back at the end.
		order = buildRPTree(rows, opt.LeafRows, opt.Seed, 1<<20).perm
		switch {
		case opt.Metric == Cosine:
			permuteInPlace(rows, order) // rows is already Descent's own copy
		case opt.InPlace:
			permuteInPlace(rows, order)
			defer permuteInPlace(rows, par.Inverse(order))
		default:
			rows = permuteRows(rows, order, opt.Threads)
		}
	}
	var probe, truth []int32
	var probeSec float64
	if opt.RefineOptions.usesProbe(g) {
		// The probe's exact lists come first: a growing start is measured
		// on them, and the refinement stops on them.
		tp := time.Now()
		if probe, truth, err = stopProbe(rows, k, opt.StopRows, opt.Seed, opt.Threads); err != nil {
			return nil, st, fmt.Errorf("neighbours by NN-descent: %w", err)
		}
		probeSec = time.Since(tp).Seconds()
	}
	trees := opt.Trees
	if opt.Trees > 0 {
		rpClear(g)
		rpAddTrees(g, rows, 0, trees, opt.LeafRows, opt.Seed, opt.Threads)
		for probe != nil && trees < opt.MaxTrees && probeRecall(g, probe, truth) < opt.StartRecall {
			next := min(trees+TreeStep, opt.MaxTrees)
			rpAddTrees(g, rows, trees, next, opt.LeafRows, opt.Seed, opt.Threads)
			trees = next
		}
		rpFill(g, opt.Seed, opt.Threads)
	} else {
		randomStart(g, opt.Seed, opt.Threads)
	}
	startSec := time.Since(t0).Seconds() - probeSec
	st, err = refineProbed(g, rows, opt.RefineOptions, probe, truth, probeSec)
	st.TreeSeconds, st.Trees = startSec, max(trees, 0)
	if err != nil {
		return nil, st, fmt.Errorf("neighbours by NN-descent: %w", err)
	}
	if order != nil {
		unpermuteGraph(g, order, opt.Threads)
	}
	return g, st, nil
}

// randomStart fills g.Index with k distinct random rows other than the row
// itself: the starting point of Dong, Charikar & Li 2011.
func randomStart(g *core.Graph, seed uint64, threads int) {
	n, k := g.N, g.K
	par.Blocks(n, descentBlock, threads, func(_, _, lo, hi int) {
		seen := make(map[int32]struct{}, k)
		for i := lo; i < hi; i++ {
			fillRandom(g.Index[i*k:(i+1)*k], 0, i, n, seed, seen)
		}
	})
}

// Locality. NN-descent reads the rows and lists of a row's neighbours, which
// in input order lie anywhere in memory: at 1,000,000 rows nearly every such
// read misses the caches. Descent therefore renumbers the rows in the leaf
// order of one more tree, so that near rows get near numbers, works on the
// renumbered rows, and maps the graph back.

// permuteRows returns the rows of x in the given order (a permutation of
// 0 … N−1): row t of the result is row order[t] of x.
func permuteRows(x core.Matrix, order []int32, threads int) core.Matrix {
	out := core.Matrix{N: x.N, D: x.D, Data: make([]float32, len(x.Data))}
	d := x.D
	par.Blocks(x.N, 4096, threads, func(_, _, lo, hi int) {
		par.Gather(out.Data[lo*d:hi*d], x.Data, order[lo:hi], d)
	})
	return out
}

// permuteInPlace reorders the rows of x in place so that row t becomes the
// former row order[t], the result permuteRows returns as a copy.
func permuteInPlace(x core.Matrix, order []int32) { par.GatherInPlace(x.Data, x.D, order) }

// unpermuteGraph turns g, a graph of the rows of permuteRows(x, order), into
// the graph of x in place: neighbour numbers are mapped through order, row t
// moves to row order[t], and rows with equal distances are sorted again by
// (distance, index), since their ties now rank by other numbers (rows come
// sorted by distance from refine, so the others need no sort).
func unpermuteGraph(g *core.Graph, order []int32, threads int) {
	n, k := g.N, g.K
	par.Blocks(n, descentBlock, threads, func(_, _, lo, hi int) {
		for e := lo * k; e < hi*k; e++ {
			g.Index[e] = order[g.Index[e]]
		}
	})
	inv := par.Inverse(order) // row t moves to order[t]: row u takes row inv[u]
	par.GatherInPlace(g.Index, k, inv)
	par.GatherInPlace(g.Dist2, k, inv)
	par.Blocks(n, descentBlock, threads, func(_, _, lo, hi int) {
		var keys []uint64
		for i := lo; i < hi; i++ {
			d := g.Dist2[i*k : (i+1)*k]
			for j := 1; j < k; j++ {
				if d[j] == d[j-1] {
					keys = sortRow(g.Index[i*k:(i+1)*k], d, keys)
					break
				}
			}
		}
	})
}
