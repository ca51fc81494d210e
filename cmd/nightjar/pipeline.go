package main

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"os/signal"
	"runtime/debug"
	"strings"
	"sync"
	"sync/atomic"
	"syscall"
	"time"

	"nightjar/bench/figure"
	"nightjar/checkpoint"
	"nightjar/gradient"
	"nightjar/ingest"
	"nightjar/knn"
)

// Names of the files in a run directory besides the manifest and states.
const (
	fileGraph     = "neighbours.njg"
	fileP         = "affinities.njp"
	fileEmbedding = "embedding.parquet"
	fileMap       = "map.png"
	fileReport    = "report.json"
)

// autoExactRows is the largest table --neighbours auto sends to the exact
// search; above it auto uses NN-descent started from random projection
// trees. Measured on 2 cores at k = 90 on the demo scenario: at 50,000 rows
// the exact search took 10.2 s and NN-descent 4.9 s (recall 0.9995), at
// 100,000 rows about 45 s and 12 s, at 1,000,000 rows an estimated 3,500 s
// (10,000 exact queries timed, scaled) and 281 s. Below 50,000 rows the
// exact search costs seconds, so auto keeps its exact answer there.
//
// Auto prefers NN-descent to an HNSW start + NN-descent because the HNSW
// start is slower to reach the same recall (1,000,000 demo rows: 591 s and
// four passes against 281 s and two; MNIST 70,000: 181 s against 112 s), and
// because its result is the same bits on every run; the HNSW library's index
// depends on Go's randomised map order, so "hnsw" runs do not repeat bit for
// bit.
const autoExactRows = 50000

// job holds one invocation's state while it runs the phases.
type job struct {
	run    *checkpoint.Run
	s      settings
	r      runtimeOpts
	ui     *ui
	stdout io.Writer
	start  time.Time

	mu       sync.Mutex // guards the manifest against the signal handler
	rep      report
	table    *ingest.Table
	P        gradient.Affinities
	elapsed0 float64      // seconds of work recorded before this invocation
	stopping atomic.Int32 // signal number once a stop was asked for
	inOpt    atomic.Bool  // the optimiser loop is running and will checkpoint on a stop
}

// execute runs (or, when resumed, continues) every phase of a run.
func execute(run *checkpoint.Run, s settings, r runtimeOpts, resumed bool, stdout, stderr io.Writer) (err error) {
	j := &job{run: run, s: s, r: r, ui: &ui{w: stderr, quiet: r.Quiet}, stdout: stdout, start: time.Now()}
	j.rep = newReport(s, r)
	stop := j.watchSignals()
	defer stop()
	defer func() {
		if err != nil {
			j.ui.done()
			var intr *interrupted
			if !errors.As(err, &intr) {
				j.setStatus(checkpoint.StatusFailed, "")
			}
		}
	}()
	m := run.Manifest()
	j.elapsed0 = m.Elapsed
	if resumed {
		j.rep.Resumed = true
		j.ui.note("resuming %s at phase %q, iteration %d", run.Dir, m.Phase, m.Iteration)
	}
	j.setStatus(checkpoint.StatusRunning, "")

	if err := j.readInput(resumed); err != nil {
		return err
	}
	p, err := j.affinities()
	if err != nil {
		return err
	}
	if p.N <= gradient.ExactLimit {
		j.P = p // for the exact KL of the report
	}
	y, err := j.optimise(&p)
	if err != nil {
		return err
	}
	return j.finish(y)
}

// setStatus records status (and phase, when not empty) in the manifest.
func (j *job) setStatus(status, phase string) {
	j.mu.Lock()
	defer j.mu.Unlock()
	m := j.run.Manifest()
	m.Status = status
	if phase != "" {
		m.Phase = phase
	}
	switch {
	case status == checkpoint.StatusFailed:
		m.Phase = checkpoint.PhaseFailed
	case m.Phase == checkpoint.PhaseFailed:
		// A failed run being resumed starts again from its files.
		m.Phase = checkpoint.PhaseCreated
	}
	m.Updated = time.Now()
	m.Elapsed = j.elapsed0 + time.Since(j.start).Seconds()
	if err := j.run.SaveManifest(m); err != nil {
		j.ui.warn("%v", err)
	}
}

