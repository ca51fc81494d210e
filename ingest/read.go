package ingest

import (
	"bytes"
	"errors"
	"io"
	"os"
	"path/filepath"
	"slices"
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
	// consumed so far (kept and skipped, over every part) and the total, or -1 when
	// the total is not known in advance (CSV, Arrow IPC stream). It runs on the
	// calling goroutine.
	Progress func(doneRows, totalRows int64)
	// Threads is the number of goroutines that parse CSV numbers and, when
	// reducing, accumulate the principal components and project the rows; below
	// 1 means 1. The result does not depend on it.
	Threads int
}

// Table is a feature table read by Read.
type Table struct {
	// Matrix holds the N×D features as float32, rows in input order after skipping.
	// Integer features wider than 24 bits are rounded to the nearest float32.
	core.Matrix
	// Features holds the D feature column names, in matrix column order; a vector
	// column of width w named v gives "v[0]" … "v[w-1]".
	Features []string
	// Columns describes the input columns the features come from, in matrix
	// column order (nil for a table made in memory).
	Columns []FeatureColumn
	// SourceFeatures, for a table reduced to principal components, holds the
	// names of the D input features the components project (Features is
	// then "pc_1" … "pc_k"); nil otherwise.
	SourceFeatures []string
	// ID and Label are the pass-through columns, each of length N, or nil when not
	// requested. An integer id column gives Ints, a text id column gives Strings;
	// likewise for labels. A null label is marked in Label.Null.
	ID, Label *Column
	// Skipped counts the rows dropped by Options.SkipInvalid; SkippedRows
	// describes the first MaxSkippedRows of them, in input order.
	Skipped     int64
	SkippedRows []SkippedRow
	// FewValues lists the integer feature columns (scalar ones) whose kept
	// rows hold at most FewDistinct distinct values, in matrix column order.
	FewValues []FewValued
	// Hash is the hex SHA-256 digest of D as a little-endian uint64 followed by the
	// float32 feature values (little-endian IEEE 754 bits) in row-major order: a
	// fingerprint of the matrix that does not depend on the file format.
	Hash string
	// Format is "parquet", "arrow" (IPC file), "arrow-stream" (IPC stream), "csv",
	// "csv+gzip" or "csv+zstd"; for parts of several formats, the formats joined
	// by ", " in order of first appearance.
	Format string
	// Parts is the number of files read (1 for a single file).
	Parts int
}

// FeatureColumn is an input column that features come from.
type FeatureColumn struct {
	Name string // the column's name in the file
	Type string // its type as the file declares it
	// Width is the number of matrix columns it fills: 1 for a scalar column,
	// the length of every row's list for a vector column.
	Width  int
	Vector bool
	// Pattern is the Options.Features entry that selected the column ("" when
	// Options.Features was empty).
	Pattern string
}

// FewValued is an integer feature column with few distinct values.
type FewValued struct {
	Column string
	Values []float32 // the distinct values, ascending
}

// sortedFloats returns v sorted ascending.
func sortedFloats(v []float32) []float32 {
	out := slices.Clone(v)
	slices.Sort(out)
	return out
}

