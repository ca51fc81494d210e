package nightjar

import (
	"bufio"
	"bytes"
	"compress/gzip"
	"context"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/ipc"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet"
	"github.com/apache/arrow/go/v17/parquet/file"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"
)

// A re-drawn map is coloured by any column of a table, of any type: the
// columns are read here whole, with their nulls, rather than through the
// feature reader (which keeps numeric features only).

// cellKind is the kind of a column read for re-drawing.
type cellKind int

const (
	kindText  cellKind = iota // text, booleans, dates…: categories
	kindInt                   // integers
	kindFloat                 // floating point and decimals
)

// sheetColumn is one column of a table: its values by kind, and which are null.
type sheetColumn struct {
	name  string
	kind  cellKind
	text  []string
	ints  []int64
	nums  []float64
	valid []bool
}

func (c *sheetColumn) len() int { return len(c.valid) }

// key returns value i as text ("" for null): the form ids are matched on and
// categories are named by.
func (c *sheetColumn) key(i int) string {
	if !c.valid[i] {
		return ""
	}
	switch c.kind {
	case kindInt:
		return strconv.FormatInt(c.ints[i], 10)
	case kindFloat:
		return strconv.FormatFloat(c.nums[i], 'g', -1, 64)
	}
	return c.text[i]
}

// number returns value i as a number, NaN for null or text that is not one.
func (c *sheetColumn) number(i int) float64 {
	if !c.valid[i] {
		return math.NaN()
	}
	switch c.kind {
	case kindInt:
		return float64(c.ints[i])
	case kindFloat:
		return c.nums[i]
	}
	v, err := strconv.ParseFloat(strings.TrimSpace(c.text[i]), 64)
	if err != nil {
		return math.NaN()
	}
	return v
}

// append adds value i of an Arrow array to c.
func (c *sheetColumn) append(arr arrow.Array, i int) {
	if d, ok := arr.(*array.Dictionary); ok {
		if d.IsNull(i) {
			c.appendNull()
			return
		}
		c.append(d.Dictionary(), d.GetValueIndex(i))
		return
	}
	if arr.IsNull(i) {
		c.appendNull()
		return
	}
	c.valid = append(c.valid, true)
	switch c.kind {
	case kindInt:
		c.ints = append(c.ints, intAt(arr, i))
	case kindFloat:
		c.nums = append(c.nums, floatAt(arr, i))
	default:
		c.text = append(c.text, arr.ValueStr(i))
	}
}

func (c *sheetColumn) appendNull() {
	c.valid = append(c.valid, false)
	switch c.kind {
	case kindInt:
		c.ints = append(c.ints, 0)
	case kindFloat:
		c.nums = append(c.nums, math.NaN())
	default:
		c.text = append(c.text, "")
	}
}

// cellKindOf returns the kind of an Arrow type (a dictionary's value type).
func cellKindOf(dt arrow.DataType) cellKind {
	if d, ok := dt.(*arrow.DictionaryType); ok {
		dt = d.ValueType
	}
	switch dt.ID() {
	case arrow.INT8, arrow.INT16, arrow.INT32, arrow.INT64, arrow.UINT8, arrow.UINT16, arrow.UINT32, arrow.UINT64:
		return kindInt
	case arrow.FLOAT16, arrow.FLOAT32, arrow.FLOAT64, arrow.DECIMAL128, arrow.DECIMAL256:
		return kindFloat
	}
	return kindText
}

func intAt(arr arrow.Array, i int) int64 {
	switch a := arr.(type) {
	case *array.Int8:
		return int64(a.Value(i))
	case *array.Int16:
		return int64(a.Value(i))
	case *array.Int32:
		return int64(a.Value(i))
	case *array.Int64:
		return a.Value(i)
	case *array.Uint8:
		return int64(a.Value(i))
	case *array.Uint16:
		return int64(a.Value(i))
	case *array.Uint32:
		return int64(a.Value(i))
	case *array.Uint64:
		return int64(a.Value(i))
	}
	v, _ := strconv.ParseInt(arr.ValueStr(i), 10, 64)
	return v
}

func floatAt(arr arrow.Array, i int) float64 {
	switch a := arr.(type) {
	case *array.Float32:
		return float64(a.Value(i))
	case *array.Float64:
		return a.Value(i)
	}
	v, err := strconv.ParseFloat(arr.ValueStr(i), 64)
	if err != nil {
		return math.NaN()
	}
	return v
}

