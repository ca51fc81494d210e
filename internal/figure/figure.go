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
)

// Map is what DrawMap draws.
type Map struct {
	// Y holds N points of Dims coordinates each, row-major (len(Y) = N·Dims,
	// Dims ∈ {2, 3}); a 3-D map is drawn by its first two axes.
	Y    []float64
	Dims int
	// Colour says how the points are coloured; the zero value draws every
	// point in Plain, without a legend.
	Colour Colouring
	// Placed is nil, or holds one flag per point: false marks a reference
	// row, drawn in the Reference grey under the others, true a placed row,
	// drawn in its colour on top.
	Placed []bool
}

// MapOptions controls DrawMap. The zero value gives a 1600×1600 picture
// titled "nightjar map", points sized by their number and shaded by density.
type MapOptions struct {
	// Width and Height of the picture in pixels; 0 means 1600. Each must be at
	// least 400 when set.
	Width, Height int
	// Title is the first line of the picture; "" means "nightjar map".
	Title string
	// Caption is an optional line under the title (data set, parameters…).
	Caption string
	// PointSize is the diameter of a point in pixels; 0 sizes points by
	// their number (3 pixels up to 150,000 points, 1 beyond).
	PointSize float64
	// Opacity is each point's opacity in (0, 1]: a pixel covered by c points
	// is drawn with opacity 1 − (1 − Opacity)^c. 0 shades by density (see
	// the package doc).
	Opacity float64
}

// DrawMap writes a PNG picture of a map to w: a header (title, caption, the
// number of points and the caution about what a t-SNE map shows), the points
// in a frame with equal scales on both axes and no ticks (t-SNE coordinates
// have no units), and on the right the legend of the categories (with
// counts, as many as fit, then how many more) or the colour bar of the
// numbers. Text is drawn in Liberation Sans; characters the font lacks are
// drawn as boxes and returned, so the caller can warn. Identical inputs give
// identical bytes.
//
// DrawMap returns an error for inconsistent sizes, a non-finite coordinate, a
// too small picture, an option out of range, or a failed write.
func DrawMap(w io.Writer, m Map, opt MapOptions) (lacking []rune, err error) {
	n, err := checkMap(m, opt)
	if err != nil {
		return nil, err
	}
	W, H := opt.Width, opt.Height
	if W == 0 {
		W = 1600
	}
	if H == 0 {
		H = 1600
	}
	if W < 400 || H < 400 {
		return nil, fmt.Errorf("drawing map: picture %d×%d is smaller than 400×400", W, H)
	}
	title := opt.Title
	if title == "" {
		title = "nightjar map"
	}
	img := image.NewRGBA(image.Rect(0, 0, W, H))
	draw.Draw(img, img.Bounds(), image.NewUniform(Paper), image.Point{}, draw.Src)
	ly := newLayout(W, H)
	top := ly.header(img, title, opt.Caption, n, m.Dims)
	side := ly.sideWidth(m, W)
	pw, ph := W-2*ly.margin-side, H-top-ly.margin
	if pw < 100 || ph < 100 {
		return nil, fmt.Errorf("drawing map: picture %d×%d leaves no room for the plot", W, H)
	}
	plot := image.Rect(ly.margin, top, ly.margin+pw, top+ph)
	plotPoints(img, plot, m, opt)
	drawFrame(img, plot)
	if side > 0 {
		ly.side(img, m, plot.Max.X+ly.margin, top, side-ly.margin)
	}
	bw := bufio.NewWriter(w)
	if err := png.Encode(bw, img); err != nil {
		return nil, fmt.Errorf("writing map picture: %w", err)
	}
	if err := bw.Flush(); err != nil {
		return nil, fmt.Errorf("writing map picture: %w", err)
	}
	return ly.ts.lacking(), nil
}

// checkMap checks what DrawMap is given and returns the number of points.
func checkMap(m Map, opt MapOptions) (int, error) {
	if m.Dims != 2 && m.Dims != 3 {
		return 0, fmt.Errorf("drawing map: dims = %d, want 2 or 3", m.Dims)
	}
	if len(m.Y)%m.Dims != 0 {
		return 0, fmt.Errorf("drawing map: len(y) = %d is not a multiple of dims = %d", len(m.Y), m.Dims)
	}
	n := len(m.Y) / m.Dims
	if err := m.Colour.check(n); err != nil {
		return 0, fmt.Errorf("drawing map: %w", err)
	}
	if m.Placed != nil && len(m.Placed) != n {
		return 0, fmt.Errorf("drawing map: %d placed flags for %d points", len(m.Placed), n)
	}
	if !(opt.PointSize >= 0 && opt.PointSize <= 50) {
		return 0, fmt.Errorf("drawing map: point size %g, want 0 (automatic) to 50 pixels", opt.PointSize)
	}
	if !(opt.Opacity >= 0 && opt.Opacity <= 1) {
		return 0, fmt.Errorf("drawing map: opacity %g, want 0 (automatic) to 1", opt.Opacity)
	}
	for i, v := range m.Y {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return 0, fmt.Errorf("drawing map: point %d has a non-finite coordinate %v", i/m.Dims, v)
		}
	}
	return n, nil
}

