package figure

import (
	"bytes"
	"image/png"
	"testing"
)

// TestPlacedMap draws rows placed into a reference: the reference's pixels
// are the Reference grey, the placed rows' their label colour, and the
// legend counts only the placed rows per label.
func TestPlacedMap(t *testing.T) {
	ref := []float64{0, 0, 10, 10, 0, 10, 10, 0}
	placed := []float64{5, 5, 2, 8}
	m, err := PlacedMap(ref, placed, 2, "voted", []string{"a", "b"})
	if err != nil {
		t.Fatal(err)
	}
	if len(m.Y) != 12 || m.Placed[3] || !m.Placed[4] || m.Colour.NoValue() != 0 {
		t.Fatalf("map %+v", m)
	}
	if g := m.Colour.Groups; len(g) != 2 || g[0].Count != 1 || g[1].Count != 1 {
		t.Fatalf("groups %+v, want a and b once each", g)
	}
	var buf bytes.Buffer
	if _, err := DrawMap(&buf, m, MapOptions{Width: 500, Height: 500}); err != nil {
		t.Fatal(err)
	}
	img, err := png.Decode(&buf)
	if err != nil {
		t.Fatal(err)
	}
	seen := map[[3]uint32]bool{}
	b := img.Bounds()
	for y := b.Min.Y; y < b.Max.Y; y++ {
		for x := b.Min.X; x < b.Max.X; x++ {
			r, g, bl, _ := img.At(x, y).RGBA()
			seen[[3]uint32{r >> 8, g >> 8, bl >> 8}] = true
		}
	}
	for _, c := range append(Palette()[:2], Reference) {
		if !seen[[3]uint32{uint32(c.R), uint32(c.G), uint32(c.B)}] {
			t.Errorf("colour %v not in the picture", c)
		}
	}
	if _, err := PlacedMap(ref, placed, 2, "voted", []string{"a"}); err == nil {
		t.Error("one label for two placed rows was accepted")
	}
	if _, err := PlacedMap(ref[:3], placed, 2, "", nil); err == nil {
		t.Error("a reference of 3 values in 2-D was accepted")
	}
}
