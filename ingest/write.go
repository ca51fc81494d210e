package ingest

import (
	"errors"
	"fmt"
	"io"
	"slices"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet"
	"github.com/apache/arrow/go/v17/parquet/compress"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"
)

// WriteChunkRows is the number of rows per Arrow record, and so per Parquet row
// group, written by WriteEmbedding and WriteTable.
const WriteChunkRows = 65536

// errWriter remembers the first error of w and hides any Close method of w, so that
// closing the Parquet writer neither closes the caller's writer nor loses the error.
type errWriter struct {
	w   io.Writer
	err error
}

func (e *errWriter) Write(p []byte) (int, error) {
	if e.err != nil {
		return 0, e.err
	}
	n, err := e.w.Write(p)
	if err != nil {
		e.err = err
	}
	return n, err
}

// passField returns the Arrow field for a pass-through column: int64 for Ints,
// string otherwise, nullable when it has nulls. def names the field when
// c.Name is "".
func passField(c *Column, def string) arrow.Field {
	name := c.Name
	if name == "" {
		name = def
	}
	if c.Ints != nil {
		return arrow.Field{Name: name, Type: arrow.PrimitiveTypes.Int64, Nullable: c.Null != nil}
	}
	return arrow.Field{Name: name, Type: arrow.BinaryTypes.String, Nullable: c.Null != nil}
}

// labelDict names the label's field for dictionary encoding: text labels
// repeat; "" for none or an integer label.
func labelDict(label *Column, f arrow.Field) string {
	if label == nil || label.Ints != nil {
		return ""
	}
	return f.Name
}

// appendPass appends rows [lo, hi) of c to bld, nulls as nulls.
func appendPass(bld array.Builder, c *Column, lo, hi int) {
	var valid []bool
	if c.Null != nil {
		valid = make([]bool, hi-lo)
		for i := range valid {
			valid[i] = !c.Null[lo+i]
		}
	}
	switch b := bld.(type) {
	case *array.Int64Builder:
		b.AppendValues(c.Ints[lo:hi], valid)
	case *array.StringBuilder:
		if c.Strings != nil {
			b.AppendValues(c.Strings[lo:hi], valid)
			return
		}
		for i := lo; i < hi; i++ {
			if c.IsNull(i) {
				b.AppendNull()
				continue
			}
			b.Append(c.String(i))
		}
	}
}

// parquetWriter writes records to a Parquet file as they come.
type parquetWriter struct {
	ew *errWriter
	fw *pqarrow.FileWriter
	rb *array.RecordBuilder
}

// newParquetWriter starts a Parquet file on w with schema sc,
// dictionary-encoding column dictCol only ("" = none).
func newParquetWriter(w io.Writer, sc *arrow.Schema, dictCol string) (*parquetWriter, error) {
	seen := map[string]bool{}
	for _, f := range sc.Fields() {
		if seen[f.Name] {
			return nil, fmt.Errorf("writing Parquet: column name %q used twice", f.Name)
		}
		seen[f.Name] = true
	}
	ew := &errWriter{w: w}
	opts := []parquet.WriterProperty{
		parquet.WithCompression(compress.Codecs.Snappy),
		parquet.WithMaxRowGroupLength(WriteChunkRows),
		parquet.WithDictionaryDefault(false), // numbers rarely repeat
	}
	if dictCol != "" {
		opts = append(opts, parquet.WithDictionaryFor(dictCol, true)) // labels do
	}
	props := parquet.NewWriterProperties(opts...)
	fw, err := pqarrow.NewFileWriter(sc, ew, props, pqarrow.DefaultWriterProps())
	if err != nil {
		return nil, fmt.Errorf("writing Parquet: %w", err)
	}
	return &parquetWriter{ew: ew, fw: fw, rb: array.NewRecordBuilder(memory.DefaultAllocator, sc)}, nil
}

