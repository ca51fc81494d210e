package bench

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"strings"
)

// Law is a growth law v(N) = a + b·g(N) with a, b ≥ 0: a fixed cost and a
// cost that grows with the rows N as g does. The package doc says which
// phase of a run follows which law and why.
type Law int

// The growth laws of the phases of a run.
const (
	Linear    Law = iota // g(N) = N
	NLogN                // g(N) = N·ln N
	Quadratic            // g(N) = N²
)

// String names the law as the reports print it.
func (l Law) String() string {
	switch l {
	case NLogN:
		return "a + b·N·ln N"
	case Quadratic:
		return "a + b·N²"
	}
	return "a + b·N"
}

// g is the growing part of the law at n rows.
func (l Law) g(n float64) float64 {
	switch l {
	case NLogN:
		return n * math.Log(n)
	case Quadratic:
		return n * n
	}
	return n
}

// maxExponent is the largest exponent of a power law through the samples
// that the law admits: the law's own exponent at large N (1 for a + b·N,
// about 1.1 for a + b·N·ln N at 10⁴–10⁶ rows, 2 for a + b·N²) plus 0.3
// for noise and for cache effects that make the cost per row grow with N.
func (l Law) maxExponent() float64 {
	switch l {
	case NLogN:
		return 1.4
	case Quadratic:
		return 2.3
	}
	return 1.3
}

// Sample is one measurement: a value (seconds, bytes) at N rows.
type Sample struct {
	N     float64
	Value float64
	// Rel is extra relative noise of this sample beyond the Noise of the
	// fit: for a time measured while other processes used a share of the
	// machine's cores, that share (0 for none).
	Rel float64
}

// Noise is the measurement noise assumed for one sample: a standard
// deviation of Abs + Rel·value. Repeats at the same size, when there are
// enough, can only raise it (Fit takes the larger).
type Noise struct {
	Abs float64 // in the values' unit
	Rel float64 // a share of the value
}

// TimeNoise and MemoryNoise are the default noises of a run's phase
// seconds and peak memory bytes on a shared machine (common practice:
// about 10 % between repeated runs and a few hundredths of a second of
// scheduling and process start-up jitter; 5 % and 8 MiB of allocator and
// page rounding).
var (
	TimeNoise   = Noise{Abs: 0.03, Rel: 0.10}
	MemoryNoise = Noise{Abs: 8 << 20, Rel: 0.05}
)

func (ns Noise) sd(v float64) float64 { return ns.Abs + ns.Rel*math.Abs(v) }

// sdOf is the noise of one sample: the fit's plus the sample's own.
func (ns Noise) sdOf(s Sample) float64 { return ns.Abs + (ns.Rel+s.Rel)*math.Abs(s.Value) }

// Fit is a growth law fitted to samples by weighted least squares with
// a, b ≥ 0 (see the package doc).
type Fit struct {
	Law  Law
	A, B float64 // v(N) = A + B·g(N)
	// Chi2 is the weighted sum of squared residuals divided by its degrees
	// of freedom (samples − 2): about 1 when the samples scatter around the
	// law as much as the noise says, much more when they follow another
	// curve. NaN with fewer than three samples.
	Chi2 float64
	// Exponent is the slope of ln v against ln N over the samples (ordinary
	// least squares on the logarithms): the growth the samples themselves
	// show, whatever the law. NaN when a value is not positive.
	Exponent float64
	Sizes    int     // distinct sizes among the samples
	MaxN     float64 // the largest size sampled
	noise    Noise
	cov      [3]float64 // covariance of (A, B): var A, cov AB, var B
	scale    float64    // max(1, Chi2): noise scale used for the covariance
}

// At returns the fitted law at n rows.
func (f Fit) At(n float64) float64 { return f.A + f.B*f.Law.g(n) }

// LocalExponent returns d ln v / d ln N of the fitted law at n rows: the
// power of N the law behaves like there.
func (f Fit) LocalExponent(n float64) float64 {
	v := f.At(n)
	if v <= 0 {
		return math.NaN()
	}
	var dg float64 // n·g'(n)
	switch f.Law {
	case NLogN:
		dg = n*math.Log(n) + n
	case Quadratic:
		dg = 2 * n * n
	default:
		dg = n
	}
	return f.B * dg / v
}