// drawFrame draws the border of the plot rectangle r, its right and bottom edges
// included.
func drawFrame(img *image.RGBA, r image.Rectangle) {
	left, top, pw, ph := r.Min.X, r.Min.Y, r.Dx(), r.Dy()
	for i := 0; i <= pw; i++ {
		img.SetRGBA(left+i, top, Frame)
		img.SetRGBA(left+i, top+ph, Frame)
	}
	for i := 0; i <= ph; i++ {
		img.SetRGBA(left, top+i, Frame)
		img.SetRGBA(left+pw, top+i, Frame)
	}
}

// plotPoints rasterises the points into the rectangle r of img: the
// reference rows first (when some rows are placed), then the others.
func plotPoints(img *image.RGBA, r image.Rectangle, m Map, opt MapOptions) {
	n := len(m.Y) / m.Dims
	if n == 0 {
		return
	}
	tf := fitMap(m.Y, m.Dims, r.Dx(), r.Dy())
	disc := splat(n, opt.PointSize, r.Dx(), r.Dy())
	layers := []bool{false}
	if m.Placed != nil {
		layers = []bool{false, true}
	}
	for _, placed := range layers {
		px := newPixels(r.Dx(), r.Dy())
		for i := range n {
			c := m.Colour.colour(i)
			if m.Placed != nil {
				if m.Placed[i] != placed {
					continue
				}
				if !placed {
					c = Reference
				}
			}
			u, v := tf.at(m.Y[i*m.Dims], m.Y[i*m.Dims+1])
			px.add(u, v, disc, c)
		}
		px.paint(img, r.Min, opt.Opacity)
	}
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

// splat returns the pixel offsets covered by one point: a disc of the given
// diameter, or by default single pixels for big maps and small discs for
// small ones, the radius scaled to a plot of w×h pixels.
func splat(n int, diameter float64, w, h int) []image.Point {
	radius := 0
	switch {
	case diameter > 0:
		radius = int(math.Round((diameter - 1) / 2))
	case n <= 5_000:
		radius = 3
	case n <= 20_000:
		radius = 2
	case n <= 150_000:
		radius = 1
	}
	if diameter == 0 {
		radius = (radius*min(w, h) + 700) / 1400 // scaled to the plot, rounded
	}
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
	var hist []int
	nonEmpty := 0
	for _, c := range px.count {
		if c > 0 {
			for int(c) >= len(hist) {
				hist = append(hist, 0)
			}
			hist[c]++
			nonEmpty++
		}
	}
	ref, seen := 1, 0
	for k, h := range hist {
		if h == 0 {
			continue
		}
		seen += h
		ref = k
		if float64(seen) >= 0.95*float64(nonEmpty) {
			break
		}
	}
	return ref
}

// paint blends each non-empty pixel's mean colour over img, with its top-left
// corner at origin. With opacity 0 the opacity follows a log curve of the
// count, from minAlpha for one point to 1 at fullCount; otherwise c points
// have opacity 1 − (1 − opacity)^c.
func (px *pixels) paint(img *image.RGBA, origin image.Point, opacity float64) {
	const minAlpha = 0.3
	logRef := math.Log1p(float64(px.fullCount()))
	for b := range px.h {
		for a := range px.w {
			p := b*px.w + a
			c := px.count[p]
			if c == 0 {
				continue
			}
			var alpha float64
			if opacity > 0 {
				alpha = 1 - math.Pow(1-opacity, float64(c))
			} else {
				alpha = math.Min(1, minAlpha+(1-minAlpha)*math.Log1p(float64(c))/logRef)
			}
			under := img.RGBAAt(origin.X+a, origin.Y+b)
			mix := func(s uint64, bg uint8) uint8 {
				v := float64(bg)*(1-alpha) + float64(s)/float64(c)*alpha
				return uint8(math.Round(math.Min(255, math.Max(0, v))))
			}
			img.SetRGBA(origin.X+a, origin.Y+b, color.RGBA{mix(px.sum[3*p], under.R), mix(px.sum[3*p+1], under.G), mix(px.sum[3*p+2], under.B), 0xff})
		}
	}
}