// readSheet reads the named columns of the table at path (Parquet, Arrow IPC
// file or stream, CSV or TSV, optionally gzip-compressed) whole, in row
// order. A missing column is an *InputError naming it.
func readSheet(path string, names []string) ([]*sheetColumn, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, &InputError{File: path, Reason: errorText(err), Err: err}
	}
	defer f.Close()
	if st, err := f.Stat(); err == nil && st.IsDir() {
		return nil, &InputError{File: path, Reason: "is a directory of table parts, which re-drawing does not read: give one table holding the column with --table FILE --on ID"}
	}
	head := make([]byte, 8)
	k, _ := io.ReadFull(f, head)
	head = head[:k]
	if _, err := f.Seek(0, io.SeekStart); err != nil {
		return nil, fmt.Errorf("reading %s: %w", path, err)
	}
	var cols []*sheetColumn
	switch {
	case bytes.HasPrefix(head, []byte("PAR1")):
		cols, err = readSheetParquet(f, names)
	case bytes.HasPrefix(head, []byte("ARROW1")):
		cols, err = readSheetArrow(f, names, true)
	case bytes.HasPrefix(head, []byte{0xff, 0xff, 0xff, 0xff}):
		cols, err = readSheetArrow(f, names, false)
	case bytes.HasPrefix(head, []byte{0x1f, 0x8b}):
		zr, zerr := gzip.NewReader(f)
		if zerr != nil {
			return nil, &InputError{File: path, Reason: "not a readable gzip file: " + zerr.Error(), Err: zerr}
		}
		cols, err = readSheetCSV(zr, strings.TrimSuffix(path, ".gz"), names)
	default:
		cols, err = readSheetCSV(f, path, names)
	}
	if err != nil {
		var in *InputError
		if errors.As(err, &in) {
			if in.File == "" {
				in.File = path
			}
			return nil, in
		}
		return nil, &InputError{File: path, Reason: err.Error(), Err: err}
	}
	return cols, nil
}

// missingColumn is the error for a column the table lacks.
func missingColumn(name string, have []string) error {
	list := strings.Join(have, ", ")
	if len(have) > 12 {
		list = strings.Join(have[:12], ", ") + fmt.Sprintf(", … (%d columns)", len(have))
	}
	return &InputError{Column: name, Reason: "no such column (the table has " + list + ")"}
}

func readSheetParquet(f *os.File, names []string) ([]*sheetColumn, error) {
	pf, err := file.NewParquetReader(f, file.WithReadProps(parquet.NewReaderProperties(memory.DefaultAllocator)))
	if err != nil {
		return nil, fmt.Errorf("cannot read the Parquet metadata: %w", err)
	}
	defer pf.Close()
	// Read by the Parquet types, not a stored Arrow schema: dictionary
	// columns then come as plain values (see ingest's reader).
	for _, kv := range pf.MetaData().KeyValueMetadata() {
		if kv.Key == "ARROW:schema" {
			kv.Key = "ARROW:schema (not used)"
		}
	}
	fr, err := pqarrow.NewFileReader(pf, pqarrow.ArrowReadProperties{BatchSize: 1 << 16}, memory.DefaultAllocator)
	if err != nil {
		return nil, fmt.Errorf("cannot read the Parquet schema: %w", err)
	}
	sc, err := fr.Schema()
	if err != nil {
		return nil, fmt.Errorf("cannot read the Parquet schema: %w", err)
	}
	leaves := make([]int, len(names))
	cols := make([]*sheetColumn, len(names))
	for k, name := range names {
		leaves[k] = pf.MetaData().Schema.ColumnIndexByName(name)
		idx := sc.FieldIndices(name)
		if leaves[k] < 0 || len(idx) == 0 {
			return nil, missingColumn(name, fieldNames(sc))
		}
		cols[k] = &sheetColumn{name: name, kind: cellKindOf(sc.Field(idx[0]).Type)}
	}
	rr, err := fr.GetRecordReader(context.Background(), leaves, nil)
	if err != nil {
		return nil, fmt.Errorf("cannot read the Parquet columns: %w", err)
	}
	defer rr.Release()
	for rr.Next() {
		appendRecord(cols, rr.Record(), names)
	}
	if err := rr.Err(); err != nil && !errors.Is(err, io.EOF) {
		return nil, fmt.Errorf("corrupt Parquet data: %w", err)
	}
	return cols, nil
}

// appendRecord appends the named columns of rec to cols.
func appendRecord(cols []*sheetColumn, rec arrow.Record, names []string) {
	for k, name := range names {
		idx := rec.Schema().FieldIndices(name)
		arr := rec.Column(idx[0])
		for i := range arr.Len() {
			cols[k].append(arr, i)
		}
	}
}

func fieldNames(sc *arrow.Schema) []string {
	out := make([]string, sc.NumFields())
	for i, f := range sc.Fields() {
		out[i] = f.Name
	}
	return out
}

