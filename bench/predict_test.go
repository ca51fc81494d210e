package bench

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"
)

// ladder returns samples of v at 10⁴, 3·10⁴ and 10⁵ rows, repeats times
// each, with multiplicative noise of relative standard deviation rel from a
// seeded generator. The reference is the law itself: the fits must find
// what generated the samples.
func ladder(v func(n float64) float64, repeats int, rel float64, seed uint64) []Sample {
	rng := rand.New(rand.NewPCG(seed, 7))
	var ss []Sample
	for _, n := range []float64{1e4, 3e4, 1e5} {
		for range repeats {
			ss = append(ss, Sample{N: n, Value: v(n) * (1 + rel*rng.NormFloat64())})
		}
	}
	return ss
}

// localExponent is d ln v / d ln N of v at n, by a central difference.
func localExponent(v func(float64) float64, n float64) float64 {
	h := 1e-4
	return (math.Log(v(n*math.Exp(h))) - math.Log(v(n*math.Exp(-h)))) / (2 * h)
}

// TestFitRecoversGrowth: samples from a known law a + b·g(N) with 5 %
// noise; the fit of that law must recover its growth at 10⁶ rows (the
// local exponent d ln v / d ln N) within ±0.06, predict v(10⁶) within
// 20 %, and its range must hold the true value.
func TestFitRecoversGrowth(t *testing.T) {
	cases := []struct {
		name string
		law  Law
		v    func(n float64) float64
	}{
		{"linear, fixed cost dominant at small N", Linear, func(n float64) float64 { return 20 + 3e-4*n }},
		{"linear, no fixed cost", Linear, func(n float64) float64 { return 1e-3 * n }},
		{"N log N", NLogN, func(n float64) float64 { return 0.5 + 1e-5*n*math.Log(n) }},
		{"quadratic", Quadratic, func(n float64) float64 { return 0.2 + 4e-9*n*n }},
	}
	const full = 1e6
	for _, c := range cases {
		for seed := uint64(1); seed <= 5; seed++ {
			ss := ladder(c.v, 3, 0.05, seed)
			e := Predict(c.law, ss, full, TimeNoise, DefaultLimits)
			if e.Refused != "" {
				t.Errorf("%s, seed %d: refused: %s", c.name, seed, e.Refused)
				continue
			}
			want := localExponent(c.v, full)
			if got := e.Fit.LocalExponent(full); math.Abs(got-want) > 0.06 {
				t.Errorf("%s, seed %d: exponent at 10⁶ = %.3f, want %.3f ± 0.06", c.name, seed, got, want)
			}
			truth := c.v(full)
			if math.Abs(e.Value/truth-1) > 0.2 {
				t.Errorf("%s, seed %d: predicted %.4g, true %.4g", c.name, seed, e.Value, truth)
			}
			if truth < e.Low || truth > e.High {
				t.Errorf("%s, seed %d: range %.4g–%.4g misses %.4g", c.name, seed, e.Low, e.High, truth)
			}
		}
	}
}

// TestFitPowerRecoversExponent: v = c·N^p with 3 % noise; the log-log fit
// recovers p within ±0.05 and the fit of the matching law reports the same
// exponent over the samples.
func TestFitPowerRecoversExponent(t *testing.T) {
	for _, p := range []float64{0.5, 1, 1.5, 2} {
		v := func(n float64) float64 { return 1e-4 * math.Pow(n, p) }
		ss := ladder(v, 2, 0.03, uint64(10*p))
		c, got, err := FitPower(ss)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(got-p) > 0.05 || math.Abs(c/1e-4-1) > 0.7 {
			t.Errorf("N^%g: fitted %.3g·N^%.3f", p, c, got)
		}
		f, err := FitLaw(Linear, ss, TimeNoise)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(f.Exponent-got) > 1e-12 {
			t.Errorf("Fit.Exponent %.4f, FitPower %.4f", f.Exponent, got)
		}
	}
	if _, _, err := FitPower([]Sample{{1e4, 1, 0}, {1e5, 0, 0}}); err == nil {
		t.Error("a zero value should be refused by the power law")
	}
}

