package figure

import (
	"image/color"
	"math"
	"slices"
)

// RampSize is the number of colours of the continuous scale.
const RampSize = 256

// ramp is the continuous scale, from low values (light) to high (dark).
var ramp = makeRamp(RampSize)

// rampPoint returns the point u ∈ [0, 1] of the scale's defining curve in
// OKLCH: lightness falls linearly from 0.88 to 0.28 while the hue turns from
// 105° (a pale yellow-green) through green and teal to 300° (violet); the
// chroma swells from 0.05 at the ends to 0.15 in the middle, capped at 95 %
// of what the sRGB gamut allows.
func rampPoint(u float64) oklab {
	l := 0.88 - 0.60*u
	h := 105 + 195*u
	c := math.Min(0.05+0.10*math.Sin(math.Pi*u), 0.95*maxChroma(l, h))
	return oklch(l, c, h)
}

// makeRamp samples the curve of rampPoint at n points equally spaced in
// OKLab distance along it (the curve's arc length, measured on 4,096 pieces),
// so equal steps of a value are equal steps of perceived colour.
func makeRamp(n int) []color.RGBA {
	const pieces = 4096
	pts := make([]oklab, pieces+1)
	arc := make([]float64, pieces+1)
	for i := range pts {
		pts[i] = rampPoint(float64(i) / pieces)
		if i > 0 {
			p, q := pts[i-1], pts[i]
			arc[i] = arc[i-1] + math.Sqrt((p.L-q.L)*(p.L-q.L)+(p.A-q.A)*(p.A-q.A)+(p.B-q.B)*(p.B-q.B))
		}
	}
	out := make([]color.RGBA, n)
	j := 0
	for k := range n {
		target := arc[pieces] * float64(k) / float64(n-1)
		for j < pieces-1 && arc[j+1] < target {
			j++
		}
		t := 0.0
		if d := arc[j+1] - arc[j]; d > 0 {
			t = math.Min(1, math.Max(0, (target-arc[j])/d))
		}
		p, q := pts[j], pts[j+1]
		out[k] = oklab{p.L + t*(q.L-p.L), p.A + t*(q.A-p.A), p.B + t*(q.B-p.B)}.rgba()
	}
	return out
}

// Ramp returns the RampSize colours of the continuous scale, low values first.
func Ramp() []color.RGBA { return slices.Clone(ramp) }

// Scale maps numbers to the continuous colour scale: values at or below Lo
// take the first colour, at or above Hi the last, others in proportion.
type Scale struct {
	Lo, Hi float64
	// Below and Above count the values clipped to Lo and Hi, Missing the
	// NaN and infinite values (drawn in the Missing colour).
	Below, Above, Missing int
	// Clip says how Lo and Hi were chosen, for the colour bar.
	Clip string
}

// Clip percentiles of NewScale.
const (
	LowPercentile  = 1
	HighPercentile = 99
)

// NewScale returns the scale of values clipped to their LowPercentile-th and
// HighPercentile-th percentiles, computed over the non-NaN values by linear
// interpolation between order statistics (x at rank p/100·(n−1), counted
// from 0: common practice). With no value it returns the range 0–1.
func NewScale(values []float64) Scale {
	var s Scale
	sorted := make([]float64, 0, len(values))
	for _, v := range values {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			s.Missing++
			continue
		}
		sorted = append(sorted, v)
	}
	s.Clip = "clipped to the 1st–99th percentile"
	if len(sorted) == 0 {
		s.Lo, s.Hi = 0, 1
		return s
	}
	slices.Sort(sorted)
	s.Lo, s.Hi = percentile(sorted, LowPercentile), percentile(sorted, HighPercentile)
	for _, v := range sorted {
		if v < s.Lo {
			s.Below++
		} else if v > s.Hi {
			s.Above++
		}
	}
	return s
}

// percentile returns the p-th percentile of the sorted values.
func percentile(sorted []float64, p float64) float64 {
	r := p / 100 * float64(len(sorted)-1)
	i := int(math.Floor(r))
	if i >= len(sorted)-1 {
		return sorted[len(sorted)-1]
	}
	return sorted[i] + (r-float64(i))*(sorted[i+1]-sorted[i])
}

// Position returns where v falls on the scale, in [0, 1]; a constant
// column (Lo = Hi) sits in the middle. v must not be NaN.
func (s Scale) Position(v float64) float64 {
	if s.Hi <= s.Lo {
		return 0.5
	}
	return math.Min(1, math.Max(0, (v-s.Lo)/(s.Hi-s.Lo)))
}

// Colour returns the colour of v, or Missing for NaN and ±Inf.
func (s Scale) Colour(v float64) color.RGBA {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return Missing
	}
	return ramp[int(math.Round(s.Position(v)*(RampSize-1)))]
}
