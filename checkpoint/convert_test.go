package checkpoint

import (
	"bytes"
	"math"
	"slices"
	"strings"
	"testing"
)

// TestConvertKnownBytes compares encodings with hand-worked little-endian
// IEEE 754 / two's-complement bytes (1.0 = 0x3FF0000000000000 in binary64,
// 0x3F800000 in binary32: IEEE 754-2008 §3.4 layout; -2 = 0xFFFFFFFE).
func TestConvertKnownBytes(t *testing.T) {
	tests := []struct {
		name string
		got  []byte
		want []byte
	}{
		{"float64 1", EncodeValues([]float64{1}), []byte{0, 0, 0, 0, 0, 0, 0xF0, 0x3F}},
		{"float64 -2", EncodeValues([]float64{-2}), []byte{0, 0, 0, 0, 0, 0, 0, 0xC0}},
		{"float32 1", EncodeValues([]float32{1}), []byte{0, 0, 0x80, 0x3F}},
		{"int32 -2", EncodeValues([]int32{-2}), []byte{0xFE, 0xFF, 0xFF, 0xFF}},
		{"int64 258", EncodeValues([]int64{258}), []byte{2, 1, 0, 0, 0, 0, 0, 0}},
		{"uint64 max", EncodeValues([]uint64{math.MaxUint64}), bytes.Repeat([]byte{0xFF}, 8)},
		{"empty", EncodeValues[float64](nil), []byte{}},
	}
	for _, tc := range tests {
		if !bytes.Equal(tc.got, tc.want) {
			t.Errorf("%s: % x, want % x", tc.name, tc.got, tc.want)
		}
	}
}

// TestConvertRoundTrip checks bit-exact round trips, including values a
// resumed optimisation must keep exactly: signed zero, subnormals, NaN
// payloads, infinities.
func TestConvertRoundTrip(t *testing.T) {
	f64 := []float64{0, math.Copysign(0, -1), math.SmallestNonzeroFloat64, math.MaxFloat64,
		math.Inf(-1), math.Float64frombits(0x7FF8000000000123), 1.0 / 3}
	g64, err := DecodeValues[float64](EncodeValues(f64))
	if err != nil {
		t.Fatal(err)
	}
	for i := range f64 {
		if math.Float64bits(g64[i]) != math.Float64bits(f64[i]) {
			t.Errorf("float64 %d: %x, want %x", i, math.Float64bits(g64[i]), math.Float64bits(f64[i]))
		}
	}
	f32 := []float32{0, float32(math.Copysign(0, -1)), math.SmallestNonzeroFloat32, math.Float32frombits(0x7FC00123), 1.0 / 3}
	g32, err := DecodeValues[float32](EncodeValues(f32))
	if err != nil {
		t.Fatal(err)
	}
	for i := range f32 {
		if math.Float32bits(g32[i]) != math.Float32bits(f32[i]) {
			t.Errorf("float32 %d: %x, want %x", i, math.Float32bits(g32[i]), math.Float32bits(f32[i]))
		}
	}
	i32 := []int32{math.MinInt32, -1, 0, 1, math.MaxInt32}
	if g, err := DecodeValues[int32](EncodeValues(i32)); err != nil || !slices.Equal(g, i32) {
		t.Errorf("int32: %v %v", g, err)
	}
	i64 := []int64{math.MinInt64, -1, 0, 1, math.MaxInt64}
	if g, err := DecodeValues[int64](EncodeValues(i64)); err != nil || !slices.Equal(g, i64) {
		t.Errorf("int64: %v %v", g, err)
	}
	u64 := []uint64{0, 1, math.MaxUint64}
	if g, err := DecodeValues[uint64](EncodeValues(u64)); err != nil || !slices.Equal(g, u64) {
		t.Errorf("uint64: %v %v", g, err)
	}
}

func TestConvertBadLength(t *testing.T) {
	tests := []struct {
		name string
		fn   func([]byte) error
		bad  []int
	}{
		{"float64", func(b []byte) error { _, err := DecodeValues[float64](b); return err }, []int{1, 7, 9, 15}},
		{"float32", func(b []byte) error { _, err := DecodeValues[float32](b); return err }, []int{1, 3, 5}},
		{"int32", func(b []byte) error { _, err := DecodeValues[int32](b); return err }, []int{2, 6}},
		{"int64", func(b []byte) error { _, err := DecodeValues[int64](b); return err }, []int{4, 12}},
		{"uint64", func(b []byte) error { _, err := DecodeValues[uint64](b); return err }, []int{3, 17}},
	}
	for _, tc := range tests {
		for _, n := range tc.bad {
			if err := tc.fn(make([]byte, n)); err == nil {
				t.Errorf("%s: %d bytes accepted", tc.name, n)
			}
		}
		if err := tc.fn(make([]byte, 16)); err != nil {
			t.Errorf("%s: 16 bytes refused: %v", tc.name, err)
		}
	}
}

