package ingest

import (
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"hash"
	"math"
	"strconv"
	"unicode/utf8"

	"nightjar/internal/core"
)

// Reasons a feature value is rejected.
const (
	badNone uint8 = iota
	badNaN
	badPosInf
	badNegInf
	badNull
	badText
	badRange
)

var badReason = [...]string{
	badNaN:    "value is NaN",
	badPosInf: "value is +Inf",
	badNegInf: "value is -Inf",
	badNull:   "value is null",
	badText:   "value is not a number",
	badRange:  "value is outside the float32 range (about ±3.4e38) in which features are held",
}

// mark records the first rejected feature of a row.
type mark struct {
	col  int32
	why  uint8
	text string // offending text, CSV only
}

// SkippedRow is a row dropped by Options.SkipInvalid.
type SkippedRow struct {
	File   string // the part the row is in
	Row    int64  // 1-based data row in File
	ID     string // the row's id as text, "" without an id column
	Column string // the first rejected feature column
	Reason string
}

// MaxSkippedRows bounds Table.SkippedRows; Table.Skipped counts them all.
const MaxSkippedRows = 100000

// FewDistinct is the largest number of distinct values for which an integer
// feature column is listed in Table.FewValues.
const FewDistinct = 10

// builder accumulates validated rows into the row-major matrix, chunk by chunk,
// over every part of a dataset.
type builder struct {
	file     string
	names    []string // matrix column names
	d        int
	skip     bool
	keepData bool      // false: rows go to sink only (streaming PCA)
	sink     batchSink // may be nil
	data     []float32
	skipped  int64
	seen     int64 // input rows of the current part consumed so far, kept or skipped
	kept     int64
	h        hash.Hash
	hbuf     []byte
	marks    []mark
	keep     []bool
	bad      bool // some mark set in the current chunk
	start    int  // len(data) at the start of the chunk
	skips    []SkippedRow
	fresh    []int32    // chunk rows of the skips recorded in this chunk
	few      []*fewInts // the integer columns' distinct values
}

// fewInts keeps the distinct values of an integer column while there are at
// most FewDistinct of them.
type fewInts struct {
	col  int
	vals []float32
	over bool
}

// presizeRows returns how many rows to allocate up front for a file of fileSize bytes
// whose metadata announces total rows of d features: total, unless the matrix would
// exceed both 64 MiB and 64 bytes per byte of file (a damaged header must not make us
// allocate what the file cannot hold; the matrix then grows as rows arrive).
func presizeRows(total int64, d int, fileSize int64) int64 {
	if total <= 0 || d <= 0 {
		return 0
	}
	limit := max(int64(64)<<20, 64*fileSize) / (4 * int64(d))
	if total > limit {
		return 0
	}
	return total
}

// newBuilder returns a builder for matrix columns names; intCols lists the
// matrix columns that hold integers (tracked for Table.FewValues).
func newBuilder(file string, names []string, intCols []int, opt Options, capRows int64, ctl readCtl) *builder {
	b := &builder{file: file, names: names, d: len(names), skip: opt.SkipInvalid, sink: ctl.sink, keepData: ctl.sink == nil, h: sha256.New()}
	if b.keepData && capRows > 0 {
		b.data = make([]float32, 0, capRows*int64(b.d))
	}
	if !ctl.noPass {
		for _, j := range intCols {
			b.few = append(b.few, &fewInts{col: j})
		}
	}
	var hdr [8]byte
	binary.LittleEndian.PutUint64(hdr[:], uint64(b.d))
	b.h.Write(hdr[:])
	return b
}

// reserve makes room for rows more rows without a later copy.
func (b *builder) reserve(rows int64) {
	if !b.keepData || rows <= 0 {
		return
	}
	need := int64(len(b.data)) + rows*int64(b.d)
	if need > int64(cap(b.data)) {
		grown := make([]float32, len(b.data), max(need, int64(cap(b.data))*5/4))
		copy(grown, b.data)
		b.data = grown
	}
}

// begin starts a chunk of n rows and returns the n×D region to fill.
func (b *builder) begin(n int) []float32 {
	b.start = len(b.data)
	need := b.start + n*b.d
	if need > cap(b.data) {
		grown := make([]float32, b.start, max(need, cap(b.data)+cap(b.data)/4))
		copy(grown, b.data)
		b.data = grown
	}
	b.data = b.data[:need]
	if cap(b.marks) < n {
		b.marks = make([]mark, n)
		b.keep = make([]bool, n)
	}
	b.marks = b.marks[:n]
	clear(b.marks)
	b.bad = false
	b.fresh = b.fresh[:0]
	return b.data[b.start:need]
}

// markBad records that feature column j of chunk row i is rejected, keeping the first.
func (b *builder) markBad(i, j int, why uint8, text string) {
	if b.marks[i].why == badNone {
		b.marks[i] = mark{col: int32(j), why: why, text: text}
		b.bad = true
	}
}