// write writes n rows, one record (and row group) per WriteChunkRows rows;
// fill appends rows [lo, hi) to the record builder.
func (p *parquetWriter) write(n int, fill func(rb *array.RecordBuilder, lo, hi int)) error {
	for lo := 0; lo < n; lo += WriteChunkRows {
		hi := min(n, lo+WriteChunkRows)
		fill(p.rb, lo, hi)
		rec := p.rb.NewRecord()
		err := p.fw.Write(rec)
		rec.Release()
		if err != nil {
			return fmt.Errorf("writing Parquet: %w", errors.Join(err, p.ew.err))
		}
	}
	return nil
}

// close ends the file (w itself is not closed).
func (p *parquetWriter) close() error {
	p.rb.Release()
	if err := p.fw.Close(); err != nil {
		return fmt.Errorf("writing Parquet: %w", err)
	}
	if p.ew.err != nil {
		return fmt.Errorf("writing Parquet: %w", p.ew.err)
	}
	return nil
}

// writeParquet writes n rows to w as Parquet with schema sc (see
// newParquetWriter and parquetWriter.write).
func writeParquet(w io.Writer, sc *arrow.Schema, dictCol string, n int, fill func(rb *array.RecordBuilder, lo, hi int)) error {
	p, err := newParquetWriter(w, sc, dictCol)
	if err != nil {
		return err
	}
	if err := p.write(n, fill); err != nil {
		return err
	}
	return p.close()
}

// WriteEmbedding writes an embedding as Parquet to w: the id column if id is non-nil
// (int64 for an integer id, string otherwise), the label column if label is
// non-nil (int64 or string likewise, nulls kept), then float64 columns "map_1" … "map_<dims>". y is N×dims row-major, rows in
// input order; id and label, when non-nil, must have N values. A column without a name
// is called "id" or "label". Rows go out in row groups of WriteChunkRows. w is not
// closed. It returns an error if dims is not 2 or 3, len(y) is not a multiple of dims,
// or a column length or name clashes.
func WriteEmbedding(w io.Writer, id, label *Column, y []float64, dims int) error {
	if dims != 2 && dims != 3 {
		return fmt.Errorf("writing embedding: dims = %d, want 2 or 3", dims)
	}
	if len(y)%dims != 0 {
		return fmt.Errorf("writing embedding: len(y) = %d is not a multiple of dims = %d", len(y), dims)
	}
	n := len(y) / dims
	var fields []arrow.Field
	if id != nil {
		if id.Len() != n {
			return fmt.Errorf("writing embedding: id has %d values for %d rows", id.Len(), n)
		}
		fields = append(fields, passField(id, "id"))
	}
	if label != nil {
		if label.Len() != n {
			return fmt.Errorf("writing embedding: label has %d values for %d rows", label.Len(), n)
		}
		fields = append(fields, passField(label, "label"))
	}
	dictCol := ""
	if label != nil {
		dictCol = labelDict(label, fields[len(fields)-1])
	}
	first := len(fields)
	for k := 1; k <= dims; k++ {
		fields = append(fields, arrow.Field{Name: fmt.Sprintf("map_%d", k), Type: arrow.PrimitiveTypes.Float64})
	}
	sc := arrow.NewSchema(fields, nil)
	return writeParquet(w, sc, dictCol, n, func(rb *array.RecordBuilder, lo, hi int) {
		c := 0
		if id != nil {
			appendPass(rb.Field(c), id, lo, hi)
			c++
		}
		if label != nil {
			appendPass(rb.Field(c), label, lo, hi)
		}
		for k := 0; k < dims; k++ {
			fb := rb.Field(first + k).(*array.Float64Builder)
			fb.Reserve(hi - lo)
			for i := lo; i < hi; i++ {
				fb.UnsafeAppend(y[i*dims+k])
			}
		}
	})
}

// WriteTable writes t as Parquet to w: t.ID and t.Label (int64 or string, nulls
// kept) when non-nil, then the D feature columns as float32 named t.Features. Rows go out in
// row groups of WriteChunkRows. w is not closed. It returns an error if t.Features
// does not have D names, t.Data does not have N×D values, or names clash.
func WriteTable(w io.Writer, t *Table) error {
	tw, err := NewTableWriter(w, t.Features, t.ID, t.Label)
	if err != nil {
		return err
	}
	if err := tw.Write(t); err != nil {
		return err
	}
	return tw.Close()
}

