package page

import (
	"bufio"
	"bytes"
	"compress/gzip"
	"crypto/sha256"
	_ "embed"
	"encoding/base64"
	"encoding/binary"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"strings"
)

// The page's parts, embedded in the binary.
var (
	//go:embed page.html
	shell string
	//go:embed page.css
	css string
	//go:embed render.js
	renderJS string
	//go:embed legend.js
	legendJS string
	//go:embed page.js
	pageJS string
	// script is the page's one script, whose hash the page's content
	// security policy names: no other script can run in it.
	script = renderJS + legendJS + pageJS
	hash   = scriptHash(script)
)

// scriptHash returns the CSP source of s: "sha256-" and its base64 digest.
func scriptHash(s string) string {
	sum := sha256.Sum256([]byte(s))
	return "sha256-" + base64.StdEncoding.EncodeToString(sum[:])
}

// MaxRows is the largest number of rows a page holds; a caller with more
// gives the page a sample (Data.TotalRows says how many rows the map has),
// and the page says so.
const MaxRows = 2_000_000

// Group is a category of the colouring: its label, its number of rows in the
// whole map, and its colour as "#rrggbb".
type Group struct {
	Label  string `json:"label"`
	Count  int    `json:"count"`
	Colour string `json:"colour"`
}

// Scale describes a colouring by number: the values at the ends of the
// colour ramp, the colours of the ramp from low to high ("#rrggbb"), how the
// ends were chosen, and how many rows fall below, above or have no value.
type Scale struct {
	Lo      float64  `json:"lo"`
	Hi      float64  `json:"hi"`
	Ramp    []string `json:"ramp"`
	Clip    string   `json:"clip"`
	Below   int      `json:"below"`
	Above   int      `json:"above"`
	Missing int      `json:"missing"`
}

// Data is what a page shows. X, Y and every per-row slice given have one
// entry per row of the page.
type Data struct {
	Title    string   // the page's heading
	Subtitle string   // a line of facts under it
	Caution  string   // always on screen
	Notes    []string // further lines for the user (a 3-D map drawn by two axes…)

	X, Y []float32 // positions (finite)

	IDs    []string // the rows' ids, or nil
	IDName string   // the id column's name
	// Rows holds each row's 0-based row number in the input table, or is nil
	// when row i of the page is row i of the input.
	Rows []int64

	Heading string    // what colours the points (a column's name)
	Groups  []Group   // categories, in legend order
	Codes   []int32   // per row: its group, or −1 for no value
	Values  []float32 // per row: its number, NaN for none (with Scale)
	Scale   *Scale
	// PaletteSize is the number of distinct colours of Groups; the legend
	// says when there are more groups than colours.
	PaletteSize int

	// Placed is nil, or per row true for a placed row (drawn in its colour
	// over the others) and false for a reference row (drawn in Reference).
	Placed []bool

	Missing, Reference, Plain string // colours of no value, reference rows, uncoloured rows

	PointSize float64 // diameter in CSS pixels at the first view; 0 = by row count
	Opacity   float64 // per point in (0, 1]; 0 = by density

	// TotalRows is the number of rows of the whole map: more than len(X)
	// when the page holds a sample.
	TotalRows int
}

// meta is the page's JSON header: everything but the per-row arrays, which
// follow in one compressed block described by Sections.
type meta struct {
	Title       string     `json:"title"`
	Subtitle    string     `json:"subtitle"`
	Caution     string     `json:"caution"`
	Notes       []string   `json:"notes"`
	N           int        `json:"n"`
	Total       int        `json:"total"`
	MaxRows     int        `json:"maxRows"`
	IDName      string     `json:"idName"`
	Heading     string     `json:"heading"`
	Groups      []Group    `json:"groups"`
	NoValue     int        `json:"noValue"`
	Scale       *Scale     `json:"scale"`
	PaletteSize int        `json:"paletteSize"`
	Missing     string     `json:"missing"`
	Reference   string     `json:"reference"`
	Plain       string     `json:"plain"`
	PointSize   float64    `json:"pointSize"`
	Opacity     float64    `json:"opacity"`
	Sections    []section  `json:"sections"`
	Bytes       int        `json:"bytes"`
	Bounds      [4]float64 `json:"bounds"` // min x, min y, max x, max y
}

// section is one array of the data block: its name, element type
// ("f32", "u8", "u16", "u32", "f64"), byte offset (a multiple of 8) and length.
type section struct {
	Name   string `json:"name"`
	Type   string `json:"type"`
	Offset int    `json:"offset"`
	Len    int    `json:"len"`
}