// TestPredictRefuses: curves that follow no law, too few sizes, too far a
// reach.
func TestPredictRefuses(t *testing.T) {
	at := func(vs ...float64) []Sample {
		ns := []float64{1e4, 3e4, 1e5, 3e5}
		var ss []Sample
		for i, v := range vs {
			ss = append(ss, Sample{N: ns[i], Value: v})
		}
		return ss
	}
	cases := []struct {
		name string
		law  Law
		ss   []Sample
		n    float64
		want string
	}{
		{"up and down", Linear, at(10, 40, 12), 1e6, "do not follow"},
		{"jumps", NLogN, at(5, 6, 60, 61), 1e6, "do not follow"},
		{"falls", Linear, at(30, 20, 10), 1e6, ""}, // refused for the exponent or the residuals
		{"cubic growth for a linear law", Linear, at(1, 27, 1000), 1e6, ""},
		{"two sizes", Linear, at(10, 30), 1e6, "needs 3"},
		{"too far", Linear, at(10, 30, 100), 1e8, "times the largest"},
	}
	for _, c := range cases {
		e := Predict(c.law, c.ss, c.n, TimeNoise, DefaultLimits)
		if e.Refused == "" {
			t.Errorf("%s: predicted %v, want a refusal", c.name, e)
			continue
		}
		if !strings.Contains(e.Refused, c.want) {
			t.Errorf("%s: refused with %q, want it to say %q", c.name, e.Refused, c.want)
		}
		if !math.IsNaN(e.Value) {
			t.Errorf("%s: a refused estimate carries the value %g", c.name, e.Value)
		}
	}
	// The same samples along a straight line are accepted.
	if e := Predict(Linear, at(10, 30, 100), 1e6, TimeNoise, DefaultLimits); e.Refused != "" {
		t.Errorf("a straight line was refused: %s", e.Refused)
	}
}

// TestFitLawNonNegative: a law fitted to values that fall with N keeps
// b = 0 (a mean), and one whose free intercept would be negative keeps
// a = 0.
func TestFitLawNonNegative(t *testing.T) {
	f, err := FitLaw(Linear, []Sample{{1e4, 12, 0}, {1e5, 10, 0}}, TimeNoise)
	if err != nil {
		t.Fatal(err)
	}
	if f.B != 0 || f.A < 10 || f.A > 12 {
		t.Errorf("falling values: a = %g, b = %g", f.A, f.B)
	}
	f, err = FitLaw(Linear, []Sample{{1e4, 1, 0}, {1e5, 30, 0}}, TimeNoise)
	if err != nil {
		t.Fatal(err)
	}
	if f.A != 0 || f.B <= 0 {
		t.Errorf("steep values: a = %g, b = %g", f.A, f.B)
	}
	if _, err := FitLaw(Linear, []Sample{{1e4, 1, 0}, {1e4, 2, 0}}, TimeNoise); err == nil {
		t.Error("one size should be refused")
	}
	if _, err := FitLaw(Linear, []Sample{{1e4, math.NaN(), 0}, {1e5, 2, 0}}, TimeNoise); err == nil {
		t.Error("a NaN value should be refused")
	}
}

// TestPoolNoise: repeats that scatter by 30 % widen the noise to about
// that (the pooled relative standard deviation).
func TestPoolNoise(t *testing.T) {
	ss := []Sample{{1e4, 7, 0}, {1e4, 13, 0}, {1e5, 70, 0}, {1e5, 130, 0}}
	got := poolNoise(ss, TimeNoise).Rel
	// each size: mean m, deviations ±0.3m; pooled sqrt((4·0.09)/2) = 0.424
	if math.Abs(got-math.Sqrt(0.18)) > 1e-9 {
		t.Errorf("pooled noise %g, want %g", got, math.Sqrt(0.18))
	}
	if got := poolNoise(ss[:3], TimeNoise).Rel; got != TimeNoise.Rel {
		t.Errorf("one repeated size should keep the default, got %g", got)
	}
}