// FitLaw fits law l to the samples. It needs at least two samples at two
// different sizes, all with N ≥ 2 and finite values; ns is the noise of
// one sample.
func FitLaw(l Law, samples []Sample, ns Noise) (Fit, error) {
	f := Fit{Law: l, Chi2: math.NaN(), Exponent: math.NaN(), noise: ns}
	sizes := map[float64]bool{}
	for _, s := range samples {
		if !(s.N >= 2) || math.IsNaN(s.Value) || math.IsInf(s.Value, 0) || math.IsInf(s.N, 0) || !(s.Rel >= 0) {
			return f, fmt.Errorf("sample (%g rows, %g) is not a measurement", s.N, s.Value)
		}
		sizes[s.N] = true
		f.MaxN = math.Max(f.MaxN, s.N)
	}
	f.Sizes = len(sizes)
	if f.Sizes < 2 {
		return f, errors.New("needs samples at two sizes or more")
	}
	ns = poolNoise(samples, ns)
	f.noise = ns
	// Weighted normal equations in (a, b'), with g scaled by g(MaxN) so
	// that both columns are of order 1.
	gs := l.g(f.MaxN)
	var s00, s01, s11, r0, r1 float64
	for _, s := range samples {
		w := 1 / sq(ns.sdOf(s))
		x := l.g(s.N) / gs
		s00 += w
		s01 += w * x
		s11 += w * x * x
		r0 += w * s.Value
		r1 += w * x * s.Value
	}
	det := s00*s11 - s01*s01
	a, b := (s11*r0-s01*r1)/det, (s00*r1-s01*r0)/det
	// Non-negative least squares on two unknowns: if the free solution has
	// a negative part, the best constrained one sets that part to 0.
	switch {
	case a < 0 && b < 0:
		a, b = 0, 0
	case a < 0:
		a, b = 0, math.Max(0, r1/s11)
	case b < 0:
		a, b = math.Max(0, r0/s00), 0
	}
	f.A, f.B = a, b/gs
	var chi float64
	for _, s := range samples {
		chi += sq((s.Value - f.At(s.N)) / ns.sdOf(s))
	}
	if dof := len(samples) - 2; dof > 0 {
		f.Chi2 = chi / float64(dof)
	}
	f.scale = 1
	if f.Chi2 > 1 {
		f.scale = f.Chi2
	}
	// Covariance of (a, b') is scale·(XᵀWX)⁻¹; back to b = b'/gs.
	f.cov = [3]float64{f.scale * s11 / det, -f.scale * s01 / det / gs, f.scale * s00 / det / (gs * gs)}
	f.Exponent = powerExponent(samples)
	return f, nil
}

// poolNoise raises ns's relative part to the spread seen between repeats
// at the same size, when at least two sizes have two samples or more:
// the pooled relative standard deviation around each size's mean.
func poolNoise(samples []Sample, ns Noise) Noise {
	groups := map[float64][]float64{}
	for _, s := range samples {
		groups[s.N] = append(groups[s.N], s.Value)
	}
	var ss float64
	var dof, repeated int
	for _, vs := range groups {
		if len(vs) < 2 {
			continue
		}
		repeated++
		var mean float64
		for _, v := range vs {
			mean += v
		}
		mean /= float64(len(vs))
		if mean <= 0 {
			continue
		}
		for _, v := range vs {
			ss += sq((v - mean) / mean)
		}
		dof += len(vs) - 1
	}
	if repeated >= 2 && dof > 0 {
		ns.Rel = math.Max(ns.Rel, math.Sqrt(ss/float64(dof)))
	}
	return ns
}

// powerExponent is the least-squares slope of ln v against ln N, or NaN
// when a value is not positive or all N are equal.
func powerExponent(samples []Sample) float64 {
	var mx, my float64
	for _, s := range samples {
		if s.Value <= 0 {
			return math.NaN()
		}
		mx += math.Log(s.N)
		my += math.Log(s.Value)
	}
	n := float64(len(samples))
	mx, my = mx/n, my/n
	var sxx, sxy float64
	for _, s := range samples {
		dx := math.Log(s.N) - mx
		sxx += dx * dx
		sxy += dx * (math.Log(s.Value) - my)
	}
	if sxx == 0 {
		return math.NaN()
	}
	return sxy / sxx
}

