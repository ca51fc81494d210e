package ingest

import (
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"errors"
	"hash"
	"io"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"unicode/utf8"

	"nightjar/internal/core"
)

// DefaultBatchRows is the number of rows read per chunk when Options.BatchRows is 0.
const DefaultBatchRows = 65536

// Options selects the columns to read and says how to treat bad values.
type Options struct {
	// Features lists feature column names or path.Match glob patterns (e.g. "pc_*"),
	// in the order wanted in the matrix; a pattern contributes its matches in file order.
	// Empty means every numeric column except ID and Label, in file order.
	Features []string
	// ID and Label name optional pass-through columns ("" = none).
	ID, Label string
	// SkipInvalid drops rows whose features hold NaN, ±Inf, null or (CSV) text that is
	// not a number, and counts them in Table.Skipped, instead of failing.
	SkipInvalid bool
	// BatchRows is the number of rows per chunk; 0 means DefaultBatchRows, or fewer
	// for tables wider than 64 features (about 4M values per chunk, at least 1024 rows).
	// Arrow IPC files are read one record batch at a time whatever their size.
	BatchRows int
	// Progress, if non-nil, is called after each chunk with the number of input rows
	// consumed so far (kept and skipped) and the total, or -1 when the total is not
	// known in advance (CSV, Arrow IPC stream). It runs on the calling goroutine.
	Progress func(doneRows, totalRows int64)
	// Threads is the number of goroutines that parse CSV numbers and, in
	// ReadReduced, accumulate the covariance and project the rows; below 1 means 1.
	// The result does not depend on it.
	Threads int
}

// Table is a feature table read by Read.
type Table struct {
	// Matrix holds the N×D features as float32, rows in input order after skipping.
	// Integer features wider than 24 bits are rounded to the nearest float32.
	core.Matrix
	// Features holds the D feature column names, in matrix column order.
	Features []string
	// ID and Label are the pass-through columns, each of length N, or nil when not
	// requested. An integer id column gives Ints, a text id column gives Strings.
	// Labels are always Strings; an integer label is formatted in base 10 and a null
	// label becomes "".
	ID, Label *Column
	// Skipped counts the rows dropped by Options.SkipInvalid.
	Skipped int64
	// Hash is the hex SHA-256 digest of D as a little-endian uint64 followed by the
	// float32 feature values (little-endian IEEE 754 bits) in row-major order: a
	// fingerprint of the matrix that does not depend on the file format.
	Hash string
	// Format is "parquet", "arrow" (IPC file), "arrow-stream" (IPC stream) or "csv".
	Format string
}

// Read reads the table at path into memory, chunk by chunk, as described by opt.
//
// The format is detected from the first and last bytes (Parquet "PAR1", Arrow IPC
// file "ARROW1", Arrow IPC stream continuation marker), falling back to the file
// extension and to a text check for CSV (header row required, comma separated, or tab
// separated when the extension is .tsv or the header holds tabs and no commas).
// Parquet and Arrow IPC are read with Arrow's Go library one record batch at a time,
// straight into the row-major matrix; where the row count is known up front (Parquet
// metadata, Arrow IPC file) the matrix is allocated once at its final size.
//
// Features may be of any integer width, float16, float32, float64 or decimal type;
// booleans, text, dates and nested types are not numeric. A CSV column is numeric when
// at least half of its non-empty values among the first 1000 rows parse as numbers
// (strconv.ParseFloat: "NaN" and "Inf" count); its other values are then bad values.
// An empty CSV cell is a null. Ids may be integers or text (CSV: integers when every
// sampled id is a canonical base-10 int64, else text); labels may be text, dictionary-
// encoded text or integers. A null label reads as "", a null id is an error.
//
// Every problem with the input (unreadable, foreign, truncated or damaged file,
// missing column, non-numeric feature, NaN/Inf/null/unparseable feature value without
// SkipInvalid, null id, no rows left) is returned as an *InputError whose message is
// one line naming the file, and the column and 1-based row when they apply. A panic
// inside the Parquet or Arrow decoders on a damaged file is recovered into such an
// error too.
//
// Memory: one copy of the N×D float32 matrix plus the id and label columns plus one
// chunk being decoded, and the garbage the decoders leave behind (for Parquet about 4
// bytes per byte of chunk data, for CSV about 2 bytes per input byte). Read does not
// touch the garbage collector. The matrix holds no pointers and, when pre-sized, is
// live from the start, so with the default GOGC of 100 the collector lets that
// garbage grow to about the size of the matrix: peak memory approaches two copies
// of it. A caller that needs the peak near one copy can collect from Progress, which
// runs after every chunk (runtime.GC every 32 MiB or so of chunk data costs little),
// or lower GOGC or set a memory limit (runtime/debug) while Read runs.
func Read(path string, opt Options) (*Table, error) {
	return read(path, opt, readCtl{})
}

