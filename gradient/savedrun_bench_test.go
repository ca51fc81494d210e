package gradient

import (
	"os"
	"slices"
	"strconv"
	"testing"
	"time"

	"nightjar/checkpoint"
	"nightjar/internal/core"
)

// BenchmarkSavedAttraction times the attractive pass on the P and newest
// state of a real run directory, with the kernel's prefetching off
// (attractAhead = 0) and at several distances, one pass of each in turn so
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
	b.Logf("%d rows, %d entries", o.n, len(o.eng.p.Cols))

	defer func(a int) { attractAhead = a }(attractAhead)
	aheads := []int{0, 16, 32, 64}
	times := make([][]float64, len(aheads))
	b.ResetTimer()
	for range b.N {
		for a, ahead := range aheads {
			attractAhead = ahead
			t0 := time.Now()
			o.eng.attraction(o.y, 1, 0, o.g)
			times[a] = append(times[a], time.Since(t0).Seconds())
		}
	}
	b.StopTimer()
	base := median(times[0])
	for a, ahead := range aheads {
		m := median(times[a])
		b.ReportMetric(m, "s/pass-ahead"+strconv.Itoa(ahead))
		if a > 0 {
			b.ReportMetric(m/base, "ratio-ahead"+strconv.Itoa(ahead))
		}
	}
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

func median(s []float64) float64 {
	s = slices.Clone(s)
	slices.Sort(s)
	return s[len(s)/2]
}