// watchSignals makes SIGINT and SIGTERM stop the run cleanly. In the optimiser
// loop the stop is taken after the current iteration, with a checkpoint; in an
// earlier phase the run stops at once (that phase restarts on resume).
func (j *job) watchSignals() func() {
	ch := make(chan os.Signal, 2)
	signal.Notify(ch, syscall.SIGINT, syscall.SIGTERM)
	quit := make(chan struct{})
	go func() {
		for {
			select {
			case <-quit:
				return
			case sig := <-ch:
				num := int32(sig.(syscall.Signal))
				if !j.stopping.CompareAndSwap(0, num) || !j.inOpt.Load() {
					// A second signal, or no checkpoint to wait for: stop now.
					j.ui.done()
					j.setStatus(checkpoint.StatusInterrupted, "")
					code := exitCodeFor(syscall.Signal(num))
					fmt.Fprintf(j.ui.w, "nightjar: interrupted during phase %q; continue with: nightjar resume %s\n", j.run.Manifest().Phase, j.run.Dir)
					os.Exit(code)
				}
			}
		}
	}()
	return func() { signal.Stop(ch); close(quit) }
}

func exitCodeFor(sig syscall.Signal) int {
	if sig == syscall.SIGTERM {
		return exitTerm
	}
	return exitInterrupt
}

// idLikeColumns returns the feature names that look like row identifiers or
// a saved data-frame index (common practice for such names; pandas writes its
// index to Parquet as "__index_level_0__", from memory): id, index, rowid,
// row_id, or a name ending in _id.
func idLikeColumns(features []string) []string {
	var out []string
	for _, f := range features {
		l := strings.ToLower(f)
		switch {
		case l == "id", l == "index", l == "rowid", l == "row_id",
			strings.HasSuffix(l, "_id"), strings.HasPrefix(l, "__index_level_"):
			out = append(out, f)
		}
	}
	return out
}

// readInput reads the table and checks (on resume) that it is the one the run began with.
func (j *job) readInput(resumed bool) error {
	t0 := time.Now()
	fp, err := checkpoint.FingerprintFile(j.s.Input)
	if err != nil {
		return &usageError{fmt.Sprintf("input %s: %v", j.s.Input, err)}
	}
	bar := j.ui.phase("reading rows", -1)
	t, pca, err := readTable(j.s, bar)
	j.ui.done()
	if err != nil {
		return err
	}
	if pca != nil {
		j.rep.Reduced = &reduced{From: pca.D, To: pca.K, Variance: pca.Variance}
	}
	fp.ValuesHash = t.Hash
	// A run killed after its manifest was first written but before the
	// input was read has no input recorded, and nothing computed from it:
	// there is nothing to compare.
	if rec := j.run.Manifest().Input; resumed && rec.Path != "" {
		if same, why := rec.Same(fp); !same {
			if !j.r.force {
				return &usageError{fmt.Sprintf("input %s changed since the run began (%s); resume with --force to use it anyway", j.s.Input, why)}
			}
			j.ui.warn("input changed since the run began (%s); continuing because of --force", why)
		}
	}
	j.mu.Lock()
	m := j.run.Manifest()
	m.Input = fp
	j.mu.Unlock()
	j.table = t
	if len(j.s.Features) == 0 {
		for _, name := range idLikeColumns(t.Features) {
			j.ui.warn("feature column %q looks like a row identifier, and its values would weigh on every distance; if it is one, pass --id %s or choose the features with --features", name, name)
		}
	}
	if t.Skipped > 0 {
		j.ui.note("skipped %d rows with NaN, Inf or empty features (--skip-invalid)", t.Skipped)
	}
	j.ui.note("read %d rows × %d features from %s (%s) in %.1fs", t.N, t.D, j.s.Input, t.Format, time.Since(t0).Seconds())
	j.rep.Rows, j.rep.Features, j.rep.Skipped, j.rep.Format = t.N, t.D, t.Skipped, t.Format
	j.rep.Phases["read"] = time.Since(t0).Seconds()
	j.rep.PhaseMemory["read"] = peakMemory()
	return nil
}