// check reports inconsistent data.
func (d *Data) check() error {
	n := len(d.X)
	if len(d.Y) != n {
		return fmt.Errorf("map page: %d x and %d y positions", n, len(d.Y))
	}
	if n > MaxRows {
		return fmt.Errorf("map page: %d rows, more than the %d a page holds", n, MaxRows)
	}
	for name, k := range map[string]int{"ids": len(d.IDs), "row numbers": len(d.Rows), "codes": len(d.Codes), "values": len(d.Values), "placed flags": len(d.Placed)} {
		if k != 0 && k != n {
			return fmt.Errorf("map page: %d %s for %d rows", k, name, n)
		}
	}
	if d.Codes != nil && d.Values != nil {
		return fmt.Errorf("map page: colouring by both category and number")
	}
	if d.Values != nil && d.Scale == nil {
		return fmt.Errorf("map page: values without a scale")
	}
	for i, c := range d.Codes {
		if c < -1 || int(c) >= len(d.Groups) {
			return fmt.Errorf("map page: row %d has group %d of %d", i, c, len(d.Groups))
		}
	}
	for i := range n {
		if !finite32(d.X[i]) || !finite32(d.Y[i]) {
			return fmt.Errorf("map page: row %d has a non-finite position", i)
		}
	}
	if d.TotalRows != 0 && d.TotalRows < n {
		return fmt.Errorf("map page: %d rows in all but %d in the page", d.TotalRows, n)
	}
	return nil
}

func finite32(v float32) bool { return !math.IsNaN(float64(v)) && !math.IsInf(float64(v), 0) }

// Write writes the page of d to w: one self-contained HTML file (no network,
// no outside scripts or fonts) whose data sit in it compressed. Identical
// data give identical bytes. Write returns an error for inconsistent data
// or a failed write.
func Write(w io.Writer, d Data) error {
	if err := d.check(); err != nil {
		return err
	}
	block, secs := pack(&d)
	m := meta{
		Title: d.Title, Subtitle: d.Subtitle, Caution: d.Caution, Notes: d.Notes,
		N: len(d.X), Total: max(d.TotalRows, len(d.X)), MaxRows: MaxRows,
		IDName: d.IDName, Heading: d.Heading, Groups: d.Groups, NoValue: noValue(d.Codes), Scale: d.Scale, PaletteSize: d.PaletteSize,
		Missing: d.Missing, Reference: d.Reference, Plain: d.Plain,
		PointSize: d.PointSize, Opacity: d.Opacity, Sections: secs, Bytes: len(block),
		Bounds: bounds(d.X, d.Y),
	}
	if m.Notes == nil {
		m.Notes = []string{}
	}
	if m.Groups == nil {
		m.Groups = []Group{}
	}
	// encoding/json escapes <, > and & inside strings (\u003c…), so no
	// label or id can close the script element that holds the header.
	head, err := json.Marshal(m)
	if err != nil {
		return fmt.Errorf("map page: encoding its header: %w", err)
	}
	var z bytes.Buffer
	gz, _ := gzip.NewWriterLevel(&z, gzip.DefaultCompression)
	if _, err := gz.Write(block); err != nil {
		return fmt.Errorf("map page: compressing its data: %w", err)
	}
	if err := gz.Close(); err != nil {
		return fmt.Errorf("map page: compressing its data: %w", err)
	}
	return fill(w, string(head), z.Bytes())
}

// fill writes the shell with its slots filled: the script's hash, the
// style, the header, the data (base64 of the gzip stream) and the script.
func fill(w io.Writer, head string, data []byte) error {
	bw := bufio.NewWriterSize(w, 1<<16)
	rest := shell
	for _, slot := range []string{"/*HASH*/", "/*STYLE*/", "/*META*/", "/*DATA*/", "/*SCRIPT*/"} {
		i := strings.Index(rest, slot)
		if i < 0 {
			return fmt.Errorf("map page: the page shell lacks %s", slot)
		}
		bw.WriteString(rest[:i])
		rest = rest[i+len(slot):]
		switch slot {
		case "/*HASH*/":
			bw.WriteString(hash)
		case "/*STYLE*/":
			bw.WriteString(css)
		case "/*META*/":
			bw.WriteString(head)
		case "/*DATA*/":
			enc := base64.NewEncoder(base64.StdEncoding, bw)
			enc.Write(data)
			enc.Close()
		case "/*SCRIPT*/":
			bw.WriteString(script)
		}
	}
	bw.WriteString(rest)
	if err := bw.Flush(); err != nil {
		return fmt.Errorf("map page: %w", err)
	}
	return nil
}

