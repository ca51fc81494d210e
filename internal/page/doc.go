// Package page writes the interactive map page, map.html: one self-contained
// HTML file that opens from disk without a network (no outside scripts,
// fonts or requests; a content security policy allows only its own script)
// and shows a map of up to MaxRows points with pan, zoom, hover, a legend
// that hides, shows and isolates groups, and a box that finds a row by id.
//
// # The file
//
// The page is the shell page.html with its slots filled: the style
// (page.css), a JSON header (title, caution, legend, colour scale, and where
// each array sits in the data block), the data block, and the script
// (render.js, legend.js, page.js). The data block holds the per-row arrays
// one after the other, each at an offset that is a multiple of 8, little-
// endian: x and y as float32; the colouring as group code + 1 (0 = no value)
// in uint8 or uint16, or values as float32 (NaN = no value); the placed flags
// as uint8; input row numbers as uint32 (float64 beyond 2³²−1); ids as their
// UTF-8 byte lengths (uint8, uint16 or uint32) then their bytes. The block is
// gzip-compressed, base64-encoded into a non-executed script element, and
// unpacked in the browser by its own DecompressionStream. At 1,000,000 rows
// with 12-character ids the file is about 13 MB (bench/RESULTS.md).
//
// Every text that comes from the data (ids, labels, titles) sits in the JSON
// header, whose encoder escapes <, > and & inside strings, or in the binary
// block, and reaches the page's document only through textContent: a label
// such as </script><img src=x onerror=alert(1)> shows as text.
//
// # Framing
//
// At first the map's bounding box (of the rows in the page) is fitted into the
// map area with a margin of 24 CSS pixels, one scale for both axes, centred:
// a point (x, y) is drawn at CSS pixel
//
//	(W/2 + (x − cx)·s, H/2 − (y − cy)·s)
//
// from the top-left corner of the map area's content box, where W×H is that
// box's size, (cx, cy) is the centre of the bounding box and
// s = min((W − 48)/(xmax − xmin), (H − 48)/(ymax − ymin)). The page's help
// panel says the same.
//
// # Drawing
//
// WebGL draws the points (one draw call, per-point colours, hidden groups
// moved out of view in the vertex shader); without WebGL, or with
// ?renderer=canvas in the address, a canvas 2D fallback blends the points
// into an image one by one. The page's status line says which. Hover finds the
// nearest shown point through a uniform grid built in the page right after
// the first frame (about two points per cell), not a scan. window.nightjar
// exposes the renderer, the time of the first frame and of the stages before
// it (performance.now()), the times of recent hovers and the view, for tests
// and benchmarks.
package page