// affinities loads P from the run directory, or computes it from the
// neighbour graph (itself loaded, or computed and saved) and saves it.
func (j *job) affinities() (gradient.Affinities, error) {
	n := j.table.N
	k := knn.Neighbours(j.s.Perplexity, n)
	if err := knn.CheckPerplexity(j.s.Perplexity, n); err != nil {
		return gradient.Affinities{}, fmt.Errorf("%s: %w", j.s.Input, err)
	}
	if p, ok := j.loadP(); ok {
		j.ui.note("affinities loaded from %s", j.run.Path(fileP))
		return p, nil
	}
	g := j.loadGraph(k)
	if g != nil {
		j.ui.note("neighbour graph loaded from %s", j.run.Path(fileGraph))
	} else {
		var err error
		if g, err = j.neighbours(k); err != nil {
			return gradient.Affinities{}, err
		}
		// The neighbour search's work arrays (about 1 GB at 1,000,000 rows)
		// are garbage now. Collect them and hand the pages back to the
		// system, so that P's arrays do not stack up on pages the process
		// still holds (measured: 3.28 GB peak at 1,000,000 rows without).
		debug.FreeOSMemory()
	}
	j.setStatus(checkpoint.StatusRunning, checkpoint.PhaseAffinities)
	t0 := time.Now()
	// The graph is saved (or was loaded), so its memory can hold the
	// conditional probabilities.
	P, err := knn.AffinityConsume(g, j.s.Perplexity, j.r.Threads)
	debug.FreeOSMemory()
	if err != nil {
		return gradient.Affinities{}, err
	}
	j.rep.Affinities.Seconds = time.Since(t0).Seconds()
	j.rep.Affinities.Entries = int64(len(P.Vals))
	if err := j.run.SaveArtifact(fileP, "affinity", csrSections(P, j.phaseReport())); err != nil {
		return gradient.Affinities{}, err
	}
	j.rep.PhaseMemory["affinities"] = peakMemory()
	j.ui.note("affinities: perplexity %g, %d entries, %.1fs", j.s.Perplexity, len(P.Vals), j.rep.Affinities.Seconds)
	return toAffinities(P), nil
}

// neighbours computes the k-nearest-neighbour graph, measures the recall of
// an approximate one, and saves it.
func (j *job) neighbours(k int) (*knn.Graph, error) {
	n := j.table.N
	j.setStatus(checkpoint.StatusRunning, checkpoint.PhaseNeighbours)
	metric, _ := knn.ParseMetric(j.s.Metric)
	opt := knn.Options{Threads: j.r.Threads, Metric: metric}
	method := j.s.Neighbours
	if method == "auto" {
		method = "exact"
		if n > autoExactRows {
			method = "descent"
		}
	}
	t0 := time.Now()
	var g *knn.Graph
	var err error
	if method == "exact" {
		opt.Progress = j.ui.phase("neighbours (exact)", int64(n))
		g, err = knn.Exact(j.table.Matrix, k, opt)
	} else {
		g, err = j.approxGraph(method, k, opt)
	}
	j.ui.done()
	if err != nil {
		var zero *knn.ZeroRowError
		if errors.As(err, &zero) {
			return nil, fmt.Errorf("%s: %w (cosine distance needs a non-zero row)", j.s.Input, err)
		}
		return nil, err
	}
	j.rep.Neighbours.Method, j.rep.Neighbours.K = method, k
	j.rep.Neighbours.Seconds = time.Since(t0).Seconds()
	if method != "exact" && j.s.CheckRecall > 0 {
		t1 := time.Now()
		rec, rows, err := knn.Recall(g, j.table.Matrix, j.s.CheckRecall, j.s.Seed+1, knn.Options{Threads: j.r.Threads, Metric: metric})
		if err != nil {
			return nil, err
		}
		j.rep.Neighbours.Recall, j.rep.Neighbours.RecallSample = &rec, rows
		j.rep.Phases["recall_check"] = time.Since(t1).Seconds()
		j.ui.note("neighbour recall@%d = %.4f on %d sampled rows (%.1fs)", k, rec, rows, time.Since(t1).Seconds())
	}
	j.ui.note("neighbours: %s, k = %d, %.1fs", method, k, j.rep.Neighbours.Seconds)
	j.rep.PhaseMemory["neighbours"] = peakMemory()
	if err := j.run.SaveArtifact(fileGraph, "graph", graphSections(g, j.phaseReport())); err != nil {
		return nil, err
	}
	return g, nil
}

