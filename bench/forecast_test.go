package bench

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"
)

// synthRuns returns runs at 10⁴, 3·10⁴ and 10⁵ rows whose phases follow
// known laws (the reference), with 5 % seeded noise.
func synthRuns(seed uint64, phases map[string]func(float64) float64, mem func(float64) float64) []RunSample {
	rng := rand.New(rand.NewPCG(seed, 3))
	var runs []RunSample
	for _, n := range []float64{1e4, 3e4, 1e5} {
		for range 2 {
			r := RunSample{N: int(n), Phases: map[string]float64{}}
			for name, v := range phases {
				r.Phases[name] = v(n) * (1 + 0.05*rng.NormFloat64())
				r.Seconds += r.Phases[name]
			}
			r.Seconds += 0.3 + 1e-6*n // the rest of the wall time
			r.Memory = mem(n) * (1 + 0.02*rng.NormFloat64())
			runs = append(runs, r)
		}
	}
	return runs
}

func TestForecastRun(t *testing.T) {
	phases := map[string]func(float64) float64{
		"neighbours": func(n float64) float64 { return 2e-5 * n * math.Log(n) },
		"affinities": func(n float64) float64 { return 3e-5 * n },
		"optimiser":  func(n float64) float64 { return 80 + 4e-4*n },
	}
	mem := func(n float64) float64 { return 200e6 + 2500*n }
	laws := []PhaseLaw{{Name: "neighbours", Law: NLogN}, {Name: "affinities", Law: Linear}, {Name: "optimiser", Law: Linear}}
	const full = 1e6
	truth := 0.3 + 1e-6*full
	for _, v := range phases {
		truth += v(full)
	}
	for seed := uint64(1); seed <= 5; seed++ {
		fc := ForecastRun(laws, synthRuns(seed, phases, mem), full, DefaultLimits)
		if fc.Seconds.Refused != "" || fc.Memory.Refused != "" {
			t.Fatalf("seed %d: refused: %s %s", seed, fc.Seconds.Refused, fc.Memory.Refused)
		}
		// Within 25 % (10× beyond the largest sample, 5 % noise) and inside the range.
		if math.Abs(fc.Seconds.Value/truth-1) > 0.25 || truth < fc.Seconds.Low || truth > fc.Seconds.High {
			t.Errorf("seed %d: wall %v, true %.4g", seed, fc.Seconds, truth)
		}
		if m := mem(full); math.Abs(fc.Memory.Value/m-1) > 0.1 || m < fc.Memory.Low || m > fc.Memory.High {
			t.Errorf("seed %d: memory %v, true %.4g", seed, fc.Memory, m)
		}
		if len(fc.Phases) != 4 || fc.Phases[3].Name != OtherPhase {
			t.Errorf("seed %d: phases %v", seed, fc.Phases)
		}
		var sum float64
		for _, p := range fc.Phases {
			sum += p.Value
		}
		if math.Abs(sum-fc.Seconds.Value) > 1e-9*sum {
			t.Errorf("seed %d: phases add to %g, wall %g", seed, sum, fc.Seconds.Value)
		}
	}
	// A phase that jumps refuses the wall time and is named.
	runs := synthRuns(1, phases, mem)
	for i := range runs {
		if runs[i].N == 3e4 {
			runs[i].Phases["affinities"] *= 20
		}
	}
	fc := ForecastRun(laws, runs, full, DefaultLimits)
	if !strings.HasPrefix(fc.Seconds.Refused, "affinities: ") || !math.IsNaN(fc.Seconds.Value) {
		t.Errorf("jumping affinities: %v", fc.Seconds)
	}
}

func TestRoughSeconds(t *testing.T) {
	laws := []PhaseLaw{{Name: "a", Law: Linear}, {Name: "b", Law: Quadratic}}
	one := []RunSample{{N: 1000, Seconds: 4, Phases: map[string]float64{"a": 1, "b": 2}}}
	// a: 1 → 3; b: 2 → 18; other 1 → 3.
	if got := RoughSeconds(laws, one, 3000); math.Abs(got-24) > 1e-9 {
		t.Errorf("one size: %g, want 24", got)
	}
	two := append(one, RunSample{N: 2000, Seconds: 12, Phases: map[string]float64{"a": 2, "b": 8}})
	// Fits through the two sizes: a = N/1000, b = 2·(N/1000)², other = N/1000.
	if got := RoughSeconds(laws, two, 3000); math.Abs(got-24) > 1e-6 {
		t.Errorf("two sizes: %g, want 24", got)
	}
	if !math.IsNaN(RoughSeconds(laws, nil, 10)) {
		t.Error("no runs should give NaN")
	}
}