// FitPower fits v = c·N^p by least squares on the logarithms and returns
// c and p. Every value must be positive and the sizes not all equal.
func FitPower(samples []Sample) (c, p float64, err error) {
	p = powerExponent(samples)
	if math.IsNaN(p) {
		return 0, p, errors.New("a power law needs positive values at two sizes or more")
	}
	var my, mx float64
	for _, s := range samples {
		mx += math.Log(s.N)
		my += math.Log(s.Value)
	}
	n := float64(len(samples))
	return math.Exp(my/n - p*mx/n), p, nil
}

// Limits are the checks a fit must pass before it may predict (see
// DefaultLimits).
type Limits struct {
	MinSizes  int     // distinct sizes, so that the law is checked and not only fitted
	MaxChi2   float64 // largest Fit.Chi2: residuals this many times the noise variance
	MaxReach  float64 // largest ratio of the predicted size to the largest sampled size
	MinSignal float64 // exponent checks apply only where every value exceeds this many noise Abs (and no sample's Rel exceeds 0.25)
	Z         float64 // half-width of the range in standard deviations
}

// DefaultLimits: three sizes (two parameters and one degree of freedom to
// test the law), residuals up to 3 standard deviations on average (χ²/dof
// ≤ 9), reach up to 200 times the largest sample, exponent checks on
// values above 5 noise units, and ranges of ±2 standard deviations (about
// 95 % under normal errors; common practice).
var DefaultLimits = Limits{MinSizes: 3, MaxChi2: 9, MaxReach: 200, MinSignal: 5, Z: 2}

// Estimate is a prediction at one size: a value with a range, or a
// refusal.
type Estimate struct {
	N                float64 // the size predicted at
	Value, Low, High float64
	// Refused is non-empty when the fit may not predict: it says why.
	Refused string
	// Fit is the law fitted to every sample, which the checks judge; Local
	// the same law through the samples at the two largest sizes, which
	// predicts.
	Fit, Local Fit
	varFit     float64 // variance of the prediction from the fits
	noise      float64 // standard deviation of one run at N
}

// Predict fits law l to the samples, checks the fit (refusing, with the
// reason, when the samples span fewer than lim.MinSizes sizes, when n lies
// more than lim.MaxReach times beyond the largest, when the residuals
// exceed lim.MaxChi2, or when quiet samples grow faster than the law admits
// or shrink as N grows) and predicts the value at n rows.
//
// The prediction follows the law through the two largest sizes (Local):
// the laws hold for large N, while at small N terms that level off (a grid
// whose size follows the map's width, the collector's slack, caches) bend
// the curve, so the samples nearest the full size are the least biased. Its
// range is Value ± Z·σ, where σ² is the variance of the local fit at n
// (from its covariance), plus the squared gap to the fit of all samples
// divided by Z² (so that the range reaches it), plus the noise of one new
// run.
func Predict(l Law, samples []Sample, n float64, ns Noise, lim Limits) Estimate {
	e := Estimate{N: n, Value: math.NaN(), Low: math.NaN(), High: math.NaN()}
	f, err := FitLaw(l, samples, ns)
	e.Fit, e.Local = f, f
	if err != nil {
		e.Refused = err.Error()
		return e
	}
	if reason := refusal(f, samples, n, lim); reason != "" {
		e.Refused = reason
		return e
	}
	if loc, err := FitLaw(l, twoLargest(samples), ns); err == nil {
		e.Local = loc
	}
	e.Value = e.Local.At(n)
	e.varFit = e.Local.varAt(n) + sq(f.At(n)-e.Value)/sq(lim.Z)
	e.noise = f.scale * f.noise.sd(e.Value)
	half := lim.Z * math.Sqrt(e.varFit+sq(e.noise))
	e.Low, e.High = math.Max(0, e.Value-half), e.Value+half
	return e
}