func TestMedianSpreadTrend(t *testing.T) {
	nan := math.NaN()
	cases := []struct {
		vs     []float64
		med    float64
		lo, hi float64
	}{
		{[]float64{3, 1, 2}, 2, 1, 3},
		{[]float64{4, 1, 3, 2}, 2.5, 1, 4},
		{[]float64{nan, 5}, 5, 5, 5},
	}
	for _, c := range cases {
		lo, hi := Spread(c.vs)
		if m := Median(c.vs); m != c.med || lo != c.lo || hi != c.hi {
			t.Errorf("%v: median %g, spread %g–%g", c.vs, m, lo, hi)
		}
	}
	if !math.IsNaN(Median([]float64{nan})) {
		t.Error("median of nothing should be NaN")
	}
	// 0.99 at 10⁴, 0.995 at 10⁵: +0.005 per tenfold rows.
	if got := Trend([]float64{1e4, 1e5}, []float64{0.99, 0.995}); math.Abs(got-0.005) > 1e-12 {
		t.Errorf("trend %g", got)
	}
	if got := Trend([]float64{1e4}, []float64{0.99}); !math.IsNaN(got) {
		t.Errorf("trend of one point %g", got)
	}
}

// TestPredictPasses: the recalls of NN-descent measured on the demo
// survey (a run's report.json, neighbours.pass_recall: 0.964 → 1 at 10⁴
// rows, 0.905 → 0.99981 at 3·10⁴, 0.818 → 0.999 at 10⁵) predict the two
// passes a run on 10⁶ rows needed (0.633 → 0.988 → 1.000).
func TestPredictPasses(t *testing.T) {
	runs := []PassRun{{1e4, 0.964, 1, 27000, 0}, {3e4, 0.905, 0.99981, 27000, 0}, {1e5, 0.818, 0.999, 27000, 0}}
	pf := PredictPasses(runs, 1e6, 0.99, 6, TreeGrowth{})
	if pf.Passes != 2 || pf.High < 2 || math.Abs(pf.Before-0.633) > 0.06 || pf.After1 > 0.99 || pf.Trees != 0 {
		t.Errorf("1M rows: %+v", pf)
	}
	if pf := PredictPasses(runs, 1e5, 0.99, 6, TreeGrowth{}); pf.Passes != 1 {
		t.Errorf("100k rows: %+v", pf)
	}
	if pf := PredictPasses(runs[:1], 1e6, 0.99, 6, TreeGrowth{}); pf.Passes != 6 || !strings.Contains(pf.Note, "could not be predicted") {
		t.Errorf("one run: %+v", pf)
	}
}

// TestPredictPassesGrowingStart: with the start grown 4 trees at a time
// from 8 while its recall is below 0.8, the same runs predict what the
// 1,000,000-row demo run did on 2026-12-03 (16 trees, start recall 0.845,
// one pass to 0.9978); the 100,000-row runs keep 8 trees. A subsample that
// had grown its start (16 trees, 0.845: the 1M run itself) is brought back
// to 8 trees before the fit: 0.155/0.66² = 0.356, near the 0.367 that 8
// trees gave on those rows.
func TestPredictPassesGrowingStart(t *testing.T) {
	tg := TreeGrowth{Base: 8, Step: 4, Max: 24, Goal: 0.8, Factor: DefaultTreeFactor}
	runs := []PassRun{{1e4, 0.964, 1, 27000, 8}, {3e4, 0.905, 0.99981, 27000, 8}, {1e5, 0.818, 0.999, 27000, 8}}
	pf := PredictPasses(runs, 1e6, 0.99, 6, tg)
	if pf.Trees != 16 || pf.TreesHigh != 20 || pf.Passes != 1 || pf.Before < 0.8 || !strings.Contains(pf.Note, "16 trees") {
		t.Errorf("1M rows: %+v", pf)
	}
	if pf := PredictPasses(runs, 1e5, 0.99, 6, tg); pf.Trees != 8 || pf.TreesHigh != 8 || pf.Passes != 1 {
		t.Errorf("100k rows: %+v", pf)
	}
	grown := append(runs[1:], PassRun{1e6, 0.845, 0.9978, 27000, 16})
	pf2 := PredictPasses(grown, 3e6, 0.99, 6, tg)
	flat := append(runs[1:], PassRun{1e6, 1 - 0.155/(DefaultTreeFactor*DefaultTreeFactor), 0.9978, 27000, 8})
	pf3 := PredictPasses(flat, 3e6, 0.99, 6, tg)
	if pf2.Trees != pf3.Trees || math.Abs(pf2.Before-pf3.Before) > 1e-12 {
		t.Errorf("a grown run %+v, the same brought back by hand %+v", pf2, pf3)
	}
}
