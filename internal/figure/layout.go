package figure

import (
	"fmt"
	"image"
	"image/color"
	"math"
	"strconv"
)

// Caution is the line every map carries.
const Caution = "Cluster sizes and distances between clusters carry little meaning in a t-SNE map."

// layout holds the text styles and spacing of a picture W×H pixels.
type layout struct {
	w, h   int
	margin int
	title  style // bold, large
	head   style // bold, the legend's heading
	text   style // labels
	note   style // notes, in the softer ink
	ts     *typesetter
}

func newLayout(w, h int) layout {
	k := math.Max(0.5, float64(min(w, h))/1600)
	return layout{
		w: w, h: h,
		margin: int(math.Round(24 * k)),
		title:  style{bold, math.Round(30 * k), Ink},
		head:   style{bold, math.Round(19 * k), Ink},
		text:   style{regular, math.Round(18 * k), Ink},
		note:   style{regular, math.Round(17 * k), Soft},
		ts:     newTypesetter(),
	}
}

// line returns the line height of st.
func line(st style) int { return int(math.Round(1.45 * st.px)) }

// header draws the title, the optional caption, the facts of the map and the
// caution, and returns the y where the plot starts.
func (ly layout) header(img *image.RGBA, title, caption string, n, dims int) int {
	x, y := ly.margin, ly.margin*2/3
	width := ly.w - 2*ly.margin
	ly.ts.draw(img, x, y, ly.ts.fit(title, width, ly.title), ly.title)
	y += line(ly.title)
	if caption != "" {
		ly.ts.draw(img, x, y, ly.ts.fit(caption, width, ly.note), ly.note)
		y += line(ly.note)
	}
	facts := fmt.Sprintf("%s points, %d-D map", thousands(n), dims)
	if dims == 3 {
		facts += ": showing axes 1 and 2 only"
	}
	ly.ts.draw(img, x, y, facts, ly.note)
	y += line(ly.note)
	ly.ts.draw(img, x, y, ly.ts.fit(Caution, width, ly.note), ly.note)
	return y + line(ly.note) + ly.margin/2
}

// swatchSize is the side of a legend swatch.
func (ly layout) swatchSize() int { return int(math.Round(0.72 * ly.text.px)) }

// sideWidth returns the width of the column right of the plot (legend or
// colour bar) plus its margin, or 0 when there is none.
func (ly layout) sideWidth(m Map, w int) int {
	c := m.Colour
	if !c.IsNumeric() && !c.IsCategorical() && m.Placed == nil {
		return 0
	}
	widest := ly.ts.width(c.Heading, ly.head)
	if c.IsNumeric() {
		widest = max(widest, ly.ts.width(c.Scale.Clip, ly.note), 12*int(ly.text.px))
	}
	for _, g := range c.Groups {
		widest = max(widest, ly.swatchSize()+ly.margin/2+ly.ts.width(entryText(g.Label, g.Count), ly.text))
	}
	widest = max(widest, 10*int(ly.text.px))
	return min(widest+2*ly.margin, w/3)
}

// side draws the legend or the colour bar from (x, y0), width w.
func (ly layout) side(img *image.RGBA, m Map, x, y0, w int) {
	c := m.Colour
	y := y0
	if c.IsNumeric() || c.IsCategorical() {
		heading := c.Heading
		if heading == "" {
			heading = "label"
		}
		ly.ts.draw(img, x, y, ly.ts.fit(heading, w, ly.head), ly.head)
		y += line(ly.head)
	}
	if m.Placed != nil {
		ref := 0
		for _, p := range m.Placed {
			if !p {
				ref++
			}
		}
		y = ly.entry(img, x, y, w, Reference, entryText("reference rows", ref))
	}
	if c.IsNumeric() {
		ly.colourBar(img, c, x, y, w)
		return
	}
	if c.IsCategorical() {
		ly.legend(img, c, x, y, w)
	}
}

// entry draws one legend line (swatch and text) and returns the next y.
func (ly layout) entry(img *image.RGBA, x, y, w int, col color.RGBA, text string) int {
	sw := ly.swatchSize()
	top := y + (line(ly.text)-sw)/2 - int(0.08*ly.text.px)
	fill(img, image.Rect(x, top, x+sw, top+sw), col)
	tx := x + sw + ly.margin/2
	ly.ts.draw(img, tx, y, ly.ts.fit(text, w-(tx-x), ly.text), ly.text)
	return y + line(ly.text)
}

