package nightjar

import (
	"fmt"
	"math"
	"os"
	"runtime/debug"
	"testing"

	"nightjar/checkpoint"
	"nightjar/gradient"
	"nightjar/internal/core"
)

// BenchmarkSavedRun times optimiser steps on the P and the newest state of a
// real run directory (a finished or interrupted run with a saved P), for the
// tree and grid repulsions and for grid settings (the defaults, and the
// spacing and minimum size before and after 2026-12-03) in one process, so
// their ratios are measured on a real map of real size. Set NIGHTJAR_BENCH_RUN to the run directory, e.g.
//
//	nightjar demo --rows 1000000 --run /tmp/demo1M
//	NIGHTJAR_BENCH_RUN=/tmp/demo1M go test . -run XXX -bench SavedRun -benchtime 5x -count 3
//
// Each case reads P from the run directory and hands it to NewConsume, so
// the benchmark holds what a resumed run holds (at 10^7 rows about 17 GiB;
// select one case with -bench 'SavedRun/N=.*/grid/p=5/spacing=0.4').
//
// Without it there is nothing to time and the benchmark says so.
func BenchmarkSavedRun(b *testing.B) {
	dir := os.Getenv("NIGHTJAR_BENCH_RUN")
	if dir == "" {
		b.Skip("set NIGHTJAR_BENCH_RUN to a run directory with a saved P and state")
	}
	run, err := checkpoint.Open(dir)
	if err != nil {
		b.Fatal(err)
	}
	// P is read again for every case and handed to NewConsume, so that one
	// P and its renumbering (1.5 × P) are held at a time, as in a run: at
	// 10^7 rows P alone is 10 GB.
	loadP := func(b *testing.B) core.CSR {
		debug.FreeOSMemory() // the previous case's P
		secs, err := run.LoadArtifact(fileP, "affinity")
		if err != nil {
			b.Fatal(err)
		}
		shape, err := checkpoint.SectionValues[int64](secs, "shape")
		if err != nil {
			b.Fatal(err)
		}
		P, err := csrFromSections(secs, int(shape[0]))
		if err != nil {
			b.Fatal(err)
		}
		return *P
	}
	_, ss, _, err := run.LoadState()
	if err != nil {
		b.Fatal(err)
	}
	y, err := checkpoint.Lookup(ss, "y")
	if err != nil {
		b.Fatal(err)
	}
	n := len(y) / 16 // a 2-D map of float64
	st, err := stateFromSections(ss, n, 2)
	if err != nil {
		b.Fatal(err)
	}
	lo := [2]float64{math.Inf(1), math.Inf(1)}
	hi := [2]float64{math.Inf(-1), math.Inf(-1)}
	for i := 0; i < n; i++ {
		for c := range 2 {
			lo[c], hi[c] = min(lo[c], st.Y[2*i+c]), max(hi[c], st.Y[2*i+c])
		}
	}
	b.Logf("%d rows, map width %.1f × %.1f", n, hi[0]-lo[0], hi[1]-lo[1])
	cases := []struct {
		method         gradient.Method
		order, gridMin int
		spacing        float64
	}{
		{gradient.Tree, 0, 0, 0},
		{gradient.Grid, 0, 0, 0},
		{gradient.Grid, 5, 160, 0.25},
		{gradient.Grid, 5, 64, 0.4},
	}
	for _, c := range cases {
		name := fmt.Sprintf("N=%d/%v", n, c.method)
		if c.order > 0 {
			name += fmt.Sprintf("/p=%d/spacing=%v/min=%d", c.order, c.spacing, c.gridMin)
		}
		b.Run(name, func(b *testing.B) {
			params := gradient.DefaultParams(n)
			params.Iterations, params.EarlyIterations, params.Method = 1<<30, 0, c.method
			params.GridOrder, params.GridMin, params.GridSpacing = c.order, c.gridMin, c.spacing
			params.Threads = 2
			P := loadP(b)
			if P.N != n {
				b.Fatalf("P has %d rows, the state %d", P.N, n)
			}
			o, err := gradient.NewConsume(P, st.Y, params)
			if err != nil {
				b.Fatal(err)
			}
			if err := o.Step(); err != nil { // the first step sizes the buffers
				b.Fatal(err)
			}
			b.ResetTimer()
			for range b.N {
				if err := o.Step(); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}
