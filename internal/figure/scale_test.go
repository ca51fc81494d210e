package figure

import (
	"math"
	"testing"
)

// The continuous scale's lightness falls steadily, and its steps are about
// equal in CIEDE2000 (an outside measure: the ramp is built in OKLab).
func TestRampIsUniformAndMonotonic(t *testing.T) {
	r := Ramp()
	if len(r) != RampSize {
		t.Fatalf("%d colours", len(r))
	}
	// After rounding to 8 bits (whose noise is about one step of the
	// ramp), OKLab lightness falls over every two steps; CIELAB L* (which
	// weighs chroma differently) over every five.
	for i := 2; i < len(r); i++ {
		if a, b := toOKLab(linear(r[i-2])).L, toOKLab(linear(r[i])).L; b >= a {
			t.Fatalf("OKLab L rises from %.4f to %.4f at colours %d–%d", a, b, i-2, i)
		}
		if i >= 5 {
			if a, b := toCIELab(r[i-5]).L, toCIELab(r[i]).L; b >= a {
				t.Fatalf("L* rises from %.2f to %.2f at colours %d–%d", a, b, i-5, i)
			}
		}
	}
	// Steps of 15 colours, so 8-bit rounding does not dominate.
	lo, hi := math.Inf(1), 0.0
	for i := 15; i < len(r); i += 15 {
		d := deltaE2000(toCIELab(r[i-15]), toCIELab(r[i]))
		lo, hi = math.Min(lo, d), math.Max(hi, d)
	}
	t.Logf("ΔE00 per 15 steps: %.2f to %.2f", lo, hi)
	if hi > 1.6*lo {
		t.Errorf("steps range from ΔE00 %.2f to %.2f, want within a factor 1.6", lo, hi)
	}
	if d := deltaE2000(toCIELab(r[0]), toCIELab(Paper)); d < 8 {
		t.Errorf("lowest colour %s is only ΔE00 %.1f from the paper", hex(r[0]), d)
	}
}

func TestNewScalePercentiles(t *testing.T) {
	// 0, 1, …, 100: by linear interpolation between order statistics the 1st
	// and 99th percentiles are 1 and 99 (rank p/100·(n−1) = 1 and 99).
	v := make([]float64, 0, 104)
	for i := range 101 {
		v = append(v, float64(i))
	}
	v = append(v, math.NaN(), math.Inf(1), math.NaN())
	s := NewScale(v)
	if s.Lo != 1 || s.Hi != 99 || s.Below != 1 || s.Above != 1 || s.Missing != 3 {
		t.Errorf("scale %+v, want 1–99, 1 below, 1 above, 3 missing", s)
	}
	if got := s.Colour(math.NaN()); got != Missing {
		t.Errorf("NaN has colour %s", hex(got))
	}
	if s.Colour(-5) != ramp[0] || s.Colour(500) != ramp[RampSize-1] || s.Colour(50) != ramp[128] {
		t.Error("clipped values do not take the ends of the scale")
	}
	// Interpolation between order statistics: 10 values 0…9, 99th percentile
	// at rank 8.91.
	s = NewScale([]float64{9, 8, 7, 6, 5, 4, 3, 2, 1, 0})
	if math.Abs(s.Hi-8.91) > 1e-12 || math.Abs(s.Lo-0.09) > 1e-12 {
		t.Errorf("scale of 0…9 is %g–%g, want 0.09–8.91", s.Lo, s.Hi)
	}
	if c := NewScale([]float64{4, 4, 4}); c.Position(4) != 0.5 {
		t.Errorf("a constant column sits at %g, want the middle", c.Position(4))
	}
	if e := NewScale(nil); e.Lo != 0 || e.Hi != 1 {
		t.Errorf("empty scale %+v", e)
	}
}

func TestNumber(t *testing.T) {
	tests := []struct {
		v    float64
		want string
	}{{0, "0"}, {3.14159, "3.142"}, {-0.0123456, "-0.01235"}, {123.6, "124"}, {123456, "123456"}, {2.5e8, "2.5e+08"}, {0.00001234, "1.23e-05"}}
	for _, tc := range tests {
		if got := Number(tc.v); got != tc.want {
			t.Errorf("Number(%g) = %q, want %q", tc.v, got, tc.want)
		}
	}
}
