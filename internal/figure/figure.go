package figure

import (
	"bufio"
	"fmt"
	"image"
	"image/color"
	"image/draw"
	"image/png"
	"io"
	"math"
	"slices"
	"sort"
)

// MapOptions controls DrawMap. The zero value gives a 1600×1600 picture titled
// "nightjar map".
type MapOptions struct {
	// Width and Height of the picture in pixels; 0 means 1600. Each must be at
	// least 400 when set.
	Width, Height int
	// Title is the first line of the picture; "" means "nightjar map". Text is
	// drawn with a 7×13 ASCII font: other characters show as '?'.
	Title string
	// Caption is an optional extra line under the title (data set, parameters…).
	Caption string
}

// palette holds 20 distinct colours, chosen by hand to stay apart from each other
// and from the white background; labels beyond 20 reuse them in order.
var palette = []color.RGBA{
	{0x1f, 0x5f, 0xbf, 0xff}, // blue
	{0xe0, 0x6a, 0x10, 0xff}, // orange
	{0x2a, 0x9d, 0x3c, 0xff}, // green
	{0xc8, 0x20, 0x30, 0xff}, // red
	{0x7b, 0x4f, 0xb8, 0xff}, // violet
	{0x8a, 0x5a, 0x2b, 0xff}, // brown
	{0xe0, 0x5c, 0xb4, 0xff}, // pink
	{0x55, 0x55, 0x55, 0xff}, // dark grey
	{0xa8, 0xa8, 0x18, 0xff}, // olive
	{0x10, 0xb0, 0xc8, 0xff}, // cyan
	{0x0b, 0x2f, 0x6b, 0xff}, // navy
	{0xf5, 0xb0, 0x3a, 0xff}, // amber
	{0x0e, 0x6b, 0x3b, 0xff}, // dark green
	{0xf0, 0x8a, 0x8a, 0xff}, // salmon
	{0x3d, 0x1e, 0x6e, 0xff}, // indigo
	{0xc4, 0x9a, 0x6c, 0xff}, // tan
	{0x8c, 0x0e, 0x5a, 0xff}, // plum
	{0x7c, 0xd6, 0x5a, 0xff}, // lime
	{0x6b, 0x10, 0x10, 0xff}, // maroon
	{0x6c, 0x9c, 0xd8, 0xff}, // sky
}

// unlabelled is the colour of points when DrawMap is given no labels.
var unlabelled = color.RGBA{0x40, 0x40, 0x40, 0xff}

// Palette returns a copy of the label colours, in the order they are given to
// labels (most frequent label first).
func Palette() []color.RGBA { return slices.Clone(palette) }

// LegendEntry is one line of the legend: a label, its number of points and its colour.
type LegendEntry struct {
	Label  string
	Count  int
	Colour color.RGBA
}

// Legend returns the legend DrawMap would draw for labels: distinct labels by
// decreasing count, ties by label text, with colours from Palette assigned in
// that order and repeating after len(Palette()). It returns nil for nil labels.
func Legend(labels []string) []LegendEntry {
	if labels == nil {
		return nil
	}
	counts := map[string]int{}
	for _, l := range labels {
		counts[l]++
	}
	out := make([]LegendEntry, 0, len(counts))
	for l, c := range counts {
		out = append(out, LegendEntry{Label: l, Count: c})
	}
	sort.Slice(out, func(a, b int) bool {
		if out[a].Count != out[b].Count {
			return out[a].Count > out[b].Count
		}
		return out[a].Label < out[b].Label
	})
	for i := range out {
		out[i].Colour = palette[i%len(palette)]
	}
	return out
}