// batchSink receives the rows of each chunk after validation. Used by the streaming
// PCA to avoid keeping the matrix.
type batchSink func(rows core.Matrix) error

// readCtl tells read what to keep: with a sink the matrix is not kept (each chunk
// goes to the sink only); noPass skips the id and label columns.
type readCtl struct {
	sink   batchSink
	noPass bool
}

// batch returns the chunk size in rows for d features: Options.BatchRows, or by
// default DefaultBatchRows rows but no more than about chunkValues values (wide
// tables: the decoders hold a chunk of every column at once).
func (c readCtl) batch(opt Options, d int) int {
	if opt.BatchRows > 0 {
		return opt.BatchRows
	}
	return min(DefaultBatchRows, max(1024, chunkValues/max(d, 1)))
}

// chunkValues bounds the values per chunk when Options.BatchRows is 0.
const chunkValues = 4 << 20

func read(path string, opt Options, ctl readCtl) (*Table, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, wrapInputErr(path, "", 0, unwrapPathErr(err), "cannot open")
	}
	defer f.Close()
	st, err := f.Stat()
	if err != nil {
		return nil, wrapInputErr(path, "", 0, unwrapPathErr(err), "cannot open")
	}
	if st.IsDir() {
		return nil, inputErr(path, "", 0, "is a directory, not a table file")
	}
	format, err := detect(path, f, st.Size())
	if err != nil {
		return nil, err
	}
	if _, err := f.Seek(0, io.SeekStart); err != nil {
		return nil, wrapInputErr(path, "", 0, err, "cannot read")
	}
	var t *Table
	switch format {
	case "parquet":
		t, err = guard(path, "Parquet file", func() (*Table, error) { return readParquet(path, f, opt, ctl) })
	case "arrow":
		t, err = guard(path, "Arrow IPC file", func() (*Table, error) { return readArrowFile(path, f, opt, ctl) })
	case "arrow-stream":
		t, err = guard(path, "Arrow IPC stream", func() (*Table, error) { return readArrowStream(path, f, opt, ctl) })
	default:
		t, err = readCSV(path, f, opt, ctl)
	}
	if err != nil {
		return nil, err
	}
	t.Format = format
	return t, nil
}

// guard runs read and turns a panic into an InputError: the Arrow and Parquet
// decoders trust the offsets they find in a file and may panic on a damaged one
// (seen with a flipped byte in an Arrow IPC footer). Decoding runs on this goroutine
// only (pqarrow's parallel column reading is left off for this reason).
func guard(path, what string, read func() (*Table, error)) (t *Table, err error) {
	defer func() {
		if r := recover(); r != nil {
			t, err = nil, inputErr(path, "", 0, "corrupt %s (decoder failed: %v)", what, r)
		}
	}()
	return read()
}

func unwrapPathErr(err error) error {
	var pe *os.PathError
	if errors.As(err, &pe) {
		return pe.Err
	}
	return err
}

var (
	parquetMagic = []byte("PAR1")
	arrowMagic   = []byte("ARROW1")
	streamMagic  = []byte{0xff, 0xff, 0xff, 0xff}
)

// detect decides the format of f from its magic bytes, then its extension.
func detect(path string, f io.ReaderAt, size int64) (string, error) {
	if size == 0 {
		return "", inputErr(path, "", 0, "empty file, not a Parquet, Arrow or CSV table")
	}
	head := make([]byte, min(size, 4096))
	if _, err := f.ReadAt(head, 0); err != nil && err != io.EOF {
		return "", wrapInputErr(path, "", 0, err, "cannot read")
	}
	tail := make([]byte, min(size, 8))
	if _, err := f.ReadAt(tail, size-int64(len(tail))); err != nil && err != io.EOF {
		return "", wrapInputErr(path, "", 0, err, "cannot read")
	}
	switch {
	case bytes.HasPrefix(head, parquetMagic):
		if size < 12 || !bytes.HasSuffix(tail, parquetMagic) {
			return "", inputErr(path, "", 0, "truncated Parquet file (no footer)")
		}
		return "parquet", nil
	case bytes.HasPrefix(head, arrowMagic):
		if size < 12 || !bytes.HasSuffix(tail, arrowMagic) {
			return "", inputErr(path, "", 0, "truncated Arrow IPC file (no footer)")
		}
		return "arrow", nil
	case bytes.HasPrefix(head, streamMagic):
		return "arrow-stream", nil
	}
	ext := strings.ToLower(filepath.Ext(path))
	switch ext {
	case ".parquet", ".pq":
		if bytes.HasPrefix(parquetMagic, head) {
			return "", inputErr(path, "", 0, "truncated Parquet file")
		}
	case ".arrow", ".feather", ".ipc":
		if bytes.HasPrefix(arrowMagic, head) {
			return "", inputErr(path, "", 0, "truncated Arrow IPC file")
		}
	case ".arrows":
		if bytes.HasPrefix(streamMagic, head) {
			return "", inputErr(path, "", 0, "truncated Arrow IPC stream")
		}
	}
	if looksLikeText(head, size > int64(len(head))) {
		return "csv", nil
	}
	return "", inputErr(path, "", 0, "not a Parquet, Arrow or CSV table")
}