// finish validates the chunk: it fails on the first bad row unless skipping, else it
// drops bad rows. It returns the keep mask (nil when every row is kept); the caller
// then appends pass-through values for kept rows, calls noteIDs, and calls advance.
func (b *builder) finish() ([]bool, error) {
	n := len(b.marks)
	if !b.bad {
		return nil, b.emit(n)
	}
	keep := b.keep[:n]
	w := b.start
	for i, m := range b.marks {
		if m.why != badNone {
			reason := badReason[m.why]
			if m.text != "" {
				reason += ": " + quoteShort(m.text)
			}
			if !b.skip {
				return nil, inputErr(b.file, b.names[m.col], b.seen+int64(i)+1, "%s", reason)
			}
			keep[i] = false
			b.skipped++
			if len(b.skips) < MaxSkippedRows {
				b.skips = append(b.skips, SkippedRow{File: b.file, Row: b.seen + int64(i) + 1, Column: b.names[m.col], Reason: reason})
				b.fresh = append(b.fresh, int32(i))
			}
			continue
		}
		keep[i] = true
		r := b.start + i*b.d
		if w != r {
			copy(b.data[w:w+b.d], b.data[r:r+b.d])
		}
		w += b.d
	}
	b.data = b.data[:w]
	return keep, b.emit((w - b.start) / b.d)
}

// noteIDs gives the rows skipped in this chunk their ids: id(i) is the id of
// chunk row i as text.
func (b *builder) noteIDs(id func(i int) string) {
	first := len(b.skips) - len(b.fresh)
	for k, i := range b.fresh {
		b.skips[first+k].ID = id(int(i))
	}
}

// emit hashes the kept rows of the chunk, tracks integer columns and hands the
// rows to the sink.
func (b *builder) emit(rows int) error {
	region := b.data[b.start:]
	b.hashFloats(region)
	b.trackFew(region, rows)
	b.kept += int64(rows)
	if b.sink != nil {
		if err := b.sink(core.Matrix{N: rows, D: b.d, Data: region}); err != nil {
			return err
		}
	}
	if !b.keepData {
		b.data = b.data[:b.start]
	}
	return nil
}

// trackFew adds the values of the integer columns of rows to their distinct sets.
func (b *builder) trackFew(region []float32, rows int) {
	for _, f := range b.few {
		if f.over {
			continue
		}
		for i := 0; i < rows && !f.over; i++ {
			v := region[i*b.d+f.col]
			found := false
			for _, u := range f.vals {
				if u == v {
					found = true
					break
				}
			}
			if !found {
				f.vals = append(f.vals, v)
				if len(f.vals) > FewDistinct {
					f.over, f.vals = true, nil
				}
			}
		}
	}
}

// advance counts the n input rows of the chunk just finished as consumed.
func (b *builder) advance(n int) { b.seen += int64(n) }

// table returns the finished table, or the empty-table error.
func (b *builder) table() (*Table, error) {
	if b.kept == 0 {
		if b.skipped > 0 {
			return nil, inputErr(b.file, "", 0, "empty table: all %d rows were dropped for invalid values", b.skipped)
		}
		return nil, inputErr(b.file, "", 0, "empty table (0 rows)")
	}
	t := &Table{
		Matrix:      core.Matrix{N: int(b.kept), D: b.d},
		Features:    b.names,
		Skipped:     b.skipped,
		SkippedRows: b.skips,
		Hash:        hex.EncodeToString(b.h.Sum(nil)),
	}
	if b.keepData {
		t.Data = b.data
	}
	for _, f := range b.few {
		if !f.over {
			t.FewValues = append(t.FewValues, FewValued{Column: b.names[f.col], Values: sortedFloats(f.vals)})
		}
	}
	return t, nil
}

// quoteShort quotes s for a message, shortening it to at most 40 runes.
func quoteShort(s string) string {
	if utf8.RuneCountInString(s) > 40 {
		r := []rune(s)
		s = string(r[:40]) + "…"
	}
	return strconv.Quote(s)
}

// hashBlock is the number of values hashed per Write call.
const hashBlock = 1 << 14

// hashFloats feeds the little-endian bits of vals to the fingerprint.
func (b *builder) hashFloats(vals []float32) {
	if b.hbuf == nil {
		b.hbuf = make([]byte, 4*hashBlock)
	}
	for len(vals) > 0 {
		m := min(len(vals), hashBlock)
		buf := b.hbuf[:4*m]
		for k, v := range vals[:m] {
			binary.LittleEndian.PutUint32(buf[4*k:], math.Float32bits(v))
		}
		b.h.Write(buf)
		vals = vals[m:]
	}
}

// truncate shortens the current chunk to n rows (n ≤ the rows given to begin).
func (b *builder) truncate(n int) {
	b.data = b.data[:b.start+n*b.d]
	b.marks = b.marks[:n]
}

// Fingerprint returns the digest that Read gives as Table.Hash to a table whose
// features are m (see Table.Hash), for matrices made without reading a file.
func Fingerprint(m core.Matrix) string {
	b := &builder{d: m.D, h: sha256.New()}
	var hdr [8]byte
	binary.LittleEndian.PutUint64(hdr[:], uint64(m.D))
	b.h.Write(hdr[:])
	b.hashFloats(m.Data[:m.N*m.D])
	return hex.EncodeToString(b.h.Sum(nil))
}