// legend draws the categories: a note when colours repeat, one swatch and
// line per group while they fit, the points without a value, then how many
// groups are left out.
func (ly layout) legend(img *image.RGBA, c Colouring, x, y, w int) {
	if len(c.Groups) > len(design) {
		note := fmt.Sprintf("%d labels, %d colours: colours repeat", len(c.Groups), len(design))
		ly.ts.draw(img, x, y, ly.ts.fit(note, w, ly.note), ly.note)
		y += line(ly.note)
	}
	lh := line(ly.text)
	noValue := c.NoValue()
	rows := (ly.h - ly.margin - y) / lh
	if noValue > 0 {
		rows--
	}
	shown := len(c.Groups)
	if shown > rows {
		shown = max(0, rows-1)
	}
	for _, g := range c.Groups[:shown] {
		y = ly.entry(img, x, y, w, g.Colour, entryText(g.Label, g.Count))
	}
	if noValue > 0 {
		y = ly.entry(img, x, y, w, Missing, entryText("no value", noValue))
	}
	if shown < len(c.Groups) {
		ly.ts.draw(img, x, y, fmt.Sprintf("… and %s more labels", thousands(len(c.Groups)-shown)), ly.note)
	}
}

// colourBar draws the continuous scale, high values on top, with the values
// at its ends and middle and notes on the clipping and the missing values.
func (ly layout) colourBar(img *image.RGBA, c Colouring, x, y, w int) {
	s := c.Scale
	barW := int(math.Round(1.3 * ly.text.px))
	barH := max(100, min(int(0.4*float64(ly.h)), 20*int(ly.text.px)))
	top := y + line(ly.text)/2
	for k := range barH {
		col := ramp[int(math.Round(float64(barH-1-k)/float64(barH-1)*(RampSize-1)))]
		fill(img, image.Rect(x, top+k, x+barW, top+k+1), col)
	}
	frameRect(img, image.Rect(x, top, x+barW, top+barH))
	tx := x + barW + ly.margin/2
	half := line(ly.text) / 2
	hi, lo := Number(s.Hi), Number(s.Lo)
	if s.Above > 0 {
		hi = "≥ " + hi
	}
	if s.Below > 0 {
		lo = "≤ " + lo
	}
	ly.ts.draw(img, tx, top-half, hi, ly.text)
	ly.ts.draw(img, tx, top+barH/2-half, Number((s.Lo+s.Hi)/2), ly.text)
	ly.ts.draw(img, tx, top+barH-half, lo, ly.text)
	y = top + barH + line(ly.text)
	for _, note := range []string{s.Clip, fmt.Sprintf("(%s below, %s above)", thousands(s.Below), thousands(s.Above))} {
		ly.ts.draw(img, x, y, ly.ts.fit(note, w, ly.note), ly.note)
		y += line(ly.note)
	}
	if s.Missing > 0 {
		ly.entry(img, x, y, w, Missing, entryText("no value", s.Missing))
	}
}

// fill paints r in col.
func fill(img *image.RGBA, r image.Rectangle, col color.RGBA) {
	r = r.Intersect(img.Bounds())
	for y := r.Min.Y; y < r.Max.Y; y++ {
		for x := r.Min.X; x < r.Max.X; x++ {
			img.SetRGBA(x, y, col)
		}
	}
}

// frameRect draws the outline of r (its last row and column outside r).
func frameRect(img *image.RGBA, r image.Rectangle) {
	drawFrame(img, image.Rect(r.Min.X-1, r.Min.Y-1, r.Max.X, r.Max.Y))
}

// entryText is "label (count)"; an empty label shows as "(empty)".
func entryText(label string, count int) string {
	if label == "" {
		label = "(empty)"
	}
	return fmt.Sprintf("%s (%s)", label, thousands(count))
}

// Number formats v for a scale's labels: four significant digits, whole
// numbers from 100 up, and an exponent only for very large or small values.
func Number(v float64) string {
	a := math.Abs(v)
	switch {
	case v == 0:
		return "0"
	case a >= 1e7 || a < 1e-3:
		return strconv.FormatFloat(v, 'g', 3, 64)
	case a >= 100:
		return strconv.FormatFloat(math.Round(v), 'f', 0, 64)
	}
	return strconv.FormatFloat(v, 'g', 4, 64)
}