// phaseReport is the report of the phases before the optimiser, stored
// beside the graph and P so that a resumed run still reports them.
type phaseReport struct {
	Neighbours any                `json:"neighbours"`
	Affinities any                `json:"affinities"`
	Phases     map[string]float64 `json:"phase_seconds"`
}

func (j *job) phaseReport() []byte {
	b, _ := json.Marshal(phaseReport{Neighbours: &j.rep.Neighbours, Affinities: &j.rep.Affinities, Phases: j.rep.Phases})
	return b
}

// restorePhaseReport reads back what phaseReport stored; a missing or
// unreadable section only leaves those report fields empty.
func (j *job) restorePhaseReport(secs []checkpoint.Section) {
	b, err := checkpoint.Lookup(secs, "report")
	if err != nil {
		return
	}
	pr := phaseReport{Neighbours: &j.rep.Neighbours, Affinities: &j.rep.Affinities, Phases: j.rep.Phases}
	_ = json.Unmarshal(b, &pr)
}

// loadGraph reads the neighbour graph saved by an earlier invocation; nil when
// absent or unusable (then it is recomputed).
func (j *job) loadGraph(k int) *knn.Graph {
	secs, err := j.run.LoadArtifact(fileGraph, "graph")
	if errors.Is(err, fs.ErrNotExist) {
		return nil
	}
	if err == nil {
		var g *knn.Graph
		if g, err = graphFromSections(secs, j.table.N, k); err == nil {
			j.restorePhaseReport(secs)
			return g
		}
	}
	j.ui.warn("%v; recomputing the neighbour graph", err)
	return nil
}

// loadP reads P saved by an earlier invocation; false when absent or unusable.
func (j *job) loadP() (gradient.Affinities, bool) {
	secs, err := j.run.LoadArtifact(fileP, "affinity")
	if errors.Is(err, fs.ErrNotExist) {
		return gradient.Affinities{}, false
	}
	if err == nil {
		var P *knn.CSR
		if P, err = csrFromSections(secs, j.table.N); err == nil {
			j.restorePhaseReport(secs)
			return toAffinities(P), true
		}
	}
	j.ui.warn("%v; recomputing the affinities", err)
	return gradient.Affinities{}, false
}