// DrawMap writes a PNG picture of a map to w.
//
// y holds N points of dims coordinates each, row-major (len(y) = N·dims,
// dims ∈ {2, 3}); a 3-D map is drawn by its first two axes, and the caption says
// so. labels is nil (all points grey, no legend) or holds one label per point;
// points are coloured by label (see Legend) and the legend lists every label with
// its count, as many as fit, then a line telling how many more there are. The
// plot keeps equal scales on both axes and shows the whole map; axes carry no
// ticks because t-SNE coordinates have no units. Identical inputs give identical
// bytes. DrawMap returns an error for inconsistent sizes, a non-finite
// coordinate, a too small picture, or a failed write.
func DrawMap(w io.Writer, y []float64, dims int, labels []string, opt MapOptions) error {
	n, err := checkMap(y, dims, labels)
	if err != nil {
		return err
	}
	W, H := opt.Width, opt.Height
	if W == 0 {
		W = 1600
	}
	if H == 0 {
		H = 1600
	}
	if W < 400 || H < 400 {
		return fmt.Errorf("drawing map: picture %d×%d is smaller than 400×400", W, H)
	}
	title := opt.Title
	if title == "" {
		title = "nightjar map"
	}

	img := image.NewRGBA(image.Rect(0, 0, W, H))
	draw.Draw(img, img.Bounds(), image.NewUniform(color.White), image.Point{}, draw.Src)
	ly := newLayout(W, H)
	top := ly.header(img, title, opt.Caption, n, dims)
	legend := Legend(labels)
	pw, ph := W-2*ly.margin-ly.legendWidth(legend, W), H-top-ly.margin
	if pw < 100 || ph < 100 {
		return fmt.Errorf("drawing map: picture %d×%d leaves no room for the plot", W, H)
	}
	plot := image.Rect(ly.margin, top, ly.margin+pw, top+ph)
	plotPoints(img, plot, y, dims, labels, legend)
	drawFrame(img, plot)
	if legend != nil {
		ly.legend(img, legend, plot.Max.X+ly.margin, top)
	}

	bw := bufio.NewWriter(w)
	if err := png.Encode(bw, img); err != nil {
		return fmt.Errorf("writing map picture: %w", err)
	}
	if err := bw.Flush(); err != nil {
		return fmt.Errorf("writing map picture: %w", err)
	}
	return nil
}

// checkMap checks the sizes and values DrawMap is given and returns the number
// of points.
func checkMap(y []float64, dims int, labels []string) (int, error) {
	if dims != 2 && dims != 3 {
		return 0, fmt.Errorf("drawing map: dims = %d, want 2 or 3", dims)
	}
	if len(y)%dims != 0 {
		return 0, fmt.Errorf("drawing map: len(y) = %d is not a multiple of dims = %d", len(y), dims)
	}
	n := len(y) / dims
	if labels != nil && len(labels) != n {
		return 0, fmt.Errorf("drawing map: %d labels for %d points", len(labels), n)
	}
	for i, v := range y {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return 0, fmt.Errorf("drawing map: point %d has a non-finite coordinate %v", i/dims, v)
		}
	}
	return n, nil
}

// drawFrame draws the border of the plot rectangle r, its right and bottom edges
// included.
func drawFrame(img *image.RGBA, r image.Rectangle) {
	left, top, pw, ph := r.Min.X, r.Min.Y, r.Dx(), r.Dy()
	for i := 0; i <= pw; i++ {
		img.SetRGBA(left+i, top, frame)
		img.SetRGBA(left+i, top+ph, frame)
	}
	for i := 0; i <= ph; i++ {
		img.SetRGBA(left, top+i, frame)
		img.SetRGBA(left+pw, top+i, frame)
	}
}

// plotPoints rasterises the points into the rectangle r of img.
func plotPoints(img *image.RGBA, r image.Rectangle, y []float64, dims int, labels []string, legend []LegendEntry) {
	n := len(y) / dims
	if n == 0 {
		return
	}
	colourOf := map[string]color.RGBA{}
	for _, e := range legend {
		colourOf[e.Label] = e.Colour
	}
	px := newPixels(r.Dx(), r.Dy())
	tf := fitMap(y, dims, px.w, px.h)
	disc := splat(n, px.w, px.h)
	for i := range n {
		c := unlabelled
		if labels != nil {
			c = colourOf[labels[i]]
		}
		u, v := tf.at(y[i*dims], y[i*dims+1])
		px.add(u, v, disc, c)
	}
	px.paint(img, r.Min)
}

// plotPad is the empty border inside the plot, in pixels.
const plotPad = 8

// mapTransform maps map coordinates to plot pixels: one scale for both axes, as
// large as fits, map centred in the plot.
type mapTransform struct {
	scale, cx, cy, uw, uh float64
}

