package nightjar

import (
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"runtime"
	"strings"
	"sync/atomic"
	"time"

	"nightjar/checkpoint"
	"nightjar/ingest"
	"nightjar/knn"
)

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
	fp, err := inputFingerprint(j.s)
	if err != nil {
		var ie *ingest.InputError
		if errors.As(err, &ie) {
			return err
		}
		return &ingest.InputError{File: j.s.inputName(), Reason: errorText(err), Err: err}
	}
	bar := phaseBar(j.obs, "reading rows", -1)
	if j.rt.ReturnMemory {
		bar = collectWhileReading(bar)
	}
	var t *ingest.Table
	var pca *ingest.PCA
	err = j.await(func() (err error) {
		t, pca, err = readTable(j.s, j.rt.Threads, bar)
		return err
	})
	j.obs.Done()
	if err != nil {
		return err
	}
	if pca != nil {
		j.recordReduction(pca, time.Since(t0).Seconds())
	}
	fp.ValuesHash = t.Hash
	// A run killed after its manifest was first written but before the
	// input was read has no input recorded, and nothing computed from it:
	// there is nothing to compare.
	if rec := j.run.Manifest().Input; resumed && rec.Path != "" {
		if same, why := rec.Same(fp); !same {
			if !j.rt.Force {
				return &RunDirError{Dir: j.run.Dir, Msg: fmt.Sprintf("input %s changed since the run began (%s); resume with --force to use it anyway", j.s.Input, why)}
			}
			j.obs.Warn(fmt.Sprintf("input changed since the run began (%s); continuing because of --force", why))
		}
	}
	j.mu.Lock()
	j.run.Manifest().Input = fp
	j.mu.Unlock()
	j.table = t
	if t.D < j.s.Dims {
		return &ingest.InputError{File: j.s.Input, Reason: fmt.Sprintf("the table has %d feature column(s) (%s); a %d-D map needs at least %d", t.D, strings.Join(t.Features, ", "), j.s.Dims, j.s.Dims)}
	}
	if err := checkTable(j.s, t); err != nil {
		return err
	}
	ds, err := openInput(j.s)
	if err != nil {
		return err
	}
	if err := j.describeInput(ds, t); err != nil {
		return err
	}
	if len(j.s.Features) == 0 {
		for _, name := range idLikeColumns(t.Features) {
			j.obs.Warn(fmt.Sprintf("feature column %q looks like a row identifier, and its values would weigh on every distance; if it is one, pass --id %s or choose the features with --features", name, name))
		}
	}
	if t.Skipped > 0 {
		j.obs.Note(fmt.Sprintf("skipped %d rows with NaN, Inf or empty features (--skip-invalid)", t.Skipped))
	}
	if err := j.saveFeatures(t, pca); err != nil {
		return err
	}
	j.obs.Note(fmt.Sprintf("read %d rows × %d features from %s (%s) in %.1fs", t.N, t.D, j.s.Input, t.Format, time.Since(t0).Seconds()))
	j.rep.Rows, j.rep.Features, j.rep.Skipped, j.rep.Format = t.N, t.D, t.Skipped, t.Format
	j.rep.Phases["read"] = time.Since(t0).Seconds()
	j.rep.PhaseMemory["read"] = peakMemory()
	return nil
}

// checkTable refuses, before any work is done on it, a table too small for
// the affinities (the perplexity's or the uniform neighbours') or, under the
// cosine metric, with an all-zero row.
func checkTable(s Settings, t *ingest.Table) error {
	if err := s.checkRows(t.N); err != nil {
		return fmt.Errorf("%s: %w", s.Input, err)
	}
	if m, _ := knn.ParseMetric(s.Metric); m == knn.Cosine {
		for i := range t.N {
			zero := true
			for _, v := range t.Row(i) {
				if v != 0 {
					zero = false
					break
				}
			}
			if zero {
				return fmt.Errorf("%s: %w (cosine distance needs a non-zero row)", s.Input, &knn.ZeroRowError{Row: i})
			}
		}
	}
	return nil
}

// collectWhileReading wraps a read's progress callback so that the garbage
// collector runs after every second chunk (about 32 MiB of decoded values:
// chunks hold about 4 million float32 values). The table's matrix holds no
// pointers and is live from the start, so the collector would otherwise let
// the decoded batches grow to about the size of the matrix before it
// collects: the read's peak stays near one copy of the matrix this way.
func collectWhileReading(progress func(done, total int64)) func(done, total int64) {
	var calls atomic.Int64
	return func(done, total int64) {
		progress(done, total)
		if calls.Add(1)%2 == 0 {
			runtime.GC()
		}
	}
}

