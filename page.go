package nightjar

import (
	"fmt"
	"io"
	"math"
	"path/filepath"
	"strings"

	"nightjar/checkpoint"
	"nightjar/internal/figure"
	"nightjar/internal/page"
	"nightjar/internal/par"
)

// FileMapPage is the interactive map page written beside map.png.
const FileMapPage = "map.html"

// MaxPageRows is the largest number of rows map.html holds; a larger map's
// page holds a random sample of this many rows (and says so), while map.png
// draws every row.
const MaxPageRows = page.MaxRows

// pageStream is the random stream of the sample of rows a page holds.
const pageStream = 0x70616765

// MapView is what the pictures of a map show: map.png and map.html.
type MapView struct {
	// Map holds N points of Dims coordinates each, row-major (Dims 2 or 3;
	// a 3-D map is drawn by its first two axes).
	Map  []float64
	Dims int
	// IDs is the rows' id column (N values) or nil; the page shows a row's
	// id on hover and finds rows by id.
	IDs *Column
	// Rows holds each row's 0-based row number in the input table, or is
	// nil when row i of the map is row i of the input.
	Rows []int64
	// By names what colours the points (a column's name). Labels colours
	// them by category, Values by number (NaN: no value, drawn grey); at
	// most one of the two is set, each with N values. Neither: one colour.
	By     string
	Labels []string
	Values []float64
	// NoValue is nil, or marks the rows that have no label (drawn grey and
	// counted as "no value" in the legend); with Values, NaN marks them.
	NoValue []bool
	// Placed is nil, or holds per row true for a row placed into the map
	// (drawn in its colour on top) and false for a reference row (drawn in a
	// light neutral grey beneath).
	Placed []bool
	// Title heads both pictures ("" = "nightjar map"); Caption is an
	// optional line under it.
	Title, Caption string
	// PointSize is a point's diameter in pixels (map.png) and CSS pixels at
	// the page's first view; Opacity each point's opacity in (0, 1]. 0 sizes
	// and shades points by their number and density.
	PointSize, Opacity float64
	// Seed chooses the rows of a page that cannot hold them all.
	Seed uint64
}

// check reports an inconsistent view.
func (v *MapView) check() error {
	if v.Dims != 2 && v.Dims != 3 {
		return &SettingError{Msg: fmt.Sprintf("map view: dims = %d, want 2 or 3", v.Dims)}
	}
	if len(v.Map)%v.Dims != 0 {
		return &SettingError{Msg: fmt.Sprintf("map view: %d coordinates is not a multiple of %d", len(v.Map), v.Dims)}
	}
	n := len(v.Map) / v.Dims
	switch {
	case v.Labels != nil && v.Values != nil:
		return &SettingError{Msg: "map view: colour by labels or by values, not both"}
	case v.IDs != nil && v.IDs.Len() != n, v.Rows != nil && len(v.Rows) != n, v.Labels != nil && len(v.Labels) != n,
		v.Values != nil && len(v.Values) != n, v.Placed != nil && len(v.Placed) != n, v.NoValue != nil && len(v.NoValue) != n:
		return &SettingError{Msg: fmt.Sprintf("map view: a column of the view does not have one value for each of the %d rows", n)}
	case !(v.PointSize >= 0 && v.PointSize <= 50):
		return &SettingError{Name: "point-size", Msg: fmt.Sprintf("is %g; want 0 (automatic) to 50 pixels", v.PointSize)}
	case !(v.Opacity >= 0 && v.Opacity <= 1):
		return &SettingError{Name: "opacity", Msg: fmt.Sprintf("is %g; want 0 (automatic) to 1", v.Opacity)}
	}
	return nil
}