// optimise runs the optimiser from the newest state (or the PCA start),
// writing states as it goes. The optimiser keeps its own copy of P, so
// optimise clears *pp once the optimiser exists, to free the caller's.
func (j *job) optimise(pp *gradient.Affinities) ([]float64, error) {
	n := pp.N
	params, err := j.s.gradientParams(n, j.r.Threads)
	if err != nil {
		return nil, err
	}
	// A saved state, if any, replaces the PCA start (computed only when needed).
	var restored *gradient.State
	if iter, secs, warns, err := j.run.LoadState(); err == nil {
		for _, w := range warns {
			j.ui.warn("%v", w)
		}
		st, err := stateFromSections(secs, n, j.s.Dims)
		if err == nil && st.Iteration != iter {
			err = fmt.Errorf("state file says iteration %d, its name %d", st.Iteration, iter)
		}
		if err != nil {
			return nil, fmt.Errorf("restoring the optimiser state of %s: %w", j.run.Dir, err)
		}
		restored = &st
	} else if !errors.Is(err, checkpoint.ErrNoState) {
		return nil, err
	}
	var y0 []float64
	if restored != nil {
		y0 = restored.Y
	} else if j.s.Start == "subsample" && j.s.StartRows < n {
		if y0, err = j.subsampleStart(*pp, j.r.Threads); err != nil {
			return nil, err
		}
	} else if y0, err = initialMap(j.table.Matrix, j.s.Dims); err != nil {
		return nil, err
	}
	opt, err := gradient.New(*pp, y0, params)
	if err != nil {
		return nil, err
	}
	*pp = gradient.Affinities{}
	debug.FreeOSMemory() // P as loaded or built is garbage now: reclaim it before it can stack up
	if restored != nil {
		if err := opt.Restore(*restored); err != nil {
			return nil, fmt.Errorf("restoring the optimiser state of %s: %w", j.run.Dir, err)
		}
		j.ui.note("optimiser state restored at iteration %d (KL %.4f)", restored.Iteration, restored.KL)
	}
	// From here a stop waits for the end of an iteration and its checkpoint.
	j.inOpt.Store(true)
	defer j.inOpt.Store(false)
	j.setStatus(checkpoint.StatusRunning, checkpoint.PhaseOptimising)
	t0 := time.Now()
	startIter := opt.Iteration()
	lastSave := time.Now()
	bar := j.ui.phase("optimising", int64(params.Iterations))
	// The bar's KL costs a pass over P with a logarithm per entry: show it
	// less often on large tables.
	klEvery := 10
	if n > 100000 {
		klEvery = 50
	}
	for !opt.Done() {
		if err := opt.Step(); err != nil {
			return nil, err
		}
		it := opt.Iteration()
		bar(int64(it), int64(params.Iterations))
		if !j.r.Quiet && (it%klEvery == 0 || opt.Done()) {
			j.ui.describe(fmt.Sprintf("optimising (KL %.4f)", opt.KL()))
		}
		sig := j.stopping.Load()
		due := it%j.r.CheckpointEvery == 0 || time.Since(lastSave).Minutes() >= j.r.CheckpointMinutes
		if (due || sig != 0) && !opt.Done() {
			if err := j.saveState(opt, time.Since(t0).Seconds(), it-startIter); err != nil {
				return nil, err
			}
			lastSave = time.Now()
		}
		if sig != 0 && !opt.Done() {
			j.ui.done()
			j.setStatus(checkpoint.StatusInterrupted, "")
			code := exitCodeFor(syscall.Signal(sig))
			return nil, &interrupted{code: code, msg: fmt.Sprintf("stopped at iteration %d of %d after writing a checkpoint; continue with: nightjar resume %s", it, params.Iterations, j.run.Dir)}
		}
	}
	j.ui.done()
	j.rep.PhaseMemory["optimiser"] = peakMemory()
	j.rep.Optimiser.Iterations = opt.Iteration()
	j.rep.Optimiser.KL = opt.KL()
	j.rep.Optimiser.Seconds = time.Since(t0).Seconds()
	j.rep.Optimiser.Repulsion = opt.Method().String()
	j.rep.Optimiser.LearningRate = params.EffectiveLearningRate(n)
	j.ui.note("optimised %d iterations in %.1fs, KL %.4f", opt.Iteration()-startIter, j.rep.Optimiser.Seconds, opt.KL())
	return opt.Y(), nil
}

// saveState writes the optimiser state and records progress in the manifest.
func (j *job) saveState(opt *gradient.Optimizer, secs float64, iters int) error {
	st := opt.State()
	if err := j.run.SaveState(st.Iteration, stateSections(st, j.s.Seed)); err != nil {
		return fmt.Errorf("writing a checkpoint: %w", err)
	}
	j.mu.Lock()
	defer j.mu.Unlock()
	m := j.run.Manifest()
	m.Iteration, m.KL, m.Updated = st.Iteration, st.KL, time.Now()
	m.Elapsed = j.elapsed0 + time.Since(j.start).Seconds()
	if iters > 0 {
		m.SecondsPerIteration = secs / float64(iters)
	}
	return j.run.SaveManifest(m)
}

// initialMap returns the first dims principal-component scores of x, scaled so
// the first column has standard deviation 1e-4 (Kobak & Berens 2019).
func initialMap(x ingest.Matrix, dims int) ([]float64, error) {
	if x.D < dims {
		return nil, &usageError{fmt.Sprintf("the table has %d feature columns; a %d-D map needs at least %d", x.D, dims, dims)}
	}
	pca, err := ingest.FitPCA(x, dims)
	if err != nil {
		return nil, fmt.Errorf("initial map: %w", err)
	}
	y := pca.Project(x)
	gradient.InitScale(y, dims, 1e-4)
	return y, nil
}