// readTable reads the run's input (every part of it) as its settings say:
// all at once, or projected onto principal components in streamed passes
// (Reduce; see Settings.reduction), in which case the PCA is returned too.
// progress may be nil.
func readTable(s Settings, threads int, progress func(done, total int64)) (*ingest.Table, *ingest.PCA, error) {
	ds, err := openInput(s)
	if err != nil {
		return nil, nil, err
	}
	opt := ingest.Options{Features: s.Features, ID: s.ID, Label: s.Label, SkipInvalid: s.SkipInvalid, Progress: progress, Threads: threads}
	return ds.Read(opt, s.reduction())
}

// affinities loads P from the run directory, or computes it from the
// neighbour graph (itself loaded, or computed and saved) and saves it.
func (j *job) affinities() (CSR, error) {
	n := j.table.N
	k := j.s.neighbourCount(n)
	if err := j.s.checkRows(n); err != nil {
		return CSR{}, fmt.Errorf("%s: %w", j.s.Input, err)
	}
	if p, ok := j.loadP(); ok {
		j.releaseFeatures()
		j.obs.Note("affinities loaded from " + j.run.Path(fileP))
		return *p, nil
	}
	g := j.loadGraph(k)
	if g != nil {
		j.obs.Note("neighbour graph loaded from " + j.run.Path(fileGraph))
	} else {
		var err error
		if g, err = j.neighbours(k); err != nil {
			return CSR{}, err
		}
		// The neighbour search's work arrays (about 1 GB at 1,000,000 rows;
		// handed back once already before the recall check, see neighbours)
		// and the check's copy of the features are garbage now: without
		// handing them back, P's arrays stack up on pages the process still
		// holds (3.28 GB peak at 1,000,000 rows).
		j.freeMemory()
	}
	// The features are not needed again until the optimiser's start: they
	// leave memory while P is built (features.go).
	j.releaseFeatures()
	j.setStatus(checkpoint.StatusRunning, checkpoint.PhaseAffinities)
	t0 := time.Now()
	// The graph is saved (or was loaded), so its memory can hold the
	// conditional probabilities.
	var P *CSR
	err := j.await(func() (err error) {
		P, err = j.s.consumeAffinity(g, j.rt.Threads)
		return err
	})
	j.freeMemory()
	if err != nil {
		return CSR{}, err
	}
	j.rep.Affinities.Seconds = time.Since(t0).Seconds()
	j.rep.Affinities.Entries = int64(len(P.Vals))
	if err := j.run.SaveArtifact(fileP, "affinity", csrSections(P, j.phaseReport())); err != nil {
		return CSR{}, err
	}
	j.rep.PhaseMemory["affinities"] = peakMemory()
	j.obs.Note(fmt.Sprintf("affinities: %s, %d entries, %.1fs", j.s.AffinityNote(), len(P.Vals), j.rep.Affinities.Seconds))
	return *P, nil
}

// neighbours computes the k-nearest-neighbour graph, measures the recall of
// an approximate one, and saves it.
func (j *job) neighbours(k int) (*Graph, error) {
	n := j.table.N
	j.setStatus(checkpoint.StatusRunning, checkpoint.PhaseNeighbours)
	metric, _ := knn.ParseMetric(j.s.Metric)
	method, err := j.s.neighbourMethod(n)
	if err != nil {
		return nil, err
	}
	t0 := time.Now()
	var g *Graph
	var st knn.Stats
	err = j.await(func() (err error) {
		g, st, err = j.searchGraph(method, k, metric)
		return err
	})
	j.obs.Done()
	if err != nil {
		var zero *knn.ZeroRowError
		if errors.As(err, &zero) {
			return nil, fmt.Errorf("%s: %w (cosine distance needs a non-zero row)", j.s.Input, err)
		}
		return nil, err
	}
	j.recordSearch(method, st)
	j.rep.Neighbours.Method, j.rep.Neighbours.K = method.String(), k
	j.rep.Neighbours.Seconds = time.Since(t0).Seconds()
	if method != knn.ByExact && j.s.CheckRecall > 0 {
		// The search's work arrays are garbage now; without handing them
		// back, the check's copy of the features (4·N·D bytes) stacked on
		// them: 10,000,000 demo rows with uniform affinities over 15
		// neighbours peaked at 8.25 GiB here, against 5.4 GiB in the search.
		j.freeMemory()
		t1 := time.Now()
		var rec float64
		var rows int
		err := j.await(func() (err error) {
			rec, rows, err = knn.Recall(g, j.table.Matrix, j.s.CheckRecall, j.s.Seed+1, knn.Options{Threads: j.rt.Threads, Metric: metric})
			return err
		})
		if err != nil {
			return nil, err
		}
		j.rep.Neighbours.Recall, j.rep.Neighbours.RecallSample = &rec, rows
		j.rep.Phases["recall_check"] = time.Since(t1).Seconds()
		j.obs.Note(fmt.Sprintf("neighbour recall@%d = %.4f on %d sampled rows (%.1fs)", k, rec, rows, time.Since(t1).Seconds()))
	}
	j.obs.Note(fmt.Sprintf("neighbours: %s, k = %d, %.1fs", method, k, j.rep.Neighbours.Seconds))
	j.rep.PhaseMemory["neighbours"] = peakMemory()
	if err := j.run.SaveArtifact(fileGraph, "graph", graphSections(g, j.phaseReport())); err != nil {
		return nil, err
	}
	return g, nil
}

