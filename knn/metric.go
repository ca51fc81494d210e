package knn

import (
	"fmt"
	"math"
	"strings"

	"nightjar/internal/core"
)

// Metric selects the distance between rows. Every distance this package
// reports is a squared Euclidean distance: for Cosine it is taken between the
// L2-normalised rows, where ‖a/‖a‖ − b/‖b‖‖² = 2 − 2·cos(a, b).
type Metric int

const (
	// Euclidean is the squared Euclidean distance ‖a − b‖².
	Euclidean Metric = iota
	// Cosine is the squared Euclidean distance between L2-normalised rows,
	// 2 − 2·cos(a, b), in [0, 4]. A row of zeros has no direction and is
	// refused with a *ZeroRowError.
	Cosine
)

// String returns the metric's name as ParseMetric accepts it.
func (m Metric) String() string {
	switch m {
	case Euclidean:
		return "euclidean"
	case Cosine:
		return "cosine"
	}
	return fmt.Sprintf("Metric(%d)", int(m))
}

// ParseMetric returns the metric named s ("euclidean" or "cosine", case
// insensitive), or an error listing the accepted names.
func ParseMetric(s string) (Metric, error) {
	switch strings.ToLower(strings.TrimSpace(s)) {
	case "euclidean":
		return Euclidean, nil
	case "cosine":
		return Cosine, nil
	}
	return 0, fmt.Errorf("unknown metric %q (want euclidean or cosine)", s)
}

// Options are the settings every search of this package takes.
type Options struct {
	// Threads is the number of goroutines; below 1 means 1. The results do
	// not depend on it.
	Threads int
	// Metric is the distance between rows.
	Metric Metric
}

// threads returns Threads, at least 1.
func (o Options) threads() int { return max(1, o.Threads) }

// ZeroRowError reports a row of zeros met under the Cosine metric, where a
// row's direction is undefined. Row is the 0-based row index; the message
// names it 1-based, as the ingest package's messages do.
type ZeroRowError struct {
	Row int
}

// Error returns a one-line message naming the row (1-based).
func (e *ZeroRowError) Error() string {
	return fmt.Sprintf("row %d: all values are zero, so the cosine metric is undefined for it", e.Row+1)
}

// metricRows returns the rows the squared Euclidean distances are taken on: x
// itself for Euclidean (no copy), or a normalised copy for Cosine.
func metricRows(x core.Matrix, m Metric) (core.Matrix, error) {
	if len(x.Data) != x.N*x.D {
		return core.Matrix{}, fmt.Errorf("matrix is %d×%d but holds %d values", x.N, x.D, len(x.Data))
	}
	switch m {
	case Euclidean:
		return x, nil
	case Cosine:
		return normaliseRows(x)
	}
	return core.Matrix{}, fmt.Errorf("unknown metric %d", int(m))
}

// normaliseRows returns a copy of x with every row scaled to unit L2 norm (norm
// summed in float64), or a *ZeroRowError for the first row of zeros.
func normaliseRows(x core.Matrix) (core.Matrix, error) {
	out := core.Matrix{N: x.N, D: x.D, Data: make([]float32, len(x.Data))}
	for i := 0; i < x.N; i++ {
		a := x.Data[i*x.D : (i+1)*x.D]
		var s float64
		for _, v := range a {
			s += float64(v) * float64(v)
		}
		if s == 0 {
			return core.Matrix{}, &ZeroRowError{Row: i}
		}
		inv := 1 / math.Sqrt(s)
		b := out.Data[i*x.D : (i+1)*x.D]
		for j, v := range a {
			b[j] = float32(float64(v) * inv)
		}
	}
	return out, nil
}

// exactDist2 is the squared Euclidean distance between a and b (same length),
// accumulated in float64 and rounded once. It is the reference every reported
// distance of the exact search goes through, so that duplicates get exactly 0.
func exactDist2(a, b []float32) float32 {
	b = b[:len(a)]
	var s0, s1 float64
	j := 0
	for ; j+2 <= len(a); j += 2 {
		d0 := float64(a[j]) - float64(b[j])
		d1 := float64(a[j+1]) - float64(b[j+1])
		s0 += d0 * d0
		s1 += d1 * d1
	}
	if j < len(a) {
		d := float64(a[j]) - float64(b[j])
		s0 += d * d
	}
	return float32(s0 + s1)
}

// dist2 returns the squared Euclidean distance between a and b, which must
// have the same length. It is written with four accumulators in a fixed order
// so that dist2(a, b) and dist2(b, a) are the same bits on every call, and
// so that dist2x4's SSE kernel (one accumulator lane per position mod 4) can
// give the same bits: accumulator l sums the squares of positions ≡ l
// (mod 4) of the first 4⌊n/4⌋, the rest go to s0 one by one, and the result
// is (s0 + s1) + (s2 + s3). The float32 conversions round every product
// before it is added: Go may otherwise fuse a multiply and an add on some
// processors (the language specification allows it), which would change
// the bits between machines.
func dist2(a, b []float32) float32 {
	var s0, s1, s2, s3 float32
	n := len(a)
	b = b[:n]
	i := 0
	for ; i+4 <= n; i += 4 {
		d0 := a[i] - b[i]
		d1 := a[i+1] - b[i+1]
		d2 := a[i+2] - b[i+2]
		d3 := a[i+3] - b[i+3]
		s0 += float32(d0 * d0)
		s1 += float32(d1 * d1)
		s2 += float32(d2 * d2)
		s3 += float32(d3 * d3)
	}
	for ; i < n; i++ {
		d := a[i] - b[i]
		s0 += float32(d * d)
	}
	return (s0 + s1) + (s2 + s3)
}