// finish writes the outputs, each atomically, then marks the run finished.
func (j *job) finish(y []float64) error {
	t := j.table
	t0 := time.Now()
	if err := checkpoint.AtomicWrite(j.run.Path(fileEmbedding), func(w io.Writer) error {
		return ingest.WriteEmbedding(w, t.ID, t.Label, y, j.s.Dims)
	}); err != nil {
		return fmt.Errorf("writing %s: %w", fileEmbedding, err)
	}
	labels := labelStrings(t.Label)
	if err := checkpoint.AtomicWrite(j.run.Path(fileMap), func(w io.Writer) error {
		return figure.DrawMap(w, y, j.s.Dims, labels, figure.MapOptions{})
	}); err != nil {
		return fmt.Errorf("drawing %s: %w", fileMap, err)
	}
	j.rep.Phases["outputs"] = time.Since(t0).Seconds()
	j.rep.PhaseMemory["outputs"] = peakMemory()
	if j.r.ScoreSample > 0 {
		t1 := time.Now()
		j.ui.note("scoring the map on %d sampled rows", min(j.r.ScoreSample, t.N))
		q := scoreMap(t.Matrix, y, j.s.Dims, labels, scoreK, j.r.ScoreSample, j.s.Seed, j.r.Threads)
		q.KL, q.KLMethod = finalKL(j.P, y, j.s, j.rep.Optimiser.KL)
		j.rep.Quality = &q
		j.rep.Phases["scores"] = time.Since(t1).Seconds()
		j.rep.PhaseMemory["scores"] = peakMemory()
	}
	j.rep.SecondsTotal = time.Since(j.start).Seconds()
	j.rep.PeakMemoryBytes = peakMemory()
	if err := writeReport(j.run.Path(fileReport), &j.rep); err != nil {
		return err
	}
	j.mu.Lock()
	m := j.run.Manifest()
	m.Phase, m.Status, m.Iteration, m.KL, m.Updated = checkpoint.PhaseFinished, checkpoint.StatusFinished, j.rep.Optimiser.Iterations, j.rep.Optimiser.KL, time.Now()
	m.Elapsed = j.elapsed0 + time.Since(j.start).Seconds()
	err := j.run.SaveManifest(m)
	j.mu.Unlock()
	if err != nil {
		return err
	}
	fmt.Fprintf(j.stdout, "run:       %s\nembedding: %s\nmap:       %s\nreport:    %s\n",
		j.run.Dir, j.run.Path(fileEmbedding), j.run.Path(fileMap), j.run.Path(fileReport))
	if q := j.rep.Quality; q != nil {
		fmt.Fprintf(j.stdout, "quality:   trustworthiness@%d %.4f, neighbourhood kept@%d %.4f, KL %.4f\n", q.K, q.Trustworthiness, q.K, q.Preservation, q.KL)
	}
	fmt.Fprintln(j.stdout, "caution:  ", caution)
	return nil
}

// readTable reads the run's input as its settings say: all at once, or
// projected onto principal components in two streamed passes (--reduce), in
// which case the PCA is returned too. progress may be nil.
func readTable(s settings, progress func(done, total int64)) (*ingest.Table, *ingest.PCA, error) {
	opt := ingest.Options{Features: s.Features, ID: s.ID, Label: s.Label, SkipInvalid: s.SkipInvalid, Progress: progress}
	if s.Reduce > 0 {
		return ingest.ReadReduced(s.Input, opt, s.Reduce)
	}
	t, err := ingest.Read(s.Input, opt)
	return t, nil, err
}

// toAffinities hands P to the optimiser (same slices, no copy).
func toAffinities(P *knn.CSR) gradient.Affinities {
	return gradient.Affinities{N: P.N, Offsets: P.Offsets, Cols: P.Cols, Vals: P.Vals}
}
