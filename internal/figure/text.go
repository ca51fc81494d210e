package figure

import (
	"fmt"
	"image"
	"image/color"
	"image/draw"
	"slices"
	"strconv"
	"strings"
	"unicode"

	"codeberg.org/go-fonts/liberation/liberationsansbold"
	"codeberg.org/go-fonts/liberation/liberationsansregular"
	"golang.org/x/image/font"
	"golang.org/x/image/font/opentype"
	"golang.org/x/image/font/sfnt"
	"golang.org/x/image/math/fixed"
)

// The figures' shared style: Liberation Sans (Latin, Greek and Cyrillic),
// dark ink for titles and labels, a softer grey for notes, a light frame.
var (
	Ink   = color.RGBA{0x1f, 0x1f, 0x1f, 0xff}
	Soft  = color.RGBA{0x5c, 0x5c, 0x5c, 0xff}
	Frame = color.RGBA{0xc4, 0xc4, 0xc4, 0xff}
	Paper = color.RGBA{0xff, 0xff, 0xff, 0xff}
)

// The fonts, parsed once.
var (
	regular = mustParse(liberationsansregular.TTF)
	bold    = mustParse(liberationsansbold.TTF)
)

func mustParse(ttf []byte) *opentype.Font {
	f, err := opentype.Parse(ttf)
	if err != nil {
		panic(fmt.Sprintf("figure: the embedded font does not parse: %v", err))
	}
	return f
}

// style is a font, a size in pixels and a colour.
type style struct {
	font   *opentype.Font
	px     float64
	colour color.RGBA
}

// typesetter draws text in the figures' fonts and remembers the characters
// the fonts lack (drawn as boxes). Not safe for concurrent use.
type typesetter struct {
	faces   map[style]font.Face
	missing map[rune]bool
	buf     sfnt.Buffer
}

func newTypesetter() *typesetter {
	return &typesetter{faces: map[style]font.Face{}, missing: map[rune]bool{}}
}

// face returns the face of st, made once.
func (ts *typesetter) face(st style) font.Face {
	key := style{font: st.font, px: st.px}
	if f, ok := ts.faces[key]; ok {
		return f
	}
	// At 72 DPI a size in points is a size in pixels.
	f, err := opentype.NewFace(st.font, &opentype.FaceOptions{Size: st.px, DPI: 72, Hinting: font.HintingFull})
	if err != nil {
		panic(fmt.Sprintf("figure: font face of %g px: %v", st.px, err))
	}
	ts.faces[key] = f
	return f
}

// has tells whether the font of st has a glyph for r.
func (ts *typesetter) has(st style, r rune) bool {
	g, err := st.font.GlyphIndex(&ts.buf, r)
	return err == nil && g != 0
}

// clean replaces control characters by spaces: a label is one line.
func clean(s string) string {
	return strings.Map(func(r rune) rune {
		if unicode.IsControl(r) {
			return ' '
		}
		return r
	}, s)
}

// boxWidth is the advance of the box drawn for a missing character.
func boxWidth(px float64) fixed.Int26_6 { return fixed.Int26_6(0.6 * px * 64) }

// width returns the advance of s in pixels.
func (ts *typesetter) width(s string, st style) int {
	f := ts.face(st)
	var w fixed.Int26_6
	prev := rune(-1)
	for _, r := range clean(s) {
		if !ts.has(st, r) {
			w += boxWidth(st.px)
			prev = -1
			continue
		}
		if prev >= 0 {
			w += f.Kern(prev, r)
		}
		adv, _ := f.GlyphAdvance(r)
		w += adv
		prev = r
	}
	return w.Ceil()
}

// draw writes s on img with its top-left corner at (x, y) and returns the
// x after it. Glyphs are drawn as a font.Drawer draws them (kerning
// included); a character the font lacks is drawn as an empty box the size of
// a capital letter and recorded.
func (ts *typesetter) draw(img draw.Image, x, y int, s string, st style) int {
	f := ts.face(st)
	src := image.NewUniform(st.colour)
	m := f.Metrics()
	dot := fixed.Point26_6{X: fixed.I(x), Y: fixed.I(y) + m.Ascent}
	prev := rune(-1)
	for _, r := range clean(s) {
		if !ts.has(st, r) {
			ts.missing[r] = true
			ts.box(img, dot, st)
			dot.X += boxWidth(st.px)
			prev = -1
			continue
		}
		if prev >= 0 {
			dot.X += f.Kern(prev, r)
		}
		dr, mask, mp, adv, ok := f.Glyph(dot, r)
		if ok {
			draw.DrawMask(img, dr, src, image.Point{}, mask, mp, draw.Over)
		}
		dot.X += adv
		prev = r
	}
	return dot.X.Ceil()
}

// box draws the outline of a missing character's box at dot (on the
// baseline).
func (ts *typesetter) box(img draw.Image, dot fixed.Point26_6, st style) {
	x0 := dot.X.Round() + int(0.08*st.px+0.5)
	x1 := dot.X.Round() + int(0.52*st.px+0.5)
	y1 := dot.Y.Round() - 1
	y0 := y1 - int(0.68*st.px+0.5)
	for x := x0; x <= x1; x++ {
		img.Set(x, y0, st.colour)
		img.Set(x, y1, st.colour)
	}
	for y := y0; y <= y1; y++ {
		img.Set(x0, y, st.colour)
		img.Set(x1, y, st.colour)
	}
}

// fit returns s, cut and ended with "…" if needed so that it is at most w
// pixels wide.
func (ts *typesetter) fit(s string, w int, st style) string {
	s = clean(s)
	if ts.width(s, st) <= w {
		return s
	}
	rs := []rune(s)
	lo, hi := 0, len(rs)
	for lo < hi {
		mid := (lo + hi + 1) / 2
		if ts.width(string(rs[:mid])+"…", st) <= w {
			lo = mid
		} else {
			hi = mid - 1
		}
	}
	return string(rs[:lo]) + "…"
}

// lacking returns the characters drawn as boxes so far, in order.
func (ts *typesetter) lacking() []rune {
	out := make([]rune, 0, len(ts.missing))
	for r := range ts.missing {
		out = append(out, r)
	}
	slices.Sort(out)
	return out
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

// Thousands formats n with commas between groups of three digits.
func Thousands(n int) string { return thousands(n) }