func readSheetArrow(f *os.File, names []string, isFile bool) (cols []*sheetColumn, err error) {
	// Arrow's readers panic on some damaged files.
	defer func() {
		if r := recover(); r != nil {
			err = fmt.Errorf("damaged Arrow data (%v)", r)
		}
	}()
	start := func(sc *arrow.Schema) error {
		cols = make([]*sheetColumn, len(names))
		for k, name := range names {
			idx := sc.FieldIndices(name)
			if len(idx) == 0 {
				return missingColumn(name, fieldNames(sc))
			}
			cols[k] = &sheetColumn{name: name, kind: cellKindOf(sc.Field(idx[0]).Type)}
		}
		return nil
	}
	if isFile {
		r, err := ipc.NewFileReader(f)
		if err != nil {
			return nil, fmt.Errorf("cannot read the Arrow file: %w", err)
		}
		defer r.Close()
		if err := start(r.Schema()); err != nil {
			return nil, err
		}
		for i := range r.NumRecords() {
			rec, err := r.Record(i)
			if err != nil {
				return nil, fmt.Errorf("cannot read Arrow record batch %d: %w", i, err)
			}
			appendRecord(cols, rec, names)
		}
		return cols, nil
	}
	r, err := ipc.NewReader(bufio.NewReader(f))
	if err != nil {
		return nil, fmt.Errorf("cannot read the Arrow stream: %w", err)
	}
	defer r.Release()
	if err := start(r.Schema()); err != nil {
		return nil, err
	}
	for r.Next() {
		appendRecord(cols, r.Record(), names)
	}
	if err := r.Err(); err != nil && !errors.Is(err, io.EOF) {
		return nil, fmt.Errorf("cannot read the Arrow stream: %w", err)
	}
	return cols, nil
}

// readSheetCSV reads columns of a CSV (or TSV) table with a header row. A
// column is of integers when every non-empty value is a base-10 integer, of
// numbers when every one parses as a float, else text; empty cells are null.
func readSheetCSV(r io.Reader, path string, names []string) ([]*sheetColumn, error) {
	br := bufio.NewReaderSize(r, 1<<20)
	cr := csv.NewReader(br)
	first, _ := br.Peek(64 << 10)
	line, _, _ := bytes.Cut(first, []byte("\n"))
	if strings.EqualFold(filepath.Ext(path), ".tsv") || (bytes.Contains(line, []byte("\t")) && !bytes.Contains(line, []byte(","))) {
		cr.Comma = '\t'
	}
	cr.ReuseRecord = true
	header, err := cr.Read()
	if err != nil {
		return nil, fmt.Errorf("not a CSV table with a header row (%v)", err)
	}
	header = append([]string(nil), header...)
	at := make([]int, len(names))
	raw := make([][]string, len(names))
	for k, name := range names {
		at[k] = -1
		for j, h := range header {
			if strings.TrimSpace(h) == name {
				at[k] = j
				break
			}
		}
		if at[k] < 0 {
			return nil, missingColumn(name, header)
		}
	}
	for row := 2; ; row++ {
		rec, err := cr.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return nil, &InputError{Row: int64(row - 1), Reason: err.Error(), Err: err}
		}
		for k, j := range at {
			v := ""
			if j < len(rec) {
				v = rec[j]
			}
			raw[k] = append(raw[k], v)
		}
	}
	cols := make([]*sheetColumn, len(names))
	for k, name := range names {
		cols[k] = typeCSV(name, raw[k])
	}
	return cols, nil
}

// typeCSV gives a CSV column its kind (see readSheetCSV).
func typeCSV(name string, vals []string) *sheetColumn {
	kind := kindInt
	for _, v := range vals {
		v = strings.TrimSpace(v)
		if v == "" {
			continue
		}
		if _, err := strconv.ParseInt(v, 10, 64); err == nil {
			continue
		}
		if _, err := strconv.ParseFloat(v, 64); err == nil {
			kind = kindFloat
			continue
		}
		kind = kindText
		break
	}
	c := &sheetColumn{name: name, kind: kind, valid: make([]bool, len(vals))}
	switch kind {
	case kindInt:
		c.ints = make([]int64, len(vals))
	case kindFloat:
		c.nums = make([]float64, len(vals))
	default:
		c.text = vals
	}
	for i, v := range vals {
		t := strings.TrimSpace(v)
		c.valid[i] = t != ""
		switch kind {
		case kindInt:
			c.ints[i], _ = strconv.ParseInt(t, 10, 64)
		case kindFloat:
			c.nums[i] = math.NaN()
			if t != "" {
				c.nums[i], _ = strconv.ParseFloat(t, 64)
			}
		}
	}
	return c
}