// Read reads the table at path into memory, chunk by chunk, as described by opt.
// path is a table file, a directory of parts or a glob pattern (see
// OpenDataset); Read(path, opt) is OpenDataset(path) then Dataset.Read without
// a reduction.
//
// The format of each file is detected from its first and last bytes (Parquet
// "PAR1", Arrow IPC file "ARROW1", Arrow IPC stream continuation marker, gzip and
// zstd magic numbers), falling back to the file extension and to a text check for
// CSV (header row required, comma separated, or tab separated when the extension
// is .tsv, also before .gz or .zst, or the header holds tabs and no commas). CSV
// and TSV may be gzip- or zstd-compressed (streamed); a file compressed another
// way, or a compressed Parquet or Arrow file, is refused with a message naming
// the compression. Parquet and Arrow IPC are read with Arrow's Go library one
// record batch at a time, straight into the row-major matrix; where the row count
// is known up front (Parquet metadata, Arrow IPC file) the matrix is allocated
// once at its final size.
//
// Features may be of any integer width, float16, float32, float64 or decimal type,
// or a vector: a list, large list or fixed-size list of integers or floats, which
// fills as many matrix columns as each row holds values (every row the same
// number; the matrix columns are named "name[0]", "name[1]", …; a null list is a
// null value, a row of another length is an error even with SkipInvalid).
// Booleans, text, dates and other nested types are not numeric. A CSV column is
// numeric when at least half of its non-empty values among the first 1000 rows
// are numbers: decimal numbers as spreadsheets and data tools write them
// (optional sign, digits with an optional decimal point, optional exponent: "1",
// "-0.5", ".5", "1e-3") and NaN, Inf and Infinity in any case (then bad values);
// hexadecimal floats ("0x1p3") and digit separators ("1_000", "1,000") are text,
// not numbers. An empty CSV cell is a null. Ids may be integers or text (CSV:
// integers when every sampled id is a canonical base-10 int64, else text); labels
// may be text, dictionary-encoded text or integers and keep their type (a CSV
// label is integers when every sampled value is a canonical int64). A null label
// is recorded in Column.Null, a null id is an error. Folder keys of a partitioned
// dataset can be the id or the label (as text). Two columns of the same name are
// an error when either is used.
//
// Every problem with the input (unreadable, foreign, truncated or damaged file,
// missing column, non-numeric feature, NaN/Inf/null/unparseable feature value without
// SkipInvalid, null id, no rows left, parts with different feature columns) is
// returned as an *InputError whose message is one line naming the file, and the
// column and 1-based row (within that file) when they apply. A panic inside the
// Parquet or Arrow decoders on a damaged file is recovered into such an error too.
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
	ds, err := OpenDataset(path)
	if err != nil {
		return nil, err
	}
	t, _, err := ds.Read(opt, Reduction{})
	return t, err
}

// batchSink receives the rows of each chunk after validation. Used by the streaming
// PCA to avoid keeping the matrix.
type batchSink func(rows core.Matrix) error

