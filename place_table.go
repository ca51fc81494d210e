package nightjar

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet"
	"github.com/apache/arrow/go/v17/parquet/compress"
	"github.com/apache/arrow/go/v17/parquet/file"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"

	"nightjar/checkpoint"
)

// placedTable is the table of placed rows: placed.parquet, or one shard's
// part. Its columns, in order: the id column (int64 or text, named as in
// the new table) or, without one, "row" (the 1-based row of the new table);
// the new table's label column (text) when it has one; map_1 … map_dims;
// voted_label and vote_share when the reference has labels;
// nearest_distance (to the nearest reference row, in the space the
// neighbours are found in).
type placedTable struct {
	dims    int
	id      *Column // the id column, or "row"
	label   *Column // nil without labels in the new table
	y       []float64
	voted   []string // nil without labels in the reference
	share   []float64
	nearest []float64
}

// Column names of a placed table besides the id and label.
const (
	colRow     = "row"
	colVoted   = "voted_label"
	colShare   = "vote_share"
	colNearest = "nearest_distance"
)

// placedRowGroup is the number of rows per Parquet row group: the same for
// a whole placement and a merge of parts, so that both write the same bytes.
const placedRowGroup = 65536

func (t *placedTable) n() int { return len(t.nearest) }

func (t *placedTable) schema() (*arrow.Schema, []string) {
	var fields []arrow.Field
	var dict []string
	if t.id.Ints != nil {
		fields = append(fields, arrow.Field{Name: t.id.Name, Type: arrow.PrimitiveTypes.Int64})
	} else {
		fields = append(fields, arrow.Field{Name: t.id.Name, Type: arrow.BinaryTypes.String})
	}
	if t.label != nil {
		fields = append(fields, arrow.Field{Name: t.label.Name, Type: arrow.BinaryTypes.String})
		dict = append(dict, t.label.Name)
	}
	for c := 1; c <= t.dims; c++ {
		fields = append(fields, arrow.Field{Name: fmt.Sprintf("map_%d", c), Type: arrow.PrimitiveTypes.Float64})
	}
	if t.voted != nil {
		fields = append(fields, arrow.Field{Name: colVoted, Type: arrow.BinaryTypes.String},
			arrow.Field{Name: colShare, Type: arrow.PrimitiveTypes.Float64})
		dict = append(dict, colVoted)
	}
	fields = append(fields, arrow.Field{Name: colNearest, Type: arrow.PrimitiveTypes.Float64})
	return arrow.NewSchema(fields, nil), dict
}

// write writes the table as Parquet to path, atomically.
func (t *placedTable) write(path string) error {
	sc, dict := t.schema()
	seen := map[string]bool{}
	for _, f := range sc.Fields() {
		if seen[f.Name] {
			return fmt.Errorf("writing %s: column name %q used twice (rename the new table's id or label column)", path, f.Name)
		}
		seen[f.Name] = true
	}
	opts := []parquet.WriterProperty{
		parquet.WithCompression(compress.Codecs.Snappy),
		parquet.WithMaxRowGroupLength(placedRowGroup),
		parquet.WithDictionaryDefault(false),
	}
	for _, c := range dict {
		opts = append(opts, parquet.WithDictionaryFor(c, true))
	}
	err := checkpoint.AtomicWrite(path, func(w io.Writer) error {
		fw, err := pqarrow.NewFileWriter(sc, nopCloser{w}, parquet.NewWriterProperties(opts...), pqarrow.DefaultWriterProps())
		if err != nil {
			return err
		}
		rb := array.NewRecordBuilder(memory.DefaultAllocator, sc)
		defer rb.Release()
		for lo := 0; lo < t.n(); lo += placedRowGroup {
			t.fill(rb, lo, min(t.n(), lo+placedRowGroup))
			rec := rb.NewRecord()
			err := fw.Write(rec)
			rec.Release()
			if err != nil {
				return err
			}
		}
		return fw.Close()
	})
	if err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	return nil
}

// nopCloser keeps the Parquet writer from closing the atomic file.
type nopCloser struct{ io.Writer }

func (t *placedTable) fill(rb *array.RecordBuilder, lo, hi int) {
	c := 0
	next := func() array.Builder { b := rb.Field(c); c++; return b }
	if t.id.Ints != nil {
		next().(*array.Int64Builder).AppendValues(t.id.Ints[lo:hi], nil)
	} else {
		next().(*array.StringBuilder).AppendValues(t.id.Strings[lo:hi], nil)
	}
	if t.label != nil {
		b := next().(*array.StringBuilder)
		for i := lo; i < hi; i++ {
			b.Append(t.label.String(i))
		}
	}
	floats := func(v []float64, stride, off int) {
		b := next().(*array.Float64Builder)
		b.Reserve(hi - lo)
		for i := lo; i < hi; i++ {
			b.UnsafeAppend(v[i*stride+off])
		}
	}
	for k := range t.dims {
		floats(t.y, t.dims, k)
	}
	if t.voted != nil {
		next().(*array.StringBuilder).AppendValues(t.voted[lo:hi], nil)
		floats(t.share, 1, 0)
	}
	floats(t.nearest, 1, 0)
}

