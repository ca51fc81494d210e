// Package figure draws a t-SNE map as a PNG picture: points coloured by label,
// a legend with counts, and a caption that reminds the reader what a t-SNE map
// does and does not show.
//
// The picture is rasterised by hand rather than through gonum/plot: a map has up
// to millions of points, and drawing each as a vector glyph through a plotting
// library is slow and, at that density, turns into an opaque blot. Instead every
// point is added to per-pixel counts and per-pixel colour sums, and the pixel's
// opacity follows a logarithmic curve of its count scaled to the picture's own
// density, so both the sparse and the crowded parts of a million-point map stay
// readable.
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
	"strconv"
	"strings"

	"golang.org/x/image/font"
	"golang.org/x/image/font/basicfont"
	"golang.org/x/image/math/fixed"
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
	if dims != 2 && dims != 3 {
		return fmt.Errorf("drawing map: dims = %d, want 2 or 3", dims)
	}
	if len(y)%dims != 0 {
		return fmt.Errorf("drawing map: len(y) = %d is not a multiple of dims = %d", len(y), dims)
	}
	n := len(y) / dims
	if labels != nil && len(labels) != n {
		return fmt.Errorf("drawing map: %d labels for %d points", len(labels), n)
	}
	for i, v := range y {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("drawing map: point %d has a non-finite coordinate %v", i/dims, v)
		}
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

	scale := max(1, min(W, H)/800) // text scale: 7×13 glyphs are tiny on a big picture
	lineH := 16 * scale
	margin := 12 * scale
	ink := color.RGBA{0x20, 0x20, 0x20, 0xff}
	soft := color.RGBA{0x60, 0x60, 0x60, 0xff}

	// Header: title, optional caption, the facts of the map, the reminder.
	ty := margin
	drawText(img, margin, ty, title, ink, scale)
	ty += lineH
	if opt.Caption != "" {
		drawText(img, margin, ty, opt.Caption, soft, scale)
		ty += lineH
	}
	facts := fmt.Sprintf("N = %s points, %d-D map", thousands(n), dims)
	if dims == 3 {
		facts += ": showing axes 1 and 2 only"
	}
	drawText(img, margin, ty, facts, soft, scale)
	ty += lineH
	drawText(img, margin, ty, "Cluster sizes and distances between clusters carry little meaning in a t-SNE map.", soft, scale)
	ty += lineH + margin/2

	// Legend column on the right.
	legend := Legend(labels)
	legendW := 0
	const maxChars = 30
	if legend != nil {
		longest := 0
		for _, e := range legend {
			longest = max(longest, len(legendText(e, maxChars)))
		}
		longest = max(longest, 22) // room for the notes
		legendW = 12*scale + 6*scale + longest*7*scale + margin
		legendW = min(legendW, W/3)
	}

	pw, ph := W-2*margin-legendW, H-ty-margin
	if pw < 100 || ph < 100 {
		return fmt.Errorf("drawing map: picture %d×%d leaves no room for the plot", W, H)
	}
	left, top := margin, ty

	plotPoints(img, image.Rect(left, top, left+pw, top+ph), y, dims, labels, legend)

	frame := color.RGBA{0xb0, 0xb0, 0xb0, 0xff}
	for i := 0; i <= pw; i++ {
		img.SetRGBA(left+i, top, frame)
		img.SetRGBA(left+i, top+ph, frame)
	}
	for i := 0; i <= ph; i++ {
		img.SetRGBA(left, top+i, frame)
		img.SetRGBA(left+pw, top+i, frame)
	}

	if legend != nil {
		lx := left + pw + margin
		ly := top
		if len(legend) > len(palette) {
			drawText(img, lx, ly, fmt.Sprintf("%d labels, %d colours:", len(legend), len(palette)), soft, scale)
			ly += lineH
			drawText(img, lx, ly, "colours repeat", soft, scale)
			ly += lineH
		}
		fit := (H - margin - ly) / lineH
		shown := len(legend)
		if shown > fit {
			shown = max(0, fit-1)
		}
		sw := 10 * scale
		for _, e := range legend[:shown] {
			for dy := range sw {
				for dx := range sw {
					img.SetRGBA(lx+dx, ly+(lineH-sw)/2+dy-scale, e.Colour)
				}
			}
			drawText(img, lx+sw+6*scale, ly, legendText(e, maxChars), ink, scale)
			ly += lineH
		}
		if shown < len(legend) {
			drawText(img, lx, ly, fmt.Sprintf("... and %d more labels", len(legend)-shown), soft, scale)
		}
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

// plotPoints rasterises the points into the square r of img.
func plotPoints(img *image.RGBA, r image.Rectangle, y []float64, dims int, labels []string, legend []LegendEntry) {
	n := len(y) / dims
	if n == 0 {
		return
	}
	pw, ph := r.Dx(), r.Dy()
	colourOf := map[string]color.RGBA{}
	for _, e := range legend {
		colourOf[e.Label] = e.Colour
	}

	// Bounding box of axes 1 and 2; one scale for both axes, as large as fits,
	// map centred in the plot rectangle.
	minX, maxX := math.Inf(1), math.Inf(-1)
	minY, maxY := math.Inf(1), math.Inf(-1)
	for i := range n {
		px, py := y[i*dims], y[i*dims+1]
		minX, maxX = math.Min(minX, px), math.Max(maxX, px)
		minY, maxY = math.Min(minY, py), math.Max(maxY, py)
	}
	pad := 8
	uw, uh := float64(pw-2*pad-1), float64(ph-2*pad-1)
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
	cx, cy := (minX+maxX)/2, (minY+maxY)/2

	// Splat radius: single pixels for big maps, small discs for small ones.
	radius := 0
	switch {
	case n <= 5_000:
		radius = 3
	case n <= 20_000:
		radius = 2
	case n <= 150_000:
		radius = 1
	}
	radius = (radius*min(pw, ph) + 700) / 1400 // scaled to the plot, rounded
	var disc []image.Point
	for dy := -radius; dy <= radius; dy++ {
		for dx := -radius; dx <= radius; dx++ {
			if dx*dx+dy*dy <= radius*radius+radius {
				disc = append(disc, image.Point{dx, dy})
			}
		}
	}

	// Integer counts and colour sums: exact, so the picture does not depend on
	// the order of additions.
	count := make([]uint32, pw*ph)
	sum := make([]uint64, 3*pw*ph)
	for i := range n {
		u := int(math.Round(float64(pad) + uw/2 + (y[i*dims]-cx)*scale))
		v := int(math.Round(float64(pad) + uh/2 - (y[i*dims+1]-cy)*scale))
		c := unlabelled
		if labels != nil {
			c = colourOf[labels[i]]
		}
		cr, cg, cb := uint64(c.R), uint64(c.G), uint64(c.B)
		for _, d := range disc {
			a, b := u+d.X, v+d.Y
			if a < 1 || b < 1 || a >= pw || b >= ph {
				continue
			}
			p := b*pw + a
			count[p]++
			sum[3*p] += cr
			sum[3*p+1] += cg
			sum[3*p+2] += cb
		}
	}

	// Opacity: log curve reaching 1 at the 95th percentile of the non-empty
	// pixels' counts, so the picture adapts to its own density.
	hist := map[int]int{}
	nonEmpty := 0
	for _, c := range count {
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
	const minAlpha = 0.3
	logRef := math.Log1p(float64(ref))
	for b := range ph {
		for a := range pw {
			p := b*pw + a
			c := count[p]
			if c == 0 {
				continue
			}
			alpha := minAlpha + (1-minAlpha)*math.Log1p(float64(c))/logRef
			alpha = math.Min(1, alpha)
			mix := func(s uint64) uint8 {
				v := 255*(1-alpha) + float64(s)/float64(c)*alpha
				return uint8(math.Round(math.Min(255, math.Max(0, v))))
			}
			img.SetRGBA(r.Min.X+a, r.Min.Y+b, color.RGBA{mix(sum[3*p]), mix(sum[3*p+1]), mix(sum[3*p+2]), 0xff})
		}
	}
}

// legendText is "label (count)" with the label cut to maxChars characters.
func legendText(e LegendEntry, maxChars int) string {
	l := e.Label
	if len(l) > maxChars {
		l = l[:maxChars-3] + "..."
	}
	if l == "" {
		l = "(empty)"
	}
	return fmt.Sprintf("%s (%s)", l, thousands(e.Count))
}

// thousands formats n with commas between groups of three digits.
func thousands(n int) string {
	s := strconv.Itoa(n)
	if len(s) <= 3 || n < 0 {
		return s
	}
	var b strings.Builder
	head := len(s) % 3
	if head > 0 {
		b.WriteString(s[:head])
	}
	for i := head; i < len(s); i += 3 {
		if b.Len() > 0 {
			b.WriteByte(',')
		}
		b.WriteString(s[i : i+3])
	}
	return b.String()
}

// drawText writes s with its top-left corner at (x, y), each font pixel drawn
// as a scale×scale square. Characters outside printable ASCII become '?'.
func drawText(img *image.RGBA, x, y int, s string, c color.RGBA, scale int) {
	s = strings.Map(func(r rune) rune {
		if r < 0x20 || r > 0x7e {
			return '?'
		}
		return r
	}, s)
	face := basicfont.Face7x13
	mask := image.NewAlpha(image.Rect(0, 0, face.Advance*len(s)+1, face.Height))
	d := font.Drawer{Dst: mask, Src: image.Opaque, Face: face, Dot: fixed.P(0, face.Ascent)}
	d.DrawString(s)
	b := img.Bounds()
	for my := range mask.Rect.Dy() {
		for mx := range mask.Rect.Dx() {
			if mask.AlphaAt(mx, my).A < 128 {
				continue
			}
			for sy := range scale {
				for sx := range scale {
					p := image.Point{x + mx*scale + sx, y + my*scale + sy}
					if p.In(b) {
						img.SetRGBA(p.X, p.Y, c)
					}
				}
			}
		}
	}
}
