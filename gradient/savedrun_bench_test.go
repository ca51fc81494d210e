package gradient

import (
	"math"
	"os"
	"testing"
	"time"

	"nightjar/bench"
	"nightjar/checkpoint"
	"nightjar/internal/core"
)

// BenchmarkSavedAttraction times the attractive pass on the P and newest
// state of a real run directory, with the kernel's prefetching off, of
// positions alone (attractAhead), and of positions and P's columns and
// values at several distances (attractStream), one pass of each in turn so
// that a shared machine's drift falls on all alike. It reports each
// setting's median seconds per pass and its ratio to no prefetching. Set
// NIGHTJAR_BENCH_RUN to a run directory with a saved P (a finished or
// interrupted run), e.g.
//
//	nightjar demo --rows 1000000 --run /tmp/demo1M
//	NIGHTJAR_BENCH_RUN=/tmp/demo1M go test ./gradient -run XXX -bench SavedAttraction -benchtime 15x
//
// P and the map are handed to NewConsume, which renumbers them as a run
// does: at 10^7 rows the benchmark holds about 16 GiB while it does so, and
// P (10.6 GB) after. Without the variable there is nothing to time and the
// benchmark says so.
func BenchmarkSavedAttraction(b *testing.B) {
	o := savedOptimizer(b)
	b.Logf("%d rows, %d entries", o.n, len(o.eng.p.Cols))

	defer func(a, s int) { attractAhead, attractStream = a, s }(attractAhead, attractStream)
	settings := []struct {
		name          string
		ahead, stream int
	}{
		{"off", 0, 0},
		{"a32", 32, 0},
		{"a32s128", 32, 128},
		{"a32s256", 32, 256},
		{"a32s384", 32, 384},
	}
	times := make([][]float64, len(settings))
	b.ResetTimer()
	for range b.N {
		for a, c := range settings {
			attractAhead, attractStream = c.ahead, c.stream
			t0 := time.Now()
			o.eng.attraction(o.y, 1, 0, o.g)
			times[a] = append(times[a], time.Since(t0).Seconds())
		}
	}
	b.StopTimer()
	base := bench.Median(times[0])
	for a, c := range settings {
		m := bench.Median(times[a])
		b.ReportMetric(m, "s/pass-"+c.name)
		if a > 0 {
			b.ReportMetric(m/base, "ratio-"+c.name)
		}
	}
}

// BenchmarkSavedLocality measures what the attractive pass loses to
// positions scattered in memory, on the P and newest state of a real run
// directory (NIGHTJAR_BENCH_RUN, as BenchmarkSavedAttraction). It times the
// pass on P as it is, then overwrites P's columns so that row i's entries
// point at rows i, i+1, i+2, … (clamped at the last row; same offsets, same
// values, so the same bytes are streamed and the same arithmetic done) and
// times it again: the pass as it would be if every position it reads sat
// next to its row. It reports both medians and their ratio. P is spoilt
// afterwards, so nothing else runs on it.
func BenchmarkSavedLocality(b *testing.B) {
	o := savedOptimizer(b)
	p := o.eng.p
	pass := func() float64 {
		t0 := time.Now()
		o.eng.attraction(o.y, 1, 0, o.g)
		return time.Since(t0).Seconds()
	}
	var spread, near []float64
	b.ResetTimer()
	for range b.N {
		spread = append(spread, pass())
	}
	b.StopTimer()
	last := int64(p.N - 1)
	for i := range int64(p.N) {
		for k := p.Offsets[i]; k < p.Offsets[i+1]; k++ {
			p.Cols[k] = int32(min(i+k-p.Offsets[i], last))
		}
	}
	b.StartTimer()
	for range b.N {
		near = append(near, pass())
	}
	b.StopTimer()
	mr, mn := bench.Median(spread), bench.Median(near)
	b.ReportMetric(mr, "s/pass-real")
	b.ReportMetric(mn, "s/pass-adjacent")
	b.ReportMetric(mn/mr, "ratio")
}

// savedOptimizer returns an optimiser (two threads, default parameters) on
// the P and newest state of the run directory named by NIGHTJAR_BENCH_RUN,
// or skips the benchmark if the variable is not set.
func savedOptimizer(b *testing.B) *Optimizer {
	dir := os.Getenv("NIGHTJAR_BENCH_RUN")
	if dir == "" {
		b.Skip("set NIGHTJAR_BENCH_RUN to a run directory with a saved P and state")
	}
	p, y := loadSavedRun(b, dir)
	params := DefaultParams(p.N)
	params.Threads = 2
	o, err := NewConsume(p, y, params)
	if err != nil {
		b.Fatal(err)
	}
	return o
}

// loadSavedRun returns the P of the run directory dir (its affinities file,
// named as the nightjar package names it) and the positions of its newest
// state, in input order. NewConsume checks P's layout.
func loadSavedRun(b *testing.B, dir string) (core.CSR, []float64) {
	run, err := checkpoint.Open(dir)
	if err != nil {
		b.Fatal(err)
	}
	_, ss, _, err := run.LoadState()
	if err != nil {
		b.Fatal(err)
	}
	y, err := checkpoint.SectionValues[float64](ss, "y")
	if err != nil {
		b.Fatal(err)
	}
	secs, err := run.LoadArtifact("affinities.njp", "affinity")
	if err != nil {
		b.Fatal(err)
	}
	p := core.CSR{N: len(y) / 2}
	if p.Offsets, err = checkpoint.SharedSectionValues[int64](secs, "offsets"); err != nil {
		b.Fatal(err)
	}
	if p.Cols, err = checkpoint.SharedSectionValues[int32](secs, "cols"); err != nil {
		b.Fatal(err)
	}
	if p.Vals, err = checkpoint.SharedSectionValues[float32](secs, "vals"); err != nil {
		b.Fatal(err)
	}
	return p, y
}

// BenchmarkSavedKL times the optimiser's KL on the P and newest state of a
// real run directory (NIGHTJAR_BENCH_RUN, as BenchmarkSavedAttraction),
// after one step: KL itself (half: the last step's positions recovered,
// then the entries right of the diagonal, counted twice, as for any
// symmetric P) and the sum over every entry of P at those positions
// (whole); one of each in turn. It reports each one's median seconds,
// their ratio, and the relative difference of their values.
func BenchmarkSavedKL(b *testing.B) {
	o := savedOptimizer(b)
	if !o.sym {
		b.Fatal("the saved P is not symmetric")
	}
	if err := o.Step(); err != nil {
		b.Fatal(err)
	}
	var whole, half []float64
	var vw, vh float64
	b.ResetTimer()
	for range b.N {
		t0 := time.Now()
		o.klValid = false
		o.KL() // leaves the last step's positions in o.g
		half = append(half, time.Since(t0).Seconds())
		t0 = time.Now()
		vw = o.eng.sumPLogW(o.g, false)
		whole = append(whole, time.Since(t0).Seconds())
	}
	b.StopTimer()
	vh = o.plogp - o.kl + o.psum*math.Log(o.lastZ)
	mw, mh := bench.Median(whole), bench.Median(half)
	b.ReportMetric(mw, "s-whole")
	b.ReportMetric(mh, "s-half")
	b.ReportMetric(mh/mw, "ratio")
	b.ReportMetric(math.Abs(vh-vw)/math.Abs(vw), "rel-diff")
}