// searchGraph runs the neighbour search with one progress bar per phase of
// it. An approximate search may reorder the table's rows in place and put
// them back (nothing else reads the table meanwhile; a copy would cost 200
// MB at 1,000,000 × 50).
func (j *job) searchGraph(method knn.Method, k int, metric knn.Metric) (*Graph, knn.Stats, error) {
	if method != knn.ByExact {
		defer j.lowGC()()
	}
	var current string
	var bar func(done, total int64)
	opt := knn.BuildOptions{
		Options:    knn.Options{Threads: j.rt.Threads, Metric: metric},
		Seed:       j.s.Seed,
		RecallGoal: j.s.RecallGoal,
		InPlace:    true,
		Progress: func(phase string, done, total int64) {
			if phase != current {
				current = phase
				bar = phaseBar(j.obs, "neighbours: "+phase, total)
			}
			bar(done, total)
		},
	}
	g, st, err := knn.Build(j.table.Matrix, k, method, opt)
	if err != nil && method != knn.ByExact {
		err = fmt.Errorf("approximate neighbours: %w", err)
	}
	return g, st, err
}

// recordSearch puts an approximate search's phase times and recall
// estimates into the report.
func (j *job) recordSearch(method knn.Method, st knn.Stats) {
	switch method {
	case knn.ByExact:
		return
	case knn.ByHNSW:
		j.rep.Phases["neighbours_build"] = st.BuildSeconds
		j.rep.Phases["neighbours_query"] = st.QuerySeconds
	default:
		j.rep.Phases["neighbours_trees"] = st.TreeSeconds
		j.rep.Neighbours.Trees = st.Trees
	}
	j.rep.Phases["neighbours_probe"] = st.ProbeSeconds
	for i, s := range st.PassSeconds {
		j.rep.Phases[fmt.Sprintf("neighbours_refine_%d", i+1)] = s
	}
	passes := st.Passes
	j.rep.Neighbours.Passes, j.rep.Neighbours.PassRecall = &passes, st.PassRecall
	if len(st.PassRecall) > 0 {
		est := make([]string, len(st.PassRecall))
		for i, r := range st.PassRecall {
			est[i] = fmt.Sprintf("%.4f", r)
		}
		passes := fmt.Sprintf("%d refinement passes", st.Passes)
		if st.Passes == 1 {
			passes = "1 refinement pass"
		}
		start := ""
		if st.Trees > 0 {
			start = fmt.Sprintf("a start of %d random projection trees, ", st.Trees)
		}
		j.obs.Note(fmt.Sprintf("neighbours: %s%s; estimated recall at the start and after each: %s (goal %g)",
			start, passes, strings.Join(est, ", "), j.s.RecallGoal))
	}
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
func (j *job) loadGraph(k int) *Graph {
	secs, err := j.run.LoadArtifact(fileGraph, "graph")
	if errors.Is(err, fs.ErrNotExist) {
		return nil
	}
	if err == nil {
		var g *Graph
		if g, err = graphFromSections(secs, j.table.N, k); err == nil {
			j.restorePhaseReport(secs)
			return g
		}
	}
	j.obs.Warn(fmt.Sprintf("%v; recomputing the neighbour graph", err))
	return nil
}

// loadP reads P saved by an earlier invocation; false when absent or unusable.
func (j *job) loadP() (*CSR, bool) {
	secs, err := j.run.LoadArtifact(fileP, "affinity")
	if errors.Is(err, fs.ErrNotExist) {
		return nil, false
	}
	if err == nil {
		var P *CSR
		if P, err = csrFromSections(secs, j.table.N); err == nil {
			j.restorePhaseReport(secs)
			return P, true
		}
	}
	j.obs.Warn(fmt.Sprintf("%v; recomputing the affinities", err))
	return nil, false
}
