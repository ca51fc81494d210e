package nightjar

import (
	"context"
	"errors"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"unsafe"

	"nightjar/checkpoint"
	"nightjar/knn"
)

// TestEstimateMemoryHandWorked: the table of EstimateMemory's document,
// worked by hand for 1,000 rows × 10 features, NN-descent and the tree, 2-D.
//
// Perplexity 30 (k = 90): features 4·1,000·10 = 40,000 bytes, graph
// 8·1,000·90 = 720,000, NN-descent's work arrays 1,000·(90 + 16·45 + 48)
// = 858,000, affinities (1.6·90·1,000 = 144,000 entries assumed)
// 8·144,000 + 8·1,001 = 1,160,008, their renumbering 4·144,000 + 8·1,001
// = 584,008 (more than the 4·1,000·10 = 40,000 of the features read back
// for the start), the optimiser 1,000·(48·2 + 16) + 1,000·(48 + 128) =
// 288,000; the scores read the features back (40,000) beside the map
// (8·1,000·2 = 16,000). The features are not held after the neighbour
// search.
//
// Uniform affinities over 15 neighbours: graph 8·1,000·15 = 120,000,
// NN-descent's work arrays 1,000·(15 + 16·8 + 48) = 191,000, affinities
// (1.6·15·1,000 = 24,000 entries assumed) 8·24,000 + 8·1,001 = 200,008,
// their renumbering 4·24,000 + 8·1,001 = 104,008; the rest as above.
//
// The same with 100 features: the recall check's centred copy of them and
// their norms, 4·1,000·100 + 4·1,000 = 404,000, outweighs the NN-descent
// arrays in the neighbour phase, and the features read back (400,000)
// outweigh P's renumbering in the optimiser's.
func TestEstimateMemoryHandWorked(t *testing.T) {
	phase := func(sum float64) int64 { return int64(MemorySlack*sum) + MemoryBase }
	tests := []struct {
		name     string
		features int
		uniform  int
		k        int
		entries  int64
		peak     string
		want     map[string]int64
	}{
		{"perplexity 30", 10, 0, 90, 144_000, "optimiser", map[string]int64{
			"neighbours": phase(40_000 + 720_000 + 858_000),
			"affinities": phase(720_000 + 1_160_008),
			"optimiser":  phase(1_160_008 + 584_008 + 288_000),
			"scores":     phase(40_000 + 16_000),
		}},
		{"uniform over 15", 10, 15, 15, 24_000, "optimiser", map[string]int64{
			"neighbours": phase(40_000 + 120_000 + 191_000),
			"affinities": phase(120_000 + 200_008),
			"optimiser":  phase(200_008 + 104_008 + 288_000),
			"scores":     phase(40_000 + 16_000),
		}},
		{"uniform over 15, 100 features", 100, 15, 15, 24_000, "neighbours", map[string]int64{
			"neighbours": phase(400_000 + 120_000 + 404_000),
			"affinities": phase(120_000 + 200_008),
			"optimiser":  phase(200_008 + 400_000 + 288_000),
			"scores":     phase(400_000 + 16_000),
		}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			s := DefaultSettings()
			s.Neighbours, s.Repulsion, s.UniformNeighbours = "descent", "tree", tc.uniform
			e := EstimateMemory(1000, tc.features, s, 0)
			if e.Entries != tc.entries || e.Counted || e.Neighbours != tc.k {
				t.Fatalf("entries %d (counted %v), k %d; want %d assumed, k %d", e.Entries, e.Counted, e.Neighbours, tc.entries, tc.k)
			}
			for _, ph := range e.Phases {
				if ph.Bytes != tc.want[ph.Phase] {
					t.Errorf("%s: %d bytes, want %d", ph.Phase, ph.Bytes, tc.want[ph.Phase])
				}
			}
			if e.PeakPhase != tc.peak || e.Peak != tc.want[tc.peak] {
				t.Errorf("peak %d in %q, want %d in %q", e.Peak, e.PeakPhase, tc.want[tc.peak], tc.peak)
			}
		})
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

// TestSavedArraysReadOnce: the neighbour graph and P read back from a run
// directory's files (as a resumed run reads them) are the same values as
// saved, held in the buffers the file was read into rather than in copies,
// so a 10^7-row P (10.6 GB) is held once, not twice. On a big-endian host
// the values are copies by necessity and only the values are checked.
func TestSavedArraysReadOnce(t *testing.T) {
	dir := t.TempDir()
	g := &Graph{N: 3, K: 2, Index: []int32{1, 2, 0, 2, 0, 1}, Dist2: []float32{1, 4, 1, 2, 4, 2}}
	p := &CSR{N: 3, Offsets: []int64{0, 2, 4, 6}, Cols: []int32{1, 2, 0, 2, 0, 1}, Vals: []float32{0.25, 0.125, 0.25, 0.125, 0.125, 0.125}}
	shared := func(name string, v unsafe.Pointer, secs []checkpoint.Section) {
		t.Helper()
		b, err := checkpoint.Lookup(secs, name)
		if err != nil {
			t.Fatal(err)
		}
		if little := *(*byte)(unsafe.Pointer(&[]uint16{1}[0])) == 1; little && v != unsafe.Pointer(&b[0]) {
			t.Errorf("section %q: the values are a copy of the bytes read", name)
		}
	}
	gpath, ppath := filepath.Join(dir, "g.njs"), filepath.Join(dir, "p.njs")
	if err := checkpoint.WriteFile(gpath, "graph", graphSections(g, []byte("{}"))); err != nil {
		t.Fatal(err)
	}
	if err := checkpoint.WriteFile(ppath, "affinity", csrSections(p, []byte("{}"))); err != nil {
		t.Fatal(err)
	}
	secs, err := checkpoint.ReadFile(gpath, "graph")
	if err != nil {
		t.Fatal(err)
	}
	g2, err := graphFromSections(secs, 3, 2)
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(g2.Index, g.Index) || !slices.Equal(g2.Dist2, g.Dist2) {
		t.Errorf("graph read back %+v, saved %+v", g2, g)
	}
	shared("index", unsafe.Pointer(&g2.Index[0]), secs)
	shared("dist2", unsafe.Pointer(&g2.Dist2[0]), secs)
	if secs, err = checkpoint.ReadFile(ppath, "affinity"); err != nil {
		t.Fatal(err)
	}
	p2, err := csrFromSections(secs, 3)
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(p2.Offsets, p.Offsets) || !slices.Equal(p2.Cols, p.Cols) || !slices.Equal(p2.Vals, p.Vals) {
		t.Errorf("P read back %+v, saved %+v", p2, p)
	}
	shared("offsets", unsafe.Pointer(&p2.Offsets[0]), secs)
	shared("cols", unsafe.Pointer(&p2.Cols[0]), secs)
	shared("vals", unsafe.Pointer(&p2.Vals[0]), secs)
}
