package figure

import (
	"cmp"
	"image/color"
	"math"
	"slices"
)

// swatch is one palette entry as designed in OKLCH: the colour of lightness
// L and hue H (degrees) with chroma min(Cap, 0.95 × the gamut's largest
// chroma at that L and H).
type swatch struct {
	L, H, Cap float64
	RGB       color.RGBA // the design rounded to 8-bit sRGB
}

// design is nightjar's categorical palette, in the order labels get them.
// The first twelve are twelve hues 30° apart at three lightness levels
// (0.45, 0.63, 0.80), the level of each hue chosen so that every pair stays
// apart for normal vision and under simulated deuteranopia and protanopia;
// the next twelve sit half-way between those hues at softer chroma and
// lightness 0.38, 0.60 or 0.76. Within each twelve the order is greedy: each
// next colour is the one farthest from those before it, so the first few
// labels get the most distinct colours. The tests check the distances
// (CIEDE2000) and that RGB is the rounding of the design.
var design = []swatch{
	{0.63, 270, 0.20, color.RGBA{0x5e, 0x7d, 0xf9, 0xff}},
	{0.80, 120, 0.20, color.RGBA{0xb0, 0xcd, 0x25, 0xff}},
	{0.45, 90, 0.20, color.RGBA{0x68, 0x52, 0x0b, 0xff}},
	{0.45, 0, 0.20, color.RGBA{0x9a, 0x0f, 0x51, 0xff}},
	{0.80, 30, 0.20, color.RGBA{0xfc, 0xa3, 0x94, 0xff}},
	{0.45, 210, 0.20, color.RGBA{0x0e, 0x60, 0x6c, 0xff}},
	{0.63, 60, 0.20, color.RGBA{0xc5, 0x71, 0x17, 0xff}},
	{0.80, 180, 0.20, color.RGBA{0x2b, 0xda, 0xc1, 0xff}},
	{0.63, 330, 0.20, color.RGBA{0xc8, 0x51, 0xc1, 0xff}},
	{0.45, 300, 0.20, color.RGBA{0x69, 0x28, 0xb0, 0xff}},
	{0.63, 150, 0.20, color.RGBA{0x1c, 0xa3, 0x4f, 0xff}},
	{0.80, 240, 0.20, color.RGBA{0x7a, 0xc7, 0xfc, 0xff}},
	{0.60, 15, 0.10, color.RGBA{0xb4, 0x66, 0x6d, 0xff}},
	{0.38, 255, 0.10, color.RGBA{0x17, 0x42, 0x76, 0xff}},
	{0.60, 195, 0.10, color.RGBA{0x1a, 0x92, 0x92, 0xff}},
	{0.38, 165, 0.10, color.RGBA{0x09, 0x4f, 0x38, 0xff}},
	{0.76, 75, 0.10, color.RGBA{0xd6, 0xa8, 0x66, 0xff}},
	{0.38, 45, 0.10, color.RGBA{0x6c, 0x2d, 0x0a, 0xff}},
	{0.60, 225, 0.10, color.RGBA{0x2b, 0x8c, 0xad, 0xff}},
	{0.76, 345, 0.10, color.RGBA{0xdf, 0x97, 0xc0, 0xff}},
	{0.60, 105, 0.10, color.RGBA{0x89, 0x83, 0x35, 0xff}},
	{0.76, 135, 0.10, color.RGBA{0x96, 0xc0, 0x7f, 0xff}},
	{0.38, 315, 0.10, color.RGBA{0x56, 0x2f, 0x66, 0xff}},
	{0.76, 285, 0.10, color.RGBA{0xaa, 0xa8, 0xee, 0xff}},
}

// designed returns the 8-bit sRGB colour of a swatch's OKLCH design.
func (s swatch) designed() color.RGBA {
	c := math.Min(s.Cap, 0.95*maxChroma(s.L, s.H))
	return oklch(s.L, c, s.H).rgba()
}

// Colours of things that are not a label.
var (
	// Missing is the colour of points without a value (a row the colouring
	// table does not have, an empty cell, NaN): a mid grey, OKLab L = 0.72.
	Missing = color.RGBA{0xa4, 0xa4, 0xa4, 0xff}
	// Reference is the colour of the reference rows under placed rows: a
	// light neutral grey, OKLab L = 0.87, so the placed rows stand out.
	Reference = color.RGBA{0xd4, 0xd4, 0xd4, 0xff}
	// Plain is the colour of every point of an uncoloured map.
	Plain = color.RGBA{0x3a, 0x3a, 0x3a, 0xff}
)

// Palette returns nightjar's categorical colours, in the order they are
// given to labels (most frequent label first).
func Palette() []color.RGBA {
	out := make([]color.RGBA, len(design))
	for i, s := range design {
		out[i] = s.RGB
	}
	return out
}

// Group is one category of a map's colouring: its label, number of points
// and colour.
type Group struct {
	Label  string
	Count  int
	Colour color.RGBA
}

// MaxGroups is the largest number of categories a colouring keeps apart;
// rarer labels beyond it share one group, named by OtherGroup.
const MaxGroups = 2000

// OtherGroup returns the name of the group that gathers the n rarest labels
// beyond MaxGroups.
func OtherGroup(n int) string { return "(" + thousands(n) + " rarer labels)" }

// Legend returns the categories of labels: distinct labels by decreasing
// count, ties by label text, coloured from Palette in that order (colours
// repeat after len(Palette()) labels), and codes[i], the index of labels[i]'s
// group. Beyond MaxGroups labels, the rarest share one last group (see
// OtherGroup). It returns nil, nil for nil labels.
func Legend(labels []string) (groups []Group, codes []int32) {
	if labels == nil {
		return nil, nil
	}
	index := map[string]int32{}
	var counts []Group
	codes = make([]int32, len(labels))
	for i, l := range labels {
		k, ok := index[l]
		if !ok {
			k = int32(len(counts))
			index[l] = k
			counts = append(counts, Group{Label: l})
		}
		counts[k].Count++
		codes[i] = k
	}
	order := make([]int32, len(counts))
	for i := range order {
		order[i] = int32(i)
	}
	slices.SortFunc(order, func(a, b int32) int {
		if c := cmp.Compare(counts[b].Count, counts[a].Count); c != 0 {
			return c
		}
		return cmp.Compare(counts[a].Label, counts[b].Label)
	})
	rank := make([]int32, len(counts))
	for r, k := range order {
		rank[k] = int32(min(r, MaxGroups-1))
	}
	groups = make([]Group, min(len(order), MaxGroups))
	for r, k := range order {
		if r < MaxGroups-1 || len(order) == MaxGroups {
			groups[r] = counts[k]
			continue
		}
		last := &groups[MaxGroups-1]
		last.Count += counts[k].Count
		last.Label = OtherGroup(len(order) - MaxGroups + 1)
	}
	for r := range groups {
		groups[r].Colour = design[r%len(design)].RGB
	}
	for i, k := range codes {
		codes[i] = rank[k]
	}
	return groups, codes
}
