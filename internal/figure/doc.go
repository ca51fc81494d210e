// Package figure draws pictures of t-SNE results as PNG: the map of a run
// (DrawMap: points coloured by label, a legend with counts, and a caption that
// reminds the reader what a t-SNE map does and does not show) and the chart of a
// sweep (DrawTradeoff: quality against wall time).
//
// The map is rasterised by hand rather than through gonum/plot: a map has up to
// millions of points, and drawing each as a vector glyph through a plotting
// library is slow and, at that density, turns into an opaque blot. Instead every
// point is added to per-pixel counts and per-pixel colour sums (integers, so the
// picture does not depend on the order of additions), and a pixel holding c
// points is drawn in their mean colour over white with opacity
//
//	α(c) = min(1, 0.3 + 0.7·ln(1 + c)/ln(1 + c₉₅)),
//
// where c₉₅ is the 95th percentile of the counts of the non-empty pixels: the
// curve adapts to the picture's own density, so both the sparse and the crowded
// parts of a million-point map stay readable. Identical inputs give identical
// bytes.
package figure