// TableWriter writes a table as Parquet part by part (Write), for tables
// made in pieces that are never held whole: the columns of WriteTable, one
// row group per WriteChunkRows rows of a part. When every part but the last
// holds a multiple of WriteChunkRows rows, the file has the bytes that
// WriteTable writes for the whole table.
type TableWriter struct {
	p         *parquetWriter
	features  []string
	id, label *Column
	first     int
}

// NewTableWriter starts the file on w. features names the feature columns;
// id and label (nil for none) give the name, kind (Ints or text) and
// nullability (Null non-nil: the column may hold nulls) of those columns,
// and may hold no rows: each part brings its own. w is not closed by Close. It returns an error if
// names clash.
func NewTableWriter(w io.Writer, features []string, id, label *Column) (*TableWriter, error) {
	var fields []arrow.Field
	if id != nil {
		fields = append(fields, passField(id, "id"))
	}
	if label != nil {
		fields = append(fields, passField(label, "label"))
	}
	dictCol := ""
	if label != nil {
		dictCol = labelDict(label, fields[len(fields)-1])
	}
	first := len(fields)
	for _, name := range features {
		fields = append(fields, arrow.Field{Name: name, Type: arrow.PrimitiveTypes.Float32})
	}
	p, err := newParquetWriter(w, arrow.NewSchema(fields, nil), dictCol)
	if err != nil {
		return nil, err
	}
	return &TableWriter{p: p, features: features, id: id, label: label, first: first}, nil
}

// Write appends the rows of t, whose features must be those the writer was
// started with and whose id and label columns must be present (with N
// values each) exactly when they were given to NewTableWriter, of the same
// kinds.
func (tw *TableWriter) Write(t *Table) error {
	if len(t.Features) != t.D {
		return fmt.Errorf("writing table: %d feature names for D = %d", len(t.Features), t.D)
	}
	if !slices.Equal(t.Features, tw.features) {
		return fmt.Errorf("writing table: a part's features (%d) are not the file's (%d)", len(t.Features), len(tw.features))
	}
	if len(t.Data) != t.N*t.D {
		return fmt.Errorf("writing table: %d values for N×D = %d×%d", len(t.Data), t.N, t.D)
	}
	for _, c := range []struct {
		what      string
		got, want *Column
	}{{"id", t.ID, tw.id}, {"label", t.Label, tw.label}} {
		switch {
		case (c.got == nil) != (c.want == nil):
			return fmt.Errorf("writing table: a part's %s column is present %v, the file's %v", c.what, c.got != nil, c.want != nil)
		case c.got == nil:
		case c.got.Len() != t.N:
			return fmt.Errorf("writing table: %s has %d values for %d rows", c.what, c.got.Len(), t.N)
		case (c.got.Ints != nil) != (c.want.Ints != nil):
			return fmt.Errorf("writing table: a part's %s column is not of the file's kind (integer or text)", c.what)
		case c.got.Null != nil && c.want.Null == nil:
			return fmt.Errorf("writing table: a part's %s column may hold nulls, the file's may not", c.what)
		}
	}
	return tw.p.write(t.N, func(rb *array.RecordBuilder, lo, hi int) {
		c := 0
		if t.ID != nil {
			appendPass(rb.Field(c), t.ID, lo, hi)
			c++
		}
		if t.Label != nil {
			appendPass(rb.Field(c), t.Label, lo, hi)
		}
		for j := 0; j < t.D; j++ {
			fb := rb.Field(tw.first + j).(*array.Float32Builder)
			fb.Reserve(hi - lo)
			for i := lo; i < hi; i++ {
				fb.UnsafeAppend(t.Data[i*t.D+j])
			}
		}
	})
}

// Close ends the file.
func (tw *TableWriter) Close() error { return tw.p.close() }