// TestForecastBusyRuns: a run slowed 2.5 times while other processes held
// most of the machine refuses the fit when nothing says so, and is
// weighed as that uncertain when its Busy share says so.
func TestForecastBusyRuns(t *testing.T) {
	phases := map[string]func(float64) float64{
		"affinities": func(n float64) float64 { return 3e-5 * n },
	}
	laws := []PhaseLaw{{Name: "affinities", Law: Linear}}
	mem := func(n float64) float64 { return 1e8 }
	var runs []RunSample // one run per size: no repeats to show the noise
	for i, r := range synthRuns(2, phases, mem) {
		if i%2 == 0 {
			runs = append(runs, r)
		}
	}
	for i := range runs {
		if runs[i].N == 3e4 {
			runs[i].Phases["affinities"] *= 2.5
			runs[i].Seconds += 1.5 * runs[i].Phases["affinities"] / 2.5
		}
	}
	if fc := ForecastRun(laws, runs, 1e6, DefaultLimits); fc.Seconds.Refused == "" {
		t.Errorf("a run slowed 2.5 times was taken at its word: %v", fc.Seconds)
	}
	for i := range runs {
		if runs[i].N == 3e4 {
			runs[i].Busy = 0.8
		}
	}
	fc := ForecastRun(laws, runs, 1e6, DefaultLimits)
	truth := 3e-5*1e6 + 0.3 + 1e-6*1e6
	if fc.Seconds.Refused != "" || truth < fc.Seconds.Low || truth > fc.Seconds.High {
		t.Errorf("with the busy run marked: %v, true %.4g", fc.Seconds, truth)
	}
}

// TestForecastFloor: noisy runs on subsamples cannot make the bottom of the
// range fall below what the largest subsample itself took (a hand-worked
// case: runs of 10 s, 20 s and 30 s and of 1, 2 and 3 GB at the largest
// size give floors of 10 s and 1 GB; smaller subsamples and larger ones do
// not count).
func TestForecastFloor(t *testing.T) {
	runs := []RunSample{{N: 100, Seconds: 50, Memory: 9e9}, {N: 1000, Seconds: 20, Memory: 2e9}, {N: 1000, Seconds: 10, Memory: 3e9},
		{N: 1000, Seconds: 30, Memory: 1e9}, {N: 5000, Seconds: 1, Memory: 1}}
	if s, m := floors(runs, 2000); s != 10 || m != 1e9 {
		t.Errorf("floors %g s, %g bytes; want 10 s, 1e9 bytes", s, m)
	}
	if s, m := floors(runs, 50); s != 0 || m != 0 {
		t.Errorf("no subsample at or below the size: floors %g, %g; want 0", s, m)
	}
}

// TestForecastFrom: a phase whose work changes kind below some size (the
// scores of a run smaller than their sample, which score every row) is
// refused when every run is fitted with a + b·N, and predicted when From
// leaves the smaller runs out. Synthetic times: 0.05 + 1e-3·N from 2,000
// rows up, 0.05 + 1e-3·N²/2,000 below (every row scored).
func TestForecastFrom(t *testing.T) {
	at := func(n float64) float64 {
		if n < 2000 {
			return 0.05 + 1e-3*n*n/2000
		}
		return 0.05 + 1e-3*n
	}
	var runs []RunSample
	for _, n := range []int{300, 700, 2100, 7000, 20000} {
		v := at(float64(n))
		runs = append(runs, RunSample{N: n, Seconds: v, Memory: 1e8, Phases: map[string]float64{"scores": v}})
	}
	laws := []PhaseLaw{{Name: "scores", Law: Linear}}
	if fc := ForecastRun(laws, runs, 70000, DefaultLimits); fc.Seconds.Refused == "" {
		t.Errorf("every run fitted with a + b·N: %v, want refused", fc.Seconds)
	}
	laws[0].From = 2000
	fc := ForecastRun(laws, runs, 70000, DefaultLimits)
	if want := at(70000); fc.Seconds.Refused != "" || math.Abs(fc.Seconds.Value-want) > 0.01*want {
		t.Errorf("runs from 2,000 rows: %v, want %.4g", fc.Seconds, want)
	}
	// Two sizes at or above From extend the law, unchecked.
	fc = ForecastRun(laws, runs[:4], 70000, DefaultLimits)
	if want := at(70000); fc.Seconds.Refused != "" || math.Abs(fc.Seconds.Value-want) > 0.01*want {
		t.Errorf("two sizes from 2,000 rows: %v, want %.4g", fc.Seconds, want)
	}
}
