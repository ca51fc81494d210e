package figure

import (
	"bytes"
	"fmt"
	"image"
	"image/color"
	"image/png"
	"io"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
)

// blobs makes n 2-D points in g Gaussian groups with labels "g0", "g1", …
// (invented data, for drawing only).
func blobs(n, g int, seed uint64) ([]float64, []string) {
	rng := rand.New(rand.NewPCG(seed, 1))
	y := make([]float64, 2*n)
	labels := make([]string, n)
	for i := range n {
		c := i % g
		y[2*i] = 10*math.Cos(float64(c)) + rng.NormFloat64()
		y[2*i+1] = 10*math.Sin(float64(c)) + rng.NormFloat64()
		labels[i] = fmt.Sprintf("g%d", c)
	}
	return y, labels
}

// labelled is the map of y coloured by labels (nil: uncoloured).
func labelled(y []float64, dims int, labels []string) Map {
	return Map{Y: y, Dims: dims, Colour: Categories("group", labels)}
}

func render(t *testing.T, y []float64, dims int, labels []string, opt MapOptions) ([]byte, *image.RGBA) {
	t.Helper()
	return renderMap(t, labelled(y, dims, labels), opt)
}

func renderMap(t *testing.T, m Map, opt MapOptions) ([]byte, *image.RGBA) {
	t.Helper()
	var buf bytes.Buffer
	if _, err := DrawMap(&buf, m, opt); err != nil {
		t.Fatalf("DrawMap: %v", err)
	}
	img, err := png.Decode(bytes.NewReader(buf.Bytes()))
	if err != nil {
		t.Fatalf("decoding the PNG: %v", err)
	}
	rgba := image.NewRGBA(img.Bounds())
	for yy := img.Bounds().Min.Y; yy < img.Bounds().Max.Y; yy++ {
		for xx := img.Bounds().Min.X; xx < img.Bounds().Max.X; xx++ {
			rgba.Set(xx, yy, img.At(xx, yy))
		}
	}
	return buf.Bytes(), rgba
}

func colours(img *image.RGBA) map[color.RGBA]int {
	out := map[color.RGBA]int{}
	b := img.Bounds()
	for y := b.Min.Y; y < b.Max.Y; y++ {
		for x := b.Min.X; x < b.Max.X; x++ {
			out[img.RGBAAt(x, y)]++
		}
	}
	return out
}

func TestDrawMapSizesAndLegend(t *testing.T) {
	tests := []struct {
		name       string
		n, groups  int
		opt        MapOptions
		wantW      int
		wantH      int
		wantLegend int // distinct labels
	}{
		{"default size", 2000, 5, MapOptions{}, 1600, 1600, 5},
		{"wide", 500, 3, MapOptions{Width: 1000, Height: 700, Title: "wide"}, 1000, 700, 3},
		{"many labels cycle colours", 3000, 30, MapOptions{Width: 800, Height: 800}, 800, 800, 30},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			y, labels := blobs(tc.n, tc.groups, 3)
			_, img := render(t, y, 2, labels, tc.opt)
			if b := img.Bounds(); b.Dx() != tc.wantW || b.Dy() != tc.wantH {
				t.Fatalf("picture is %d×%d, want %d×%d", b.Dx(), b.Dy(), tc.wantW, tc.wantH)
			}
			leg, codes := Legend(labels)
			if len(leg) != tc.wantLegend {
				t.Fatalf("legend has %d entries, want %d", len(leg), tc.wantLegend)
			}
			for i, l := range labels {
				if leg[codes[i]].Label != l {
					t.Fatalf("point %d has code %d (%q), want its label %q", i, codes[i], leg[codes[i]].Label, l)
				}
			}
			// Every legend swatch is drawn in its exact colour (points are blended
			// with white, swatches are not).
			have := colours(img)
			palette := Palette()
			for _, e := range leg[:min(len(leg), len(palette))] {
				if have[e.Colour] < 25 {
					t.Errorf("colour %v of label %q found on %d pixels, want a swatch", e.Colour, e.Label, have[e.Colour])
				}
			}
			if tc.groups > len(palette) && leg[len(palette)].Colour != palette[0] {
				t.Errorf("label %d has colour %v, want palette to repeat from %v", len(palette), leg[len(palette)].Colour, palette[0])
			}
		})
	}
}

func TestDrawMapDeterministic(t *testing.T) {
	y, labels := blobs(5000, 4, 9)
	a, _ := render(t, y, 2, labels, MapOptions{Width: 600, Height: 600})
	b, _ := render(t, y, 2, labels, MapOptions{Width: 600, Height: 600})
	if !bytes.Equal(a, b) {
		t.Fatal("two drawings of the same map differ")
	}
}

func TestDrawMapGreyWithoutLabels(t *testing.T) {
	y, _ := blobs(3000, 3, 4)
	_, img := render(t, y, 2, nil, MapOptions{Width: 500, Height: 500})
	dark := 0
	for c, k := range colours(img) {
		if c.R != c.G || c.G != c.B {
			t.Fatalf("found coloured pixel %v in an unlabelled map", c)
		}
		if c.R < 0x80 {
			dark += k
		}
	}
	if dark < 1000 {
		t.Fatalf("only %d dark pixels: points not drawn?", dark)
	}
}