// fitMap returns the transform for the bounding box of axes 1 and 2 of y in a
// plot of w×h pixels.
func fitMap(y []float64, dims, w, h int) mapTransform {
	minX, maxX := math.Inf(1), math.Inf(-1)
	minY, maxY := math.Inf(1), math.Inf(-1)
	for i := range len(y) / dims {
		px, py := y[i*dims], y[i*dims+1]
		minX, maxX = math.Min(minX, px), math.Max(maxX, px)
		minY, maxY = math.Min(minY, py), math.Max(maxY, py)
	}
	uw, uh := float64(w-2*plotPad-1), float64(h-2*plotPad-1)
	scale := math.Inf(1)
	if dx := maxX - minX; dx > 0 {
		scale = uw / dx
	}
	if dy := maxY - minY; dy > 0 {
		scale = math.Min(scale, uh/dy)
	}
	if math.IsInf(scale, 1) { // all points on one spot
		scale = 1
	}
	return mapTransform{scale: scale, cx: (minX + maxX) / 2, cy: (minY + maxY) / 2, uw: uw, uh: uh}
}

// at returns the pixel of the point (x, y).
func (t mapTransform) at(x, y float64) (int, int) {
	u := int(math.Round(float64(plotPad) + t.uw/2 + (x-t.cx)*t.scale))
	v := int(math.Round(float64(plotPad) + t.uh/2 - (y-t.cy)*t.scale))
	return u, v
}

// splat returns the pixel offsets covered by one point: single pixels for big
// maps, small discs for small ones, the radius scaled to a plot of w×h pixels.
func splat(n, w, h int) []image.Point {
	radius := 0
	switch {
	case n <= 5_000:
		radius = 3
	case n <= 20_000:
		radius = 2
	case n <= 150_000:
		radius = 1
	}
	radius = (radius*min(w, h) + 700) / 1400 // scaled to the plot, rounded
	var disc []image.Point
	for dy := -radius; dy <= radius; dy++ {
		for dx := -radius; dx <= radius; dx++ {
			if dx*dx+dy*dy <= radius*radius+radius {
				disc = append(disc, image.Point{dx, dy})
			}
		}
	}
	return disc
}

// pixels holds per-pixel point counts and colour sums of a plot of w×h pixels.
// Both are integers: exact, so the picture does not depend on the order of
// additions.
type pixels struct {
	w, h  int
	count []uint32
	sum   []uint64 // red, green, blue per pixel
}

func newPixels(w, h int) *pixels {
	return &pixels{w: w, h: h, count: make([]uint32, w*h), sum: make([]uint64, 3*w*h)}
}

// add adds a point of colour c at pixel (u, v), spread over disc; pixels on or
// outside the plot's border are left out.
func (px *pixels) add(u, v int, disc []image.Point, c color.RGBA) {
	cr, cg, cb := uint64(c.R), uint64(c.G), uint64(c.B)
	for _, d := range disc {
		a, b := u+d.X, v+d.Y
		if a < 1 || b < 1 || a >= px.w || b >= px.h {
			continue
		}
		p := b*px.w + a
		px.count[p]++
		px.sum[3*p] += cr
		px.sum[3*p+1] += cg
		px.sum[3*p+2] += cb
	}
}

// fullCount returns the count at the 95th percentile of the non-empty pixels:
// the count at which a pixel becomes fully opaque, so the picture adapts to its
// own density.
func (px *pixels) fullCount() int {
	hist := map[int]int{}
	nonEmpty := 0
	for _, c := range px.count {
		if c > 0 {
			hist[int(c)]++
			nonEmpty++
		}
	}
	keys := make([]int, 0, len(hist))
	for k := range hist {
		keys = append(keys, k)
	}
	slices.Sort(keys)
	ref, seen := 1, 0
	for _, k := range keys {
		seen += hist[k]
		ref = k
		if float64(seen) >= 0.95*float64(nonEmpty) {
			break
		}
	}
	return ref
}

// paint blends each non-empty pixel's mean colour over white into img, with its
// top-left corner at origin: opacity follows a log curve of the count, from
// minAlpha for one point to 1 at fullCount.
func (px *pixels) paint(img *image.RGBA, origin image.Point) {
	const minAlpha = 0.3
	logRef := math.Log1p(float64(px.fullCount()))
	for b := range px.h {
		for a := range px.w {
			p := b*px.w + a
			c := px.count[p]
			if c == 0 {
				continue
			}
			alpha := minAlpha + (1-minAlpha)*math.Log1p(float64(c))/logRef
			alpha = math.Min(1, alpha)
			mix := func(s uint64) uint8 {
				v := 255*(1-alpha) + float64(s)/float64(c)*alpha
				return uint8(math.Round(math.Min(255, math.Max(0, v))))
			}
			img.SetRGBA(origin.X+a, origin.Y+b, color.RGBA{mix(px.sum[3*p]), mix(px.sum[3*p+1]), mix(px.sum[3*p+2]), 0xff})
		}
	}
}
