// Package figure draws pictures of t-SNE results as PNG — the map of a run
// (DrawMap: points coloured by category or by number, a legend with counts or
// a colour bar, and the caution about what a t-SNE map does and does not
// show) and the chart of a sweep (DrawTradeoff: quality against wall time) —
// and owns the colours both pictures and the interactive page use.
//
// # Drawing
//
// The map is rasterised by hand rather than through gonum/plot: a map has up to
// millions of points, and drawing each as a vector glyph through a plotting
// library is slow and, at that density, turns into an opaque blot. Instead every
// point is added to per-pixel counts and per-pixel colour sums (integers, so the
// picture does not depend on the order of additions), and a pixel holding c
// points is drawn in their mean colour over the paper with opacity
//
//	α(c) = min(1, 0.3 + 0.7·ln(1 + c)/ln(1 + c₉₅)),
//
// where c₉₅ is the 95th percentile of the counts of the non-empty pixels: the
// curve adapts to the picture's own density, so both the sparse and the crowded
// parts of a million-point map stay readable. With a fixed opacity a per point,
// α(c) = 1 − (1 − a)^c, the opacity of c layers. When some rows are placed into
// a reference map, the reference rows are painted first in a light grey and
// the placed rows over them. Identical inputs give identical bytes.
//
// Text is drawn with the Liberation Sans TrueType fonts (Latin, Greek and
// Cyrillic) through golang.org/x/image/font/opentype; a character the font
// lacks is drawn as an empty box and reported to the caller. The sweep chart
// uses the same fonts and inks through gonum/plot.
//
// # Colours
//
// Colours are designed in OKLab (B. Ottosson, "A perceptual color space for
// image processing", 2020), whose lightness L and chroma–hue plane follow
// perceived differences far better than sRGB. From linear-light sRGB (r, g, b):
//
//	(l, m, s) = M₁·(r, g, b),   (L, a, b) = M₂·(∛l, ∛m, ∛s),
//
// with Ottosson's matrices M₁ and M₂ (colour.go), and OKLCH is its polar form
// (C = √(a² + b²), h = atan2(b, a)). sRGB components are linearised by the
// IEC 61966-2-1 transfer function.
//
// The categorical palette (Palette) has 24 colours: twelve hues 30° apart at
// three alternating lightness levels, then twelve half-way hues, softer. Its
// tests measure pairwise differences with CIEDE2000 (Sharma, Wu & Dalal,
// Color Res. Appl. 30(1), 2005, checked against the paper's 34 published test
// pairs): at least 15 between any two of the first twelve for normal vision,
// and at least 6 after simulating deuteranopia and protanopia with the
// severity-1.0 matrices of Machado, Oliveira & Fernandes (IEEE TVCG 15(6),
// 2009). More labels than colours reuse them in order, and the legend says so.
//
// The continuous scale (Ramp) is a curve in OKLCH whose lightness falls from
// 0.88 to 0.28 while the hue turns from 105° to 300°, sampled at equal OKLab
// arc length so that equal steps in value are equal steps in colour. Values
// are clipped to their 1st and 99th percentiles (NewScale), and the colour
// bar says so.
package figure