// looksLikeText reports whether head is UTF-8 text without NUL or other control bytes
// (tab, CR, LF excepted). When cut is true head is a prefix of the file and a rune
// split at its end is allowed.
func looksLikeText(head []byte, cut bool) bool {
	if cut {
		// Drop a possibly split rune at the end.
		for k := 0; k < utf8.UTFMax && len(head) > 0; k++ {
			r, n := utf8.DecodeLastRune(head)
			if r != utf8.RuneError || n != 1 {
				break
			}
			head = head[:len(head)-1]
		}
	}
	if !utf8.Valid(head) {
		return false
	}
	for _, c := range head {
		if c < 0x20 && c != '\t' && c != '\n' && c != '\r' {
			return false
		}
	}
	return true
}

// Reasons a feature value is rejected.
const (
	badNone uint8 = iota
	badNaN
	badPosInf
	badNegInf
	badNull
	badText
)

var badReason = [...]string{
	badNaN:    "value is NaN",
	badPosInf: "value is +Inf",
	badNegInf: "value is -Inf",
	badNull:   "value is null",
	badText:   "value is not a number",
}

// mark records the first rejected feature of a row.
type mark struct {
	col  int32
	why  uint8
	text string // offending text, CSV only
}

// builder accumulates validated rows into the row-major matrix, chunk by chunk.
type builder struct {
	file     string
	names    []string // feature names
	d        int
	skip     bool
	keepData bool      // false: rows go to sink only (streaming PCA)
	sink     batchSink // may be nil
	data     []float32
	skipped  int64
	seen     int64 // input rows consumed so far, kept or skipped
	kept     int64
	h        hash.Hash
	hbuf     []byte
	marks    []mark
	keep     []bool
	bad      bool // some mark set in the current chunk
	start    int  // len(data) at the start of the chunk
}

// presizeRows returns how many rows to allocate up front for a file of fileSize bytes
// whose metadata announces total rows of d features: total, unless the matrix would
// exceed both 1 GiB and 64 bytes per byte of file (a damaged header must not make us
// allocate without bound; the matrix then grows as rows arrive).
func presizeRows(total int64, d int, fileSize int64) int64 {
	if total <= 0 || d <= 0 {
		return 0
	}
	limit := max(int64(1)<<30, 64*fileSize) / (4 * int64(d))
	if total > limit {
		return 0
	}
	return total
}

func newBuilder(file string, names []string, opt Options, capRows int64, ctl readCtl) *builder {
	b := &builder{file: file, names: names, d: len(names), skip: opt.SkipInvalid, sink: ctl.sink, keepData: ctl.sink == nil, h: sha256.New()}
	if b.keepData && capRows > 0 {
		b.data = make([]float32, 0, capRows*int64(b.d))
	}
	var hdr [8]byte
	binary.LittleEndian.PutUint64(hdr[:], uint64(b.d))
	b.h.Write(hdr[:])
	return b
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
// then appends pass-through values for kept rows and calls advance.
func (b *builder) finish() ([]bool, error) {
	n := len(b.marks)
	if !b.bad {
		return nil, b.emit(n)
	}
	keep := b.keep[:n]
	w := b.start
	for i, m := range b.marks {
		if m.why != badNone {
			if !b.skip {
				reason := badReason[m.why]
				if m.text != "" {
					reason += ": " + quoteShort(m.text)
				}
				return nil, inputErr(b.file, b.names[m.col], b.seen+int64(i)+1, "%s", reason)
			}
			keep[i] = false
			b.skipped++
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

// emit hashes the kept rows of the chunk and hands them to the sink.
func (b *builder) emit(rows int) error {
	region := b.data[b.start:]
	b.hashFloats(region)
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
		Matrix:   core.Matrix{N: int(b.kept), D: b.d},
		Features: b.names,
		Skipped:  b.skipped,
		Hash:     hex.EncodeToString(b.h.Sum(nil)),
	}
	if b.keepData {
		t.Data = b.data
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