// readPlacedTable reads a placed table written by write, knowing its id and
// label column names (label "" when it has none) and whether it has votes.
func readPlacedTable(path, id, label string, dims int, votes bool) (*placedTable, error) {
	tab, err := readParquetTable(path)
	if err != nil {
		return nil, err
	}
	defer tab.Release()
	c := placedColumns{path: path, tab: tab}
	t := &placedTable{dims: dims}
	if t.id, err = c.column(id); err != nil {
		return nil, err
	}
	n := t.id.Len()
	if label != "" {
		if t.label, err = c.column(label); err != nil || t.label.Strings == nil {
			return nil, fmt.Errorf("%s: label column %q is not text", path, label)
		}
	}
	t.y = make([]float64, n*dims)
	for k := range dims {
		if err := c.floats(fmt.Sprintf("map_%d", k+1), t.y, dims, k); err != nil {
			return nil, err
		}
	}
	if votes {
		v, err := c.column(colVoted)
		if err != nil || v.Strings == nil {
			return nil, fmt.Errorf("%s: column %q is not text", path, colVoted)
		}
		t.voted, t.share = v.Strings, make([]float64, n)
		if err := c.floats(colShare, t.share, 1, 0); err != nil {
			return nil, err
		}
	}
	t.nearest = make([]float64, n)
	if err := c.floats(colNearest, t.nearest, 1, 0); err != nil {
		return nil, err
	}
	return t, nil
}

// readParquetTable reads the whole Parquet file at path into memory.
func readParquetTable(path string) (arrow.Table, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	pf, err := file.NewParquetReader(f)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	defer pf.Close()
	fr, err := pqarrow.NewFileReader(pf, pqarrow.ArrowReadProperties{}, memory.DefaultAllocator)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	tab, err := fr.ReadTable(context.Background())
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	return tab, nil
}

// placedColumns reads the columns of a placed table by name.
type placedColumns struct {
	path string
	tab  arrow.Table
}

func (c placedColumns) chunks(name string) (*arrow.Chunked, error) {
	idx := c.tab.Schema().FieldIndices(name)
	if len(idx) != 1 {
		return nil, fmt.Errorf("%s: no column %q", c.path, name)
	}
	return c.tab.Column(idx[0]).Data(), nil
}

// column copies an int64 or text column without nulls.
func (c placedColumns) column(name string) (*Column, error) {
	ch, err := c.chunks(name)
	if err != nil {
		return nil, err
	}
	col, err := columnOf(name, ch)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", c.path, err)
	}
	return col, nil
}

// floats copies a float64 column without nulls into dst[i*stride+off].
func (c placedColumns) floats(name string, dst []float64, stride, off int) error {
	ch, err := c.chunks(name)
	if err != nil {
		return err
	}
	i := 0
	for _, a := range ch.Chunks() {
		fa, ok := a.(*array.Float64)
		if !ok || fa.NullN() > 0 {
			return fmt.Errorf("%s: column %q is not float64 without nulls", c.path, name)
		}
		for _, v := range fa.Float64Values() {
			dst[i*stride+off] = v
			i++
		}
	}
	return nil
}

// columnOf copies an int64 or text column without nulls.
func columnOf(name string, ch *arrow.Chunked) (*Column, error) {
	c := &Column{Name: name}
	for _, a := range ch.Chunks() {
		if a.NullN() > 0 {
			return nil, fmt.Errorf("column %q has nulls", name)
		}
		switch v := a.(type) {
		case *array.Int64:
			if c.Strings != nil {
				return nil, errors.New("mixed column types")
			}
			c.Ints = append(c.Ints, v.Int64Values()...)
			if c.Ints == nil {
				c.Ints = []int64{}
			}
		case *array.String:
			if c.Ints != nil {
				return nil, errors.New("mixed column types")
			}
			for i := range v.Len() {
				c.Strings = append(c.Strings, v.Value(i))
			}
			if c.Strings == nil {
				c.Strings = []string{}
			}
		default:
			return nil, fmt.Errorf("column %q has type %s", name, a.DataType())
		}
	}
	if c.Ints == nil && c.Strings == nil {
		c.Strings = []string{}
	}
	return c, nil
}