// varAt is the variance of the fitted law at n rows, from the covariance
// of (A, B).
func (f Fit) varAt(n float64) float64 {
	x := f.Law.g(n)
	return math.Max(0, f.cov[0]+2*x*f.cov[1]+x*x*f.cov[2])
}

// twoLargest returns the samples at the two largest sizes.
func twoLargest(samples []Sample) []Sample {
	var top, second float64
	for _, s := range samples {
		switch {
		case s.N > top:
			top, second = s.N, top
		case s.N < top && s.N > second:
			second = s.N
		}
	}
	var out []Sample
	for _, s := range samples {
		if s.N >= second {
			out = append(out, s)
		}
	}
	return out
}

// refusal returns why f may not predict at n, or "".
func refusal(f Fit, samples []Sample, n float64, lim Limits) string {
	if f.Sizes < lim.MinSizes {
		return fmt.Sprintf("measured at %d sizes; a check of the law needs %d", f.Sizes, lim.MinSizes)
	}
	if n > lim.MaxReach*f.MaxN {
		return fmt.Sprintf("%s rows is %.0f times the largest subsample; at most %.0f", grouped(n), n/f.MaxN, lim.MaxReach)
	}
	if f.Chi2 > lim.MaxChi2 {
		return fmt.Sprintf("the times do not follow %s: residuals %.1f times the noise", f.Law, math.Sqrt(f.Chi2))
	}
	// Growth is judged only on quiet samples well above the noise.
	signal := true
	for _, s := range samples {
		signal = signal && s.Value > lim.MinSignal*f.noise.Abs && s.Rel <= 0.25
	}
	if signal && !math.IsNaN(f.Exponent) {
		if f.Exponent > f.Law.maxExponent() {
			return fmt.Sprintf("grows like N^%.2f over the subsamples, faster than %s allows", f.Exponent, f.Law)
		}
		if f.Exponent < -0.2 {
			return fmt.Sprintf("falls as the rows grow (N^%.2f): the measurements are noise", f.Exponent)
		}
	}
	return ""
}

// Median returns the median of vs (NaN for none), ignoring NaNs.
func Median(vs []float64) float64 {
	s := make([]float64, 0, len(vs))
	for _, v := range vs {
		if !math.IsNaN(v) {
			s = append(s, v)
		}
	}
	if len(s) == 0 {
		return math.NaN()
	}
	slices.Sort(s)
	m := len(s) / 2
	if len(s)%2 == 1 {
		return s[m]
	}
	return (s[m-1] + s[m]) / 2
}

// Spread returns the smallest and largest of vs, ignoring NaNs (NaN, NaN
// for none).
func Spread(vs []float64) (lo, hi float64) {
	lo, hi = math.Inf(1), math.Inf(-1)
	for _, v := range vs {
		if !math.IsNaN(v) {
			lo, hi = math.Min(lo, v), math.Max(hi, v)
		}
	}
	if math.IsInf(lo, 1) {
		return math.NaN(), math.NaN()
	}
	return lo, hi
}

// Trend is the least-squares slope of vs against log₁₀ of ns: the change
// per tenfold rows (NaN with fewer than two finite values).
func Trend(ns, vs []float64) float64 {
	var x, y []float64
	for i := range ns {
		if !math.IsNaN(vs[i]) && ns[i] > 0 {
			x, y = append(x, math.Log10(ns[i])), append(y, vs[i])
		}
	}
	if len(x) < 2 {
		return math.NaN()
	}
	var mx, my float64
	for i := range x {
		mx, my = mx+x[i], my+y[i]
	}
	mx, my = mx/float64(len(x)), my/float64(len(x))
	var sxx, sxy float64
	for i := range x {
		sxx += sq(x[i] - mx)
		sxy += (x[i] - mx) * (y[i] - my)
	}
	if sxx == 0 {
		return math.NaN()
	}
	return sxy / sxx
}

func sq(x float64) float64 { return x * x }

// grouped writes n with thousands separators.
func grouped(n float64) string {
	s := fmt.Sprintf("%.0f", n)
	var b strings.Builder
	for i, c := range s {
		if i > 0 && (len(s)-i)%3 == 0 {
			b.WriteByte(',')
		}
		b.WriteRune(c)
	}
	return b.String()
}
