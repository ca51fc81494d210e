package nightjar

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"slices"
	"time"

	"nightjar/checkpoint"
	"nightjar/ingest"
	"nightjar/knn"
)

// reference is a finished run opened for placement. It is only read: a
// placement never writes into the reference's directory nor takes its
// writer lock (only PrepareIndex does, to save the index).
type reference struct {
	dir   string
	run   *checkpoint.Run
	s     Settings
	feat  *refFeatures
	y     []float64 // the map, N×dims, rows in the order of feat.X
	label *Column   // the reference's labels, nil without
	ids   *Column   // the reference's ids, nil without an id column
	// classes are the distinct labels, sorted; class[i] is row i's.
	classes []string
	class   []int32
}

// openReference opens the run directory dir read-only and checks that its
// run is finished.
func openReference(dir string) (*checkpoint.Run, Settings, error) {
	run, err := checkpoint.Open(dir)
	if err != nil {
		return nil, Settings{}, &RunDirError{Dir: dir, Msg: "not a usable reference: " + errorText(err)}
	}
	m := run.Manifest()
	if m.Status != checkpoint.StatusFinished {
		return nil, Settings{}, &RunDirError{Dir: dir, Msg: fmt.Sprintf("the reference run is not finished (status %s, phase %s): finish it with 'nightjar resume %s' before placing rows into its map", m.Status, m.Phase, dir)}
	}
	s, err := settingsOf(run)
	if err != nil {
		return nil, s, err
	}
	return run, s, nil
}

// loadReference reads what a placement needs from the finished run in dir:
// its settings, features, map and labels.
func loadReference(dir string, threads int, obs Observer) (*reference, error) {
	ref, err := loadReferenceMap(dir, threads)
	if err != nil {
		return nil, err
	}
	if ref.feat, err = loadFeatures(ref.run); errors.Is(err, fs.ErrNotExist) {
		ref.feat, err = featuresFromInput(ref.run, ref.s, threads, obs)
	}
	if err != nil {
		return nil, &RunDirError{Dir: dir, Msg: "cannot read the reference's features: " + errorText(err)}
	}
	if n := len(ref.y) / ref.s.Dims; n != ref.feat.X.N {
		return nil, &RunDirError{Dir: dir, Msg: fmt.Sprintf("%s has %d rows, the saved features %d", FileEmbedding, n, ref.feat.X.N)}
	}
	return ref, nil
}

// loadReferenceMap reads the finished run's settings, map and labels.
func loadReferenceMap(dir string, threads int) (*reference, error) {
	run, s, err := openReference(dir)
	if err != nil {
		return nil, err
	}
	ref := &reference{dir: dir, run: run, s: s}
	emb, err := ingest.Read(run.Path(FileEmbedding), ingest.Options{Features: []string{"map_1", "map_2", "map_3"}[:s.Dims], ID: s.ID, Label: s.Label, Threads: threads})
	if err != nil {
		return nil, &RunDirError{Dir: dir, Msg: "cannot read the reference's map: " + errorText(err)}
	}
	ref.y = make([]float64, len(emb.Data))
	for i, v := range emb.Data {
		ref.y[i] = float64(v)
	}
	ref.label, ref.ids = emb.Label, emb.ID
	if emb.Label != nil {
		ref.classes, ref.class = classesOf(emb.Label)
	}
	return ref, nil
}

// featuresFromInput rebuilds the features of a run made before runs saved
// them, from its input, which must still hold the values the run read.
func featuresFromInput(run *checkpoint.Run, s Settings, threads int, obs Observer) (*refFeatures, error) {
	obs.Note(fmt.Sprintf("%s has no saved features (made by an older nightjar): reading them from its input %s", run.Dir, s.Input))
	t, pca, err := readTable(s, threads, nil)
	if err != nil {
		return nil, err
	}
	if want := run.Manifest().Input.ValuesHash; want != "" && want != t.Hash {
		return nil, fmt.Errorf("the input %s no longer holds the values the map was made from", s.Input)
	}
	f := &refFeatures{X: t.Matrix, Names: t.Features, Hash: t.Hash, PCA: pca}
	if pca != nil && len(t.SourceFeatures) == pca.D {
		f.SourceNames = t.SourceFeatures
	}
	return f, nil
}

// classesOf returns the sorted distinct values of a label column and each
// row's index among them.
func classesOf(c *Column) ([]string, []int32) {
	n := c.Len()
	seen := map[string]bool{}
	for i := range n {
		seen[c.String(i)] = true
	}
	classes := make([]string, 0, len(seen))
	for l := range seen {
		classes = append(classes, l)
	}
	slices.Sort(classes)
	at := make(map[string]int32, len(classes))
	for i, l := range classes {
		at[l] = int32(i)
	}
	class := make([]int32, n)
	for i := range n {
		class[i] = at[c.String(i)]
	}
	return classes, class
}

