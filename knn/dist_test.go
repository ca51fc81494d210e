package knn

import (
	"math"
	"math/rand/v2"
	"testing"
)

// laneDist2 is the order dist2 documents, written out term by term: lane
// l sums positions ≡ l (mod 4) of the first 4⌊n/4⌋, the rest go to lane 0,
// and the lanes are combined as (s0 + s1) + (s2 + s3).
func laneDist2(a, b []float32) float32 {
	var s [4]float32
	full := len(a) / 4 * 4
	for i := range full {
		d := a[i] - b[i]
		s[i%4] += float32(d * d)
	}
	for i := full; i < len(a); i++ {
		d := a[i] - b[i]
		s[0] += float32(d * d)
	}
	return (s[0] + s[1]) + (s[2] + s[3])
}

// TestDist2x4SameBits: the SSE kernel (or the pure-Go fallback under the
// purego tag) gives dist2's bits for every length from 0 to 130 and values
// of very different magnitudes, and dist2 follows its documented order.
func TestDist2x4SameBits(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	value := func(kind int) float32 {
		switch kind {
		case 0:
			return float32(rng.NormFloat64())
		case 1:
			return float32(rng.NormFloat64() * 1e15)
		case 2:
			return float32(rng.NormFloat64() * 1e-15)
		default:
			return float32(rng.IntN(5)) // many exact ties and zero differences
		}
	}
	for n := 0; n <= 130; n++ {
		for kind := range 4 {
			a := make([]float32, n)
			var b [4][]float32
			for i := range a {
				a[i] = value(kind)
			}
			for j := range b {
				b[j] = make([]float32, n+j) // longer than a is allowed
				for i := range b[j] {
					b[j][i] = value(kind)
				}
			}
			copy(b[3], a) // a duplicate: exactly 0
			var got [4]float32
			got[0], got[1], got[2], got[3] = dist2x4(a, b[0], b[1], b[2], b[3])
			for j := range b {
				want := dist2(a, b[j][:n])
				if math.Float32bits(got[j]) != math.Float32bits(want) {
					t.Fatalf("n %d kind %d b%d: dist2x4 %v (%08x), dist2 %v (%08x)", n, kind, j, got[j], math.Float32bits(got[j]), want, math.Float32bits(want))
				}
				if lane := laneDist2(a, b[j][:n]); math.Float32bits(lane) != math.Float32bits(want) {
					t.Fatalf("n %d kind %d b%d: dist2 %v, its documented order %v", n, kind, j, want, lane)
				}
				// An independent computation in float64: the float32 sums
				// agree to a relative 1e-5 (common practice for n ≤ 130
				// float32 terms of one sign).
				var s float64
				for i := range n {
					d := float64(a[i]) - float64(b[j][i])
					s += d * d
				}
				if math.Abs(float64(want)-s) > 1e-5*s {
					t.Fatalf("n %d kind %d b%d: dist2 %v, float64 sum %v", n, kind, j, want, s)
				}
			}
			if got[3] != 0 {
				t.Fatalf("n %d kind %d: distance to a duplicate is %v", n, kind, got[3])
			}
		}
	}
}

// TestDist2HandWorked: a = (1, 2, 3, 4, 5), b = 0 gives lanes 1+25, 4, 9
// and 16, so (26 + 4) + (9 + 16) = 55 = 1² + … + 5².
func TestDist2HandWorked(t *testing.T) {
	a := []float32{1, 2, 3, 4, 5}
	z := make([]float32, 5)
	if d := dist2(a, z); d != 55 {
		t.Fatalf("dist2 = %v, want 55", d)
	}
	d0, d1, d2, d3 := dist2x4(a, z, a, z, a)
	if d0 != 55 || d1 != 0 || d2 != 55 || d3 != 0 {
		t.Fatalf("dist2x4 = %v %v %v %v, want 55 0 55 0", d0, d1, d2, d3)
	}
}

// BenchmarkDist2: one row against 4 others, 50 columns, one at a time
// (dist2) and four at a time (dist2x4).
func BenchmarkDist2(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 2))
	rows := make([][]float32, 5)
	for j := range rows {
		rows[j] = make([]float32, 50)
		for i := range rows[j] {
			rows[j][i] = float32(rng.NormFloat64())
		}
	}
	var sink float32
	b.Run("one", func(b *testing.B) {
		for range b.N {
			sink += dist2(rows[0], rows[1]) + dist2(rows[0], rows[2]) + dist2(rows[0], rows[3]) + dist2(rows[0], rows[4])
		}
	})
	b.Run("four", func(b *testing.B) {
		for range b.N {
			d0, d1, d2, d3 := dist2x4(rows[0], rows[1], rows[2], rows[3], rows[4])
			sink += d0 + d1 + d2 + d3
		}
	})
	_ = sink
}