// colouring returns the figure's colouring of v. The reference rows of a
// placement (Placed false) take no part in it: they are drawn in the
// reference grey, counted apart, and hold code 0 or NaN.
func (v *MapView) colouring() figure.Colouring {
	if v.Placed == nil && v.NoValue == nil || v.Labels == nil && v.Values == nil {
		if v.Values != nil {
			return figure.Numbers(v.By, v.Values)
		}
		return figure.Categories(v.By, v.Labels)
	}
	isRef := func(i int) bool { return v.Placed != nil && !v.Placed[i] }
	if v.Values != nil {
		kept := make([]float64, 0, len(v.Values))
		all := make([]float64, len(v.Values))
		for i, x := range v.Values {
			all[i] = math.NaN()
			if !isRef(i) {
				kept = append(kept, x)
				all[i] = x
			}
		}
		c := figure.Numbers(v.By, kept)
		c.Values = all
		return c
	}
	kept := make([]string, 0, len(v.Labels))
	for i, l := range v.Labels {
		if !isRef(i) && (v.NoValue == nil || !v.NoValue[i]) {
			kept = append(kept, l)
		}
	}
	c := figure.Categories(v.By, kept)
	c.Heading = v.By
	codes := make([]int32, len(v.Labels))
	k := 0
	for i := range codes {
		switch {
		case isRef(i):
			codes[i] = 0
		case v.NoValue != nil && v.NoValue[i]:
			codes[i] = -1
		default:
			codes[i] = c.Codes[k]
			k++
		}
	}
	c.Codes = codes
	return c
}

// WriteMaps writes map.png and map.html of v into dir, each to a temporary
// name first, then renamed. Characters that the picture's font lacks are
// drawn as boxes, and obs (which may be nil) gets one warning naming them.
func WriteMaps(dir string, v MapView, obs Observer) error {
	obs = observerOrQuiet(obs)
	if err := v.check(); err != nil {
		return err
	}
	col := v.colouring()
	var lacking []rune
	img := filepath.Join(dir, FileMap)
	if err := checkpoint.AtomicWrite(img, func(w io.Writer) (err error) {
		m := figure.Map{Y: v.Map, Dims: v.Dims, Colour: col, Placed: v.Placed}
		lacking, err = figure.DrawMap(w, m, figure.MapOptions{Title: v.Title, Caption: v.Caption, PointSize: v.PointSize, Opacity: v.Opacity})
		return err
	}); err != nil {
		return fmt.Errorf("drawing %s: %w", img, err)
	}
	if len(lacking) > 0 {
		quoted := make([]string, len(lacking))
		for i, r := range lacking {
			quoted[i] = fmt.Sprintf("%q (U+%04X)", r, r)
		}
		obs.Warn(fmt.Sprintf("%s: the font has no glyph for %s, drawn as boxes; %s shows them with the browser's fonts",
			img, strings.Join(quoted, ", "), FileMapPage))
	}
	html := filepath.Join(dir, FileMapPage)
	if err := checkpoint.AtomicWrite(html, func(w io.Writer) error { return writePage(w, &v, col) }); err != nil {
		return fmt.Errorf("writing %s: %w", html, err)
	}
	obs.Note("interactive map: " + html + " (open it in a web browser)")
	return nil
}

// WriteMapPage writes the interactive page of v (map.html) to w.
func WriteMapPage(w io.Writer, v MapView) error {
	if err := v.check(); err != nil {
		return err
	}
	return writePage(w, &v, v.colouring())
}

// writePage writes the page of v coloured by col.
func writePage(w io.Writer, v *MapView, col figure.Colouring) error {
	n := len(v.Map) / v.Dims
	keep := pageRows(n, page.MaxRows, v.Seed)
	d := page.Data{
		Title:     v.Title,
		Subtitle:  pageFacts(v, col, n),
		Caution:   Caution,
		X:         make([]float32, len(keep)),
		Y:         make([]float32, len(keep)),
		Heading:   col.Heading,
		Missing:   figure.Hex(figure.Missing),
		Reference: figure.Hex(figure.Reference),
		Plain:     figure.Hex(figure.Plain),
		PointSize: v.PointSize,
		Opacity:   v.Opacity,
		TotalRows: n,
	}
	if d.Title == "" {
		d.Title = "nightjar map"
	}
	if v.Dims == 3 {
		d.Notes = append(d.Notes, "This map has three axes; this page and map.png show the first two.")
	}
	if v.Caption != "" {
		d.Notes = append(d.Notes, v.Caption)
	}
	for k, i := range keep {
		d.X[k], d.Y[k] = float32(v.Map[i*v.Dims]), float32(v.Map[i*v.Dims+1])
	}
	if v.IDs != nil {
		d.IDs, d.IDName = make([]string, len(keep)), v.IDs.Name
		for k, i := range keep {
			d.IDs[k] = v.IDs.String(i)
		}
	}
	if v.Rows != nil || len(keep) < n {
		d.Rows = make([]int64, len(keep))
		for k, i := range keep {
			d.Rows[k] = int64(i)
			if v.Rows != nil {
				d.Rows[k] = v.Rows[i]
			}
		}
	}
	if v.Placed != nil {
		d.Placed = make([]bool, len(keep))
		for k, i := range keep {
			d.Placed[k] = v.Placed[i]
		}
	}
	pageColours(&d, col, keep)
	return page.Write(w, d)
}

