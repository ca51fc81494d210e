package figure

import (
	"image"
	"image/draw"
	"testing"

	"golang.org/x/image/font"
	"golang.org/x/image/font/opentype"
	"golang.org/x/image/math/fixed"
)

// paper returns a white w×h picture.
func paper(w, h int) *image.RGBA {
	img := image.NewRGBA(image.Rect(0, 0, w, h))
	draw.Draw(img, img.Bounds(), image.NewUniform(Paper), image.Point{}, draw.Src)
	return img
}

// direct draws s straight through golang.org/x/image/font/opentype, the
// reference the figures' text must match.
func direct(t *testing.T, s string, st style, x, y int) *image.RGBA {
	t.Helper()
	face, err := opentype.NewFace(st.font, &opentype.FaceOptions{Size: st.px, DPI: 72, Hinting: font.HintingFull})
	if err != nil {
		t.Fatal(err)
	}
	img := paper(400, 60)
	d := font.Drawer{Dst: img, Src: image.NewUniform(st.colour), Face: face, Dot: fixed.Point26_6{X: fixed.I(x), Y: fixed.I(y) + face.Metrics().Ascent}}
	d.DrawString(s)
	return img
}

func differing(a, b *image.RGBA) int {
	n := 0
	for i := range a.Pix {
		if a.Pix[i] != b.Pix[i] {
			n++
		}
	}
	return n
}

func TestGreekRendersAsGlyphs(t *testing.T) {
	const label = "γδ T cell"
	st := style{regular, 24, Ink}
	ts := newTypesetter()
	got := paper(400, 60)
	ts.draw(got, 10, 10, label, st)
	if n := differing(got, direct(t, label, st, 10, 10)); n != 0 {
		t.Errorf("%q differs from the font's own rendering on %d bytes", label, n)
	}
	if l := ts.lacking(); len(l) != 0 {
		t.Errorf("font lacks %q, want Greek covered", string(l))
	}
	if differing(got, direct(t, "?? T cell", st, 10, 10)) == 0 {
		t.Error("the Greek letters are drawn as question marks")
	}
	if w := ts.width(label, st); w < 60 || w > 200 {
		t.Errorf("width of %q is %d pixels", label, w)
	}
}

func TestMissingGlyphIsABox(t *testing.T) {
	st := style{regular, 24, Ink}
	ts := newTypesetter()
	img := paper(400, 60)
	ts.draw(img, 10, 10, "x日y", st)
	if l := ts.lacking(); len(l) != 1 || l[0] != '日' {
		t.Fatalf("lacking %q, want 日", string(l))
	}
	// The box sits between the x and the y: its left and right edges are
	// drawn in ink over the full height of a capital.
	ink := 0
	for y := 10; y < 50; y++ {
		for x := 24; x < 40; x++ {
			if img.RGBAAt(x, y) == Ink {
				ink++
			}
		}
	}
	if ink < 30 {
		t.Errorf("only %d ink pixels where the box should be", ink)
	}
}

func TestFitCutsLongLabels(t *testing.T) {
	ts := newTypesetter()
	st := style{regular, 18, Ink}
	long := "an extremely long population name that will not fit"
	got := ts.fit(long, 120, st)
	if ts.width(got, st) > 120 || got[len(got)-len("…"):] != "…" {
		t.Errorf("fit gave %q (%d px)", got, ts.width(got, st))
	}
	if got := ts.fit("short", 120, st); got != "short" {
		t.Errorf("fit changed a short text to %q", got)
	}
}
