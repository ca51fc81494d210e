package figure

import (
	"fmt"
	"image"
	"image/color"
	"strconv"
	"strings"

	"golang.org/x/image/font"
	"golang.org/x/image/font/basicfont"
	"golang.org/x/image/math/fixed"
)

// Colours of the text and the plot's frame.
var (
	ink   = color.RGBA{0x20, 0x20, 0x20, 0xff}
	soft  = color.RGBA{0x60, 0x60, 0x60, 0xff}
	frame = color.RGBA{0xb0, 0xb0, 0xb0, 0xff}
)

// legendChars is the longest label shown in the legend, in characters.
const legendChars = 30

// layout holds the text metrics of a picture W×H pixels.
type layout struct {
	h      int // picture height
	scale  int // text scale: 7×13 glyphs are tiny on a big picture
	lineH  int // line height
	margin int
}

func newLayout(w, h int) layout {
	scale := max(1, min(w, h)/800)
	return layout{h: h, scale: scale, lineH: 16 * scale, margin: 12 * scale}
}

// header draws the title, the optional caption, the facts of the map and the
// reminder of what a t-SNE map shows, and returns the y where the plot starts.
func (ly layout) header(img *image.RGBA, title, caption string, n, dims int) int {
	ty := ly.margin
	drawText(img, ly.margin, ty, title, ink, ly.scale)
	ty += ly.lineH
	if caption != "" {
		drawText(img, ly.margin, ty, caption, soft, ly.scale)
		ty += ly.lineH
	}
	facts := fmt.Sprintf("N = %s points, %d-D map", thousands(n), dims)
	if dims == 3 {
		facts += ": showing axes 1 and 2 only"
	}
	drawText(img, ly.margin, ty, facts, soft, ly.scale)
	ty += ly.lineH
	drawText(img, ly.margin, ty, "Cluster sizes and distances between clusters carry little meaning in a t-SNE map.", soft, ly.scale)
	return ty + ly.lineH + ly.margin/2
}

// legendWidth returns the width of the legend column on the right of a picture
// w pixels wide (0 without a legend).
func (ly layout) legendWidth(legend []LegendEntry, w int) int {
	if legend == nil {
		return 0
	}
	longest := 0
	for _, e := range legend {
		longest = max(longest, len(legendText(e, legendChars)))
	}
	longest = max(longest, 22) // room for the notes
	return min(12*ly.scale+6*ly.scale+longest*7*ly.scale+ly.margin, w/3)
}

// legend draws the legend from (lx, ly0) down: a note when colours repeat, one
// swatch and line per label while they fit, then how many labels are left out.
func (ly layout) legend(img *image.RGBA, legend []LegendEntry, lx, ly0 int) {
	y := ly0
	if len(legend) > len(palette) {
		drawText(img, lx, y, fmt.Sprintf("%d labels, %d colours:", len(legend), len(palette)), soft, ly.scale)
		y += ly.lineH
		drawText(img, lx, y, "colours repeat", soft, ly.scale)
		y += ly.lineH
	}
	fit := (ly.h - ly.margin - y) / ly.lineH
	shown := len(legend)
	if shown > fit {
		shown = max(0, fit-1)
	}
	sw := 10 * ly.scale
	for _, e := range legend[:shown] {
		for dy := range sw {
			for dx := range sw {
				img.SetRGBA(lx+dx, y+(ly.lineH-sw)/2+dy-ly.scale, e.Colour)
			}
		}
		drawText(img, lx+sw+6*ly.scale, y, legendText(e, legendChars), ink, ly.scale)
		y += ly.lineH
	}
	if shown < len(legend) {
		drawText(img, lx, y, fmt.Sprintf("... and %d more labels", len(legend)-shown), soft, ly.scale)
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