// pageColours puts the colouring of the kept rows into d.
func pageColours(d *page.Data, col figure.Colouring, keep []int) {
	switch {
	case col.IsCategorical():
		d.PaletteSize = len(figure.Palette())
		d.Groups = make([]page.Group, len(col.Groups))
		for k, g := range col.Groups {
			d.Groups[k] = page.Group{Label: g.Label, Count: g.Count, Colour: figure.Hex(g.Colour)}
		}
		d.Codes = make([]int32, len(keep))
		for k, i := range keep {
			d.Codes[k] = col.Codes[i]
		}
	case col.IsNumeric():
		s := col.Scale
		ramp := figure.Ramp()
		d.Scale = &page.Scale{Lo: s.Lo, Hi: s.Hi, Ramp: make([]string, len(ramp)), Clip: s.Clip, Below: s.Below, Above: s.Above, Missing: s.Missing}
		for k, c := range ramp {
			d.Scale.Ramp[k] = figure.Hex(c)
		}
		d.Values = make([]float32, len(keep))
		for k, i := range keep {
			v := col.Values[i]
			if math.IsInf(v, 0) {
				v = math.NaN()
			}
			d.Values[k] = float32(v)
		}
	}
}

// pageFacts is the line of facts under the page's title.
func pageFacts(v *MapView, col figure.Colouring, n int) string {
	facts := figure.Thousands(n) + " points, " + fmt.Sprint(v.Dims) + "-D map"
	switch {
	case col.IsCategorical():
		facts += fmt.Sprintf(", coloured by %s (%s groups)", col.Heading, figure.Thousands(len(col.Groups)))
	case col.IsNumeric():
		facts += fmt.Sprintf(", coloured by %s (%s to %s, %s)", col.Heading, figure.Number(col.Scale.Lo), figure.Number(col.Scale.Hi), col.Scale.Clip)
	}
	if v.Placed != nil {
		placed := 0
		for _, p := range v.Placed {
			if p {
				placed++
			}
		}
		facts += fmt.Sprintf(", %s placed over %s reference rows", figure.Thousands(placed), figure.Thousands(n-placed))
	}
	return facts
}

// pageRows returns the rows a page of n rows holds: all of them, or a
// sample of max drawn uniformly (par.Sample, the same for the same seed), in
// increasing order.
func pageRows(n, max int, seed uint64) []int {
	out := make([]int, 0, min(n, max))
	if n <= max {
		for i := range n {
			out = append(out, i)
		}
		return out
	}
	for _, i := range par.Sample(n, max, seed, pageStream) {
		out = append(out, int(i))
	}
	return out
}

// mapTitle is the title of a map of input coloured by column ("" = none).
func mapTitle(input, column string) string {
	t := "nightjar map of " + filepath.Base(input)
	if column != "" {
		t += ", coloured by " + column
	}
	return t
}

// writeMaps draws the finished run's map.png and map.html, coloured by its
// label, and records the input row number of every row of the map.
func (j *job) writeMaps(y []float64, labels []string) error {
	t := j.table
	rows, known := inputRows(t)
	if err := saveRows(j.run, rows, known, t.N); err != nil {
		return err
	}
	v := MapView{Map: y, Dims: j.s.Dims, IDs: t.ID, Rows: rows, Labels: labels, Title: mapTitle(j.s.Input, j.s.Label), Seed: j.s.Seed}
	if t.Label != nil {
		v.By = t.Label.Name
	}
	return WriteMaps(j.run.Dir, v, j.obs)
}
