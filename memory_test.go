package nightjar

import (
	"context"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"unsafe"

	"nightjar/knn"
)

// TestEstimateMemoryHandWorked: the table of EstimateMemory's document,
// worked by hand for 1,000 rows × 10 features, perplexity 30 (k = 90),
// NN-descent and the tree, 2-D: features 4·1,000·10 = 40,000 bytes, graph
// 8·1,000·90 = 720,000, NN-descent's work arrays 1,000·(90 + 16·45 + 48)
// = 858,000, affinities (1.6·90·1,000 = 144,000 entries assumed)
// 8·144,000 + 8·1,001 = 1,160,008, their renumbering 4·144,000 + 8·1,001
// = 584,008 (more than the 8·1,000·10 = 80,000 of the features read back
// for the start), the optimiser 1,000·(48·2 + 16) + 1,000·(48 + 128) =
// 288,000; the scores read the features back (80,000) beside the map
// (8·1,000·2 = 16,000). The features are not held after the neighbour
// search.
func TestEstimateMemoryHandWorked(t *testing.T) {
	s := DefaultSettings()
	s.Neighbours, s.Repulsion = "descent", "tree"
	e := EstimateMemory(1000, 10, s, 0)
	phase := func(sum float64) int64 { return int64(MemorySlack*sum) + MemoryBase }
	want := map[string]int64{
		"neighbours": phase(40_000 + 720_000 + 858_000),
		"affinities": phase(720_000 + 1_160_008),
		"optimiser":  phase(1_160_008 + 584_008 + 288_000),
		"scores":     phase(80_000 + 16_000),
	}
	if e.Entries != 144_000 || e.Counted || e.Neighbours != 90 {
		t.Fatalf("entries %d (counted %v), k %d; want 144000 assumed, k 90", e.Entries, e.Counted, e.Neighbours)
	}
	for _, ph := range e.Phases {
		if ph.Bytes != want[ph.Phase] {
			t.Errorf("%s: %d bytes, want %d", ph.Phase, ph.Bytes, want[ph.Phase])
		}
	}
	if e.PeakPhase != "optimiser" || e.Peak != want["optimiser"] {
		t.Errorf("peak %d in %q, want %d in the optimiser", e.Peak, e.PeakPhase, want["optimiser"])
	}
}

// TestEstimateMemoryParts: the parts the estimate counts for the features,
// the neighbour graph and the affinities are the sizes of the arrays a run
// really holds (an exact graph and its affinities on 1,500 rows).
func TestEstimateMemoryParts(t *testing.T) {
	x, _ := blobs(1500, 6, 9)
	s := DefaultSettings()
	s.Perplexity = 15
	k := knn.Neighbours(s.Perplexity, x.N)
	g, _, err := knn.Build(x, k, knn.ByExact, knn.BuildOptions{Options: knn.Options{Threads: 2}})
	if err != nil {
		t.Fatal(err)
	}
	size := func(n int, elem uintptr) int64 { return int64(n) * int64(elem) }
	graph := size(len(g.Index), unsafe.Sizeof(g.Index[0])) + size(len(g.Dist2), unsafe.Sizeof(g.Dist2[0]))
	p, err := knn.Affinity(g, s.Perplexity, 2)
	if err != nil {
		t.Fatal(err)
	}
	aff := size(len(p.Cols), unsafe.Sizeof(p.Cols[0])) + size(len(p.Vals), unsafe.Sizeof(p.Vals[0])) + size(len(p.Offsets), unsafe.Sizeof(p.Offsets[0]))
	want := map[string]int64{"features": size(len(x.Data), unsafe.Sizeof(x.Data[0])), "neighbour graph": graph, "affinities": aff}
	e := EstimateMemory(x.N, x.D, s, int64(len(p.Vals)))
	seen := 0
	for _, ph := range e.Phases {
		for _, part := range ph.Parts {
			if w, ok := want[part.Name]; ok {
				seen++
				if part.Bytes != w {
					t.Errorf("%s phase, %s: %d bytes, the real arrays %d", ph.Phase, part.Name, part.Bytes, w)
				}
			}
		}
	}
	if seen < 5 {
		t.Fatalf("only %d of the parts checked", seen)
	}
}

// TestMemoryCeiling: a ceiling below the estimate refuses the run before
// the neighbour search (a user fault naming the option, no graph written);
// without one the run records its estimate, made again with the counted
// affinity entries.
func TestMemoryCeiling(t *testing.T) {
	x, lab := blobs(400, 5, 3)
	s, rt := DefaultSettings(), DefaultRuntime()
	s.Iterations, s.EarlyIterations = 60, 20
	rt.ScoreSample = 0
	dir := filepath.Join(t.TempDir(), "run")
	rt.MemoryCeiling = 0.05 // 51 MiB: below MemoryBase alone
	_, err := Embed(context.Background(), FromMatrix(x, nil, lab), dir, s, rt, nil)
	var me *MemoryError
	if !errors.As(err, &me) || !IsUserFault(err) || !strings.Contains(err.Error(), "--ram-ceiling") {
		t.Fatalf("err = %v, want a *MemoryError naming --ram-ceiling", err)
	}
	if _, err := os.Stat(filepath.Join(dir, fileGraph)); err == nil {
		t.Fatal("the neighbour graph was written although the run was refused")
	}
	rt.MemoryCeiling = 0
	res, err := Embed(context.Background(), FromMatrix(x, nil, lab), filepath.Join(t.TempDir(), "run"), s, rt, nil)
	if err != nil {
		t.Fatal(err)
	}
	m := res.Report.MemoryEstimate
	if m == nil || m.PeakBytes <= MemoryBase || !m.EntriesCounted || m.Entries != res.Report.Affinities.Entries {
		t.Fatalf("report's estimate %+v, affinity entries %d", m, res.Report.Affinities.Entries)
	}
}