// readCtl tells read what to keep: with a sink the matrix is not kept (each chunk
// goes to the sink only); noPass skips the id and label columns; sinkFor, when
// set, chooses the sink once the number of matrix columns is known (nil: keep
// the matrix).
type readCtl struct {
	sink    batchSink
	noPass  bool
	sinkFor func(d int) batchSink
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

// readDataset reads every part of ds into one table.
func readDataset(ds *Dataset, opt Options, ctl readCtl) (*Table, error) {
	if len(ds.Parts) == 0 {
		return nil, inputErr(strings.Join(ds.Inputs, ", "), "", 0, "%v", errNoParts)
	}
	as := newAssembly(ds, opt, ctl)
	for k := range ds.Parts {
		if err := as.readPart(k); err != nil {
			return nil, err
		}
	}
	return as.table()
}

// readPart opens part k, detects its format and reads its rows.
func (as *assembly) readPart(k int) error {
	path := as.ds.Parts[k].Path
	f, err := os.Open(path)
	if err != nil {
		return wrapInputErr(path, "", 0, unwrapPathErr(err), "cannot open")
	}
	defer f.Close()
	st, err := f.Stat()
	if err != nil {
		return wrapInputErr(path, "", 0, unwrapPathErr(err), "cannot open")
	}
	if st.IsDir() {
		return inputErr(path, "", 0, "is a directory, not a table file")
	}
	format, kind, err := detect(path, f, st.Size())
	if err != nil {
		return err
	}
	if _, err := f.Seek(0, io.SeekStart); err != nil {
		return wrapInputErr(path, "", 0, err, "cannot read")
	}
	as.startPart(k, format)
	switch format {
	case "parquet":
		err = guard(path, "Parquet file", func() error { return as.readParquet(path, f) })
	case "arrow":
		err = guard(path, "Arrow IPC file", func() error { return as.readArrowFile(path, f) })
	case "arrow-stream":
		err = guard(path, "Arrow IPC stream", func() error { return as.readArrowStream(path, f) })
	default:
		err = as.readCSV(path, f, kind, st.Size())
	}
	if err != nil {
		return err
	}
	return as.endPart()
}

// guard runs read and turns a panic into an InputError: the Arrow and Parquet
// decoders trust the offsets they find in a file and may panic on a damaged one
// (seen with a flipped byte in an Arrow IPC footer). Decoding runs on this goroutine
// only (pqarrow's parallel column reading is left off for this reason).
func guard(path, what string, read func() error) (err error) {
	defer func() {
		if r := recover(); r != nil {
			err = inputErr(path, "", 0, "corrupt %s (the decoder failed on damaged data: %v)", what, r)
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

// detect decides the format of f from its magic bytes, then its extension. For
// a gzip- or zstd-compressed text file it returns "csv" and the compression.
func detect(path string, f io.ReaderAt, size int64) (format, compression string, err error) {
	if size == 0 {
		return "", "", inputErr(path, "", 0, "empty file, not a Parquet, Arrow or CSV table")
	}
	head := make([]byte, min(size, 4096))
	if _, err := f.ReadAt(head, 0); err != nil && err != io.EOF {
		return "", "", wrapInputErr(path, "", 0, err, "cannot read")
	}
	tail := make([]byte, min(size, 8))
	if _, err := f.ReadAt(tail, size-int64(len(tail))); err != nil && err != io.EOF {
		return "", "", wrapInputErr(path, "", 0, err, "cannot read")
	}
	switch {
	case bytes.HasPrefix(head, parquetMagic):
		if size < 12 || !bytes.HasSuffix(tail, parquetMagic) {
			return "", "", inputErr(path, "", 0, "truncated Parquet file (no footer)")
		}
		return "parquet", "", nil
	case bytes.HasPrefix(head, arrowMagic):
		if size < 12 || !bytes.HasSuffix(tail, arrowMagic) {
			return "", "", inputErr(path, "", 0, "truncated Arrow IPC file (no footer)")
		}
		return "arrow", "", nil
	case bytes.HasPrefix(head, streamMagic):
		return "arrow-stream", "", nil
	}
	if kind := compressionOf(head); kind != "" {
		return detectCompressed(path, f, size, kind)
	}
	base, _ := stripCompression(path)
	switch strings.ToLower(filepath.Ext(base)) {
	case ".parquet", ".pq":
		if bytes.HasPrefix(parquetMagic, head) {
			return "", "", inputErr(path, "", 0, "truncated Parquet file")
		}
	case ".arrow", ".feather", ".ipc":
		if bytes.HasPrefix(arrowMagic, head) {
			return "", "", inputErr(path, "", 0, "truncated Arrow IPC file")
		}
	case ".arrows":
		if bytes.HasPrefix(streamMagic, head) {
			return "", "", inputErr(path, "", 0, "truncated Arrow IPC stream")
		}
	}
	if looksLikeText(head, size > int64(len(head))) {
		return "csv", "", nil
	}
	// One rule for text: a CSV is UTF-8 throughout. In the first bytes a
	// file that is not UTF-8 text cannot be told from a binary one; further
	// on, a value that is not UTF-8 is refused naming its row and column.
	return "", "", inputErr(path, "", 0, "not a Parquet, Arrow or CSV table (a CSV must be UTF-8 text, and the first bytes are not)")
}

// detectCompressed looks inside a compressed file: gzip or zstd text is CSV;
// anything else is refused with a message naming the compression.
func detectCompressed(path string, f io.ReaderAt, size int64, kind string) (string, string, error) {
	if kind != "gzip" && kind != "zstd" {
		return "", "", inputErr(path, "", 0, "%s-compressed file: nightjar reads gzip- or zstd-compressed CSV and TSV only; decompress it first", kind)
	}
	head, more, err := compressedHead(kind, io.NewSectionReader(f, 0, size), 4096)
	if err != nil && len(head) == 0 {
		return "", "", wrapInputErr(path, "", 0, err, "corrupt %s-compressed file", kind)
	}
	switch {
	case len(head) == 0:
		return "", "", inputErr(path, "", 0, "empty %s-compressed file, not a CSV table", kind)
	case bytes.HasPrefix(head, parquetMagic):
		return "", "", inputErr(path, "", 0, "%s-compressed Parquet file: decompress it first (Parquet compresses its own pages)", kind)
	case bytes.HasPrefix(head, arrowMagic), bytes.HasPrefix(head, streamMagic):
		return "", "", inputErr(path, "", 0, "%s-compressed Arrow IPC file: decompress it first", kind)
	case !looksLikeText(head, more || err != nil):
		return "", "", inputErr(path, "", 0, "%s-compressed file that does not hold CSV text", kind)
	}
	return "csv", kind, nil
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