// metric returns the reference run's metric.
func (ref *reference) metric() knn.Metric {
	m, _ := knn.ParseMetric(ref.s.Metric)
	return m
}

// k returns the number of reference neighbours of a new row:
// min(N − 1, ⌊3·perplexity⌋) with the reference's perplexity, or its uniform
// neighbours' count.
func (ref *reference) k() int { return ref.s.neighbourCount(ref.feat.X.N) }

// placeRecallWarn is the measured recall of new rows' neighbours below
// which a placement warns: 0.95, the recall asked of the index for rows
// like the reference's own (common practice for approximate neighbours).
const placeRecallWarn = 0.95

// autoExactReference is the largest reference whose neighbours "auto"
// finds by the exact search. Measured on 2 cores with k = 90 on the demo
// survey (50 features): the exact search took 0.84 ms per new row against a
// 100,000-row reference, the index 0.16–0.26 ms at recall@90 ≥ 0.997
// (BenchmarkPlaceNeighbours); the exact search's cost grows with the
// reference, the index's barely, so they cross near 20,000 rows.
const autoExactReference = 20000

// Default parameters of the neighbour index, measured with
// BenchmarkPlaceNeighbours (see bench/RESULTS.md, "Placing new rows").
var defaultIndex = indexParams{Trees: 2, Leaf: 32, Fan: 30, Ef: 90, Slack: 0.05, Seed: 1}

// loadIndex reads the neighbour index saved in the reference directory.
func (ref *reference) loadIndex() (*refIndex, error) {
	secs, err := ref.run.LoadArtifact(fileIndex, kindIndex)
	if err != nil {
		return nil, err
	}
	ix, err := indexFromSections(secs, ref.feat.X.N, ref.feat.X.D)
	if err != nil {
		return nil, &checkpoint.CorruptError{File: ref.run.Path(fileIndex + checkpoint.Extension), Reason: err.Error()}
	}
	return ix, nil
}

// buildIndex builds the neighbour index from the reference's saved
// neighbour graph (or, when the run kept none, a graph found again).
func (ref *reference) buildIndex(rows *refRows, threads int, obs Observer) (*refIndex, error) {
	k := ref.k()
	var g *Graph
	secs, err := ref.run.LoadArtifact(fileGraph, "graph")
	if err == nil {
		g, err = graphFromSections(secs, ref.feat.X.N, k)
	}
	if err != nil {
		obs.Note(fmt.Sprintf("the reference's neighbour graph is not usable (%v): finding it again", errorText(err)))
		if g, _, err = knn.Build(rows.x, k, knn.ByDescent, knn.BuildOptions{Options: knn.Options{Threads: threads}, Seed: ref.s.Seed}); err != nil {
			return nil, err
		}
	}
	p := defaultIndex
	p.Fan = min(p.Fan, g.K)
	return buildIndex(rows, g.Index, g.K, p, threads), nil
}

// IndexInfo describes the neighbour index PrepareIndex saved.
type IndexInfo struct {
	Path    string
	Rows    int
	Trees   int
	Fan     int
	Seconds float64
}

// PrepareIndex builds the neighbour index of the finished run in dir, which
// placements into a reference of more than 20,000 rows use, and saves it
// there (placement-index.njs): a forest of random projection trees and the
// run's own neighbour graph. Sharded placements need it saved before any
// shard starts; they only read it. PrepareIndex takes the run directory's
// writer lock while it writes.
func PrepareIndex(ctx context.Context, dir string, rt Runtime, obs Observer) (*IndexInfo, error) {
	obs = observerOrQuiet(obs)
	t0 := time.Now()
	lock, err := checkpoint.AcquireLock(dir)
	if err != nil {
		return nil, err
	}
	defer lock.Release()
	ref, err := loadReference(dir, rt.Threads, obs)
	if err != nil {
		return nil, err
	}
	rows, err := newRefRows(ref.feat.X, ref.metric(), false)
	if err != nil {
		return nil, err
	}
	if err := ctx.Err(); err != nil {
		return nil, &StoppedError{Dir: dir, Phase: "prepare", Err: context.Cause(ctx)}
	}
	obs.Phase("building the neighbour index", -1)
	ix, err := ref.buildIndex(rows, rt.Threads, obs)
	obs.Done()
	if err != nil {
		return nil, err
	}
	secs, err := indexSections(ix, ref.feat.X.N, ref.feat.X.D)
	if err != nil {
		return nil, err
	}
	if err := ref.run.SaveArtifact(fileIndex, kindIndex, secs); err != nil {
		return nil, err
	}
	info := &IndexInfo{Path: ref.run.Path(fileIndex + checkpoint.Extension), Rows: ref.feat.X.N, Trees: ix.p.Trees, Fan: ix.p.Fan, Seconds: time.Since(t0).Seconds()}
	obs.Note(fmt.Sprintf("neighbour index of %d rows saved to %s in %.1fs", info.Rows, info.Path, info.Seconds))
	return info, nil
}