// noValue counts the rows without a group.
func noValue(codes []int32) int {
	k := 0
	for _, c := range codes {
		if c < 0 {
			k++
		}
	}
	return k
}

// bounds returns the bounding box of the positions (zeros for none).
func bounds(x, y []float32) [4]float64 {
	if len(x) == 0 {
		return [4]float64{}
	}
	b := [4]float64{math.Inf(1), math.Inf(1), math.Inf(-1), math.Inf(-1)}
	for i := range x {
		b[0], b[1] = math.Min(b[0], float64(x[i])), math.Min(b[1], float64(y[i]))
		b[2], b[3] = math.Max(b[2], float64(x[i])), math.Max(b[3], float64(y[i]))
	}
	return b
}

// packer lays arrays one after the other, each at an offset that is a
// multiple of 8 (so the page can view them in place as typed arrays).
type packer struct {
	buf  []byte
	secs []section
}

func (p *packer) add(name, typ string, n int, data []byte) {
	for len(p.buf)%8 != 0 {
		p.buf = append(p.buf, 0)
	}
	p.secs = append(p.secs, section{Name: name, Type: typ, Offset: len(p.buf), Len: n})
	p.buf = append(p.buf, data...)
}

// pack returns the data block of d and its sections: x and y (f32); codes
// as code+1 (0 = no value) in u8 or u16; values (f32); placed (u8); input
// row numbers (u32, or f64 beyond 2³²−1); ids as byte lengths (u8, u16 or
// u32) and their UTF-8 bytes one after the other (u8).
func pack(d *Data) ([]byte, []section) {
	var p packer
	p.add("x", "f32", len(d.X), f32bytes(d.X))
	p.add("y", "f32", len(d.Y), f32bytes(d.Y))
	if d.Codes != nil {
		if len(d.Groups) < 255 {
			b := make([]byte, len(d.Codes))
			for i, c := range d.Codes {
				b[i] = byte(c + 1)
			}
			p.add("codes", "u8", len(b), b)
		} else {
			b := make([]byte, 2*len(d.Codes))
			for i, c := range d.Codes {
				binary.LittleEndian.PutUint16(b[2*i:], uint16(c+1))
			}
			p.add("codes", "u16", len(d.Codes), b)
		}
	}
	if d.Values != nil {
		p.add("values", "f32", len(d.Values), f32bytes(d.Values))
	}
	if d.Placed != nil {
		b := make([]byte, len(d.Placed))
		for i, v := range d.Placed {
			if v {
				b[i] = 1
			}
		}
		p.add("placed", "u8", len(b), b)
	}
	if d.Rows != nil {
		packRows(&p, d.Rows)
	}
	if d.IDs != nil {
		packIDs(&p, d.IDs)
	}
	return p.buf, p.secs
}

func packRows(p *packer, rows []int64) {
	big := false
	for _, r := range rows {
		big = big || r < 0 || r > math.MaxUint32
	}
	if !big {
		b := make([]byte, 4*len(rows))
		for i, r := range rows {
			binary.LittleEndian.PutUint32(b[4*i:], uint32(r))
		}
		p.add("rows", "u32", len(rows), b)
		return
	}
	b := make([]byte, 8*len(rows))
	for i, r := range rows {
		binary.LittleEndian.PutUint64(b[8*i:], math.Float64bits(float64(r)))
	}
	p.add("rows", "f64", len(rows), b)
}

func packIDs(p *packer, ids []string) {
	longest, total := 0, 0
	for _, s := range ids {
		longest = max(longest, len(s))
		total += len(s)
	}
	var lens []byte
	typ := "u8"
	switch {
	case longest < 1<<8:
		lens = make([]byte, len(ids))
		for i, s := range ids {
			lens[i] = byte(len(s))
		}
	case longest < 1<<16:
		typ = "u16"
		lens = make([]byte, 2*len(ids))
		for i, s := range ids {
			binary.LittleEndian.PutUint16(lens[2*i:], uint16(len(s)))
		}
	default:
		typ = "u32"
		lens = make([]byte, 4*len(ids))
		for i, s := range ids {
			binary.LittleEndian.PutUint32(lens[4*i:], uint32(len(s)))
		}
	}
	p.add("idLengths", typ, len(ids), lens)
	text := make([]byte, 0, total)
	for _, s := range ids {
		text = append(text, s...)
	}
	p.add("idText", "u8", len(text), text)
}

// f32bytes returns the little-endian bytes of v.
func f32bytes(v []float32) []byte {
	b := make([]byte, 4*len(v))
	for i, x := range v {
		binary.LittleEndian.PutUint32(b[4*i:], math.Float32bits(x))
	}
	return b
}