// TestView checks that View gives the same bytes as the copying encoders
// (reference: the encoders above, themselves checked against hand-written
// little-endian bytes) for every element type, empty slices included.
func TestView(t *testing.T) {
	for _, tc := range []struct {
		name      string
		view, enc []byte
	}{
		{"int32", View([]int32{1, -2, 1 << 30}), EncodeValues([]int32{1, -2, 1 << 30})},
		{"int64", View([]int64{-1, 1 << 40}), EncodeValues([]int64{-1, 1 << 40})},
		{"uint64", View([]uint64{7, 1 << 63}), EncodeValues([]uint64{7, 1 << 63})},
		{"float32", View([]float32{1.5, float32(math.Inf(-1))}), EncodeValues([]float32{1.5, float32(math.Inf(-1))})},
		{"float64", View([]float64{math.Pi, -0.0}), EncodeValues([]float64{math.Pi, -0.0})},
		{"empty", View([]float64{}), EncodeValues[float64](nil)},
	} {
		if !bytes.Equal(tc.view, tc.enc) {
			t.Errorf("%s: View % x, encoder % x", tc.name, tc.view, tc.enc)
		}
	}
}

// TestSectionValues checks the lookup-and-decode helper: the values of a
// present section, and errors naming the section when it is missing or its
// length does not fit the type.
func TestSectionValues(t *testing.T) {
	secs := []Section{
		{Name: "y", Data: EncodeValues([]float64{0.5, -1})},
		{Name: "odd", Data: []byte{1, 2, 3}},
	}
	if v, err := SectionValues[float64](secs, "y"); err != nil || !slices.Equal(v, []float64{0.5, -1}) {
		t.Errorf("y: %v, %v", v, err)
	}
	for _, tc := range []struct{ name, want string }{
		{"missing", `section "missing" missing`},
		{"odd", `section "odd": 3 bytes cannot hold int32 values`},
	} {
		if _, err := SectionValues[int32](secs, tc.name); err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: error %v, want one saying %q", tc.name, err, tc.want)
		}
	}
}

// TestShareValues checks ShareValues against DecodeValues (itself checked
// against hand-written bytes above): the same values for every element type,
// memory shared with the bytes when they are aligned on a little-endian
// host, a copy when they are not, and DecodeValues' error for a length that
// does not fit the type.
func TestShareValues(t *testing.T) {
	want := []float64{math.Pi, -0.0, math.Inf(1), 1e-310}
	buf := make([]byte, 8*len(want)+1) // Go aligns a fresh allocation to 8 bytes
	copy(buf, EncodeValues(want))
	misaligned := make([]byte, 8*len(want)+1)
	copy(misaligned[1:], buf[:8*len(want)])
	for _, tc := range []struct {
		name  string
		b     []byte
		share bool
	}{
		{"aligned", buf[:8*len(want)], hostLittleEndian},
		{"misaligned", misaligned[1:], false},
	} {
		b := tc.b
		got, err := ShareValues[float64](b)
		if err != nil {
			t.Fatalf("%s: %v", tc.name, err)
		}
		dec, _ := DecodeValues[float64](b)
		for k := range dec {
			if math.Float64bits(got[k]) != math.Float64bits(dec[k]) {
				t.Errorf("%s: value %d is %v, DecodeValues gives %v", tc.name, k, got[k], dec[k])
			}
		}
		b[0] ^= 1 // shared memory sees the change, a copy does not
		if changed := math.Float64bits(got[0]) != math.Float64bits(dec[0]); changed != tc.share {
			t.Errorf("%s: shared %v, want %v", tc.name, changed, tc.share)
		}
		b[0] ^= 1
	}
	i32, err := ShareValues[int32](EncodeValues([]int32{-2, 7}))
	if err != nil || !slices.Equal(i32, []int32{-2, 7}) {
		t.Errorf("int32: %v, %v", i32, err)
	}
	if v, err := ShareValues[int64](nil); err != nil || len(v) != 0 {
		t.Errorf("empty: %v, %v", v, err)
	}
	if _, err := ShareValues[int32]([]byte{1, 2, 3, 4, 5}); err == nil || !strings.Contains(err.Error(), "5 bytes cannot hold int32 values") {
		t.Errorf("odd length: error %v", err)
	}
	secs := []Section{{Name: "v", Data: EncodeValues([]float32{1.5})}}
	if v, err := SharedSectionValues[float32](secs, "v"); err != nil || !slices.Equal(v, []float32{1.5}) {
		t.Errorf("SharedSectionValues: %v, %v", v, err)
	}
	if _, err := SharedSectionValues[float32](secs, "w"); err == nil || !strings.Contains(err.Error(), `section "w" missing`) {
		t.Errorf("missing section: error %v", err)
	}
}