// A 3-D map is drawn by its first two axes: below the header the picture must
// equal the drawing of the 2-D map made of those axes.
func TestDrawMap3DUsesFirstTwoAxes(t *testing.T) {
	y2, labels := blobs(2000, 4, 5)
	rng := rand.New(rand.NewPCG(5, 5))
	y3 := make([]float64, 0, 3*2000)
	for i := range 2000 {
		y3 = append(y3, y2[2*i], y2[2*i+1], 100*rng.NormFloat64())
	}
	_, a := render(t, y2, 2, labels, MapOptions{Width: 600, Height: 600})
	_, b := render(t, y3, 3, labels, MapOptions{Width: 600, Height: 600})
	diffHeader, diffBody := 0, 0
	for yy := range 600 {
		for xx := range 600 {
			if a.RGBAAt(xx, yy) != b.RGBAAt(xx, yy) {
				if yy < 110 {
					diffHeader++
				} else {
					diffBody++
				}
			}
		}
	}
	if diffBody != 0 {
		t.Errorf("3-D map differs from its first two axes on %d pixels below the header", diffBody)
	}
	if diffHeader == 0 {
		t.Errorf("3-D caption missing: headers are identical")
	}
}

// Density: a pixel where many points fall is more opaque than a pixel holding
// one point of the same colour.
func TestDrawMapDensityShading(t *testing.T) {
	n := 200_000 // large enough for single-pixel points
	y := make([]float64, 2*n)
	rng := rand.New(rand.NewPCG(1, 2))
	for i := range n {
		if i < n/2 { // half the points on one spot
			y[2*i], y[2*i+1] = 0, 0
		} else { // the rest spread thinly
			y[2*i], y[2*i+1] = 100*rng.Float64(), 100*rng.Float64()
		}
	}
	_, img := render(t, y, 2, nil, MapOptions{Width: 600, Height: 600})
	darkest, lightest := 255, 0
	for yy := 120; yy < 600; yy++ { // below the header's text
		for xx := range 600 {
			c := img.RGBAAt(xx, yy)
			if c == Paper || c == Frame {
				continue
			}
			darkest = min(darkest, int(c.R))
			lightest = max(lightest, int(c.R))
		}
	}
	if darkest != int(Plain.R) {
		t.Errorf("crowded pixel has grey %d, want the full point colour %d", darkest, Plain.R)
	}
	if lightest < darkest+40 {
		t.Errorf("lightest point pixel has grey %d, want lone points clearly fainter than crowded ones (%d)", lightest, darkest)
	}
}

func TestDrawMapErrors(t *testing.T) {
	tests := []struct {
		name   string
		y      []float64
		dims   int
		labels []string
		opt    MapOptions
		want   string
	}{
		{"dims 4", make([]float64, 8), 4, nil, MapOptions{}, "dims = 4"},
		{"ragged", make([]float64, 5), 2, nil, MapOptions{}, "not a multiple"},
		{"labels", make([]float64, 6), 2, []string{"a"}, MapOptions{}, "1 labels for 3 points"},
		{"nan", []float64{0, 0, math.NaN(), 1}, 2, nil, MapOptions{}, "point 1 has a non-finite"},
		{"tiny", make([]float64, 4), 2, nil, MapOptions{Width: 100}, "smaller than 400"},
		{"point size", make([]float64, 4), 2, nil, MapOptions{PointSize: -1}, "point size -1"},
		{"opacity", make([]float64, 4), 2, nil, MapOptions{Opacity: 1.5}, "opacity 1.5"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := DrawMap(&bytes.Buffer{}, labelled(tc.y, tc.dims, tc.labels), tc.opt)
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Fatalf("error %v, want one containing %q", err, tc.want)
			}
		})
	}
}

func TestThousands(t *testing.T) {
	tests := []struct {
		n    int
		want string
	}{{0, "0"}, {999, "999"}, {1000, "1,000"}, {70000, "70,000"}, {1000000, "1,000,000"}, {123456789, "123,456,789"}}
	for _, tc := range tests {
		if got := thousands(tc.n); got != tc.want {
			t.Errorf("thousands(%d) = %q, want %q", tc.n, got, tc.want)
		}
	}
}

func ExampleDrawMap() {
	// Four points of two labels, drawn on a 500×400 picture.
	y := []float64{0, 0, 1, 0, 5, 5, 6, 5}
	labels := []string{"north", "north", "south", "south"}
	var buf bytes.Buffer
	m := Map{Y: y, Dims: 2, Colour: Categories("side", labels)}
	if _, err := DrawMap(&buf, m, MapOptions{Width: 500, Height: 400, Title: "two pairs"}); err != nil {
		fmt.Println(err)
		return
	}
	cfg, _ := png.DecodeConfig(&buf)
	fmt.Println(cfg.Width, cfg.Height)
	for _, e := range m.Colour.Groups {
		fmt.Println(e.Label, e.Count)
	}
	// Output:
	// 500 400
	// north 2
	// south 2
}

func BenchmarkDrawMapMillion(b *testing.B) {
	y, labels := blobs(1_000_000, 12, 1)
	m := labelled(y, 2, labels)
	for b.Loop() {
		if _, err := DrawMap(io.Discard, m, MapOptions{}); err != nil {
			b.Fatal(err)
		}
	}
}
