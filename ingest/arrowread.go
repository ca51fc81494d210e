package ingest

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"io"
	"os"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/ipc"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet"
	"github.com/apache/arrow/go/v17/parquet/file"
	"github.com/apache/arrow/go/v17/parquet/metadata"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"
)

// recordPlan maps the roles of the selected columns to columns of the records read.
type recordPlan struct {
	as          *assembly
	cols        []colInfo // the part's columns, folder keys included
	sel         selection // in terms of cols
	rec         selection // in terms of the record's columns (features; id and label < 0 for folder keys)
	idKey       int       // folder key of the id, -1 when it is a column or absent
	labelKey    int
	idP, labelP *passCol
	feat        []featSrc // set from the first record
	batchRows   int
	total       int64 // rows the part announces, -1 when unknown
}

// featSrc is where one selected feature column goes in the matrix.
type featSrc struct {
	col   int    // record column
	at    int    // first matrix column
	width int    // 0 for a scalar
	name  string // column name, for messages
}

// newPlan makes the plan of a part whose schema is sc, once its columns are
// selected (sel over cols) and the record columns rec are known.
func (as *assembly) newPlan(sc *arrow.Schema, cols []colInfo, sel, rec selection, total int64) *recordPlan {
	p := &recordPlan{as: as, cols: cols, sel: sel, rec: rec, idKey: -1, labelKey: -1, total: total}
	as.curTotal = total
	p.batchRows = as.ctl.batch(as.opt, knownWidth(cols, sel, as.cols))
	var idName, labelName string
	if sel.id >= 0 {
		idName = cols[sel.id].name
		p.idKey = cols[sel.id].key - 1
	}
	if sel.label >= 0 {
		labelName = cols[sel.label].name
		p.labelKey = cols[sel.label].key - 1
	}
	p.idP, p.labelP = as.passCols(idName, labelName, intsIn(sc, sel.id), intsIn(sc, sel.label))
	return p
}

// knownWidth estimates the matrix width of a selection for the chunk size: the
// first part's widths when known, else fixed widths, else 1 per list column.
func knownWidth(cols []colInfo, sel selection, first []FeatureColumn) int {
	if first != nil {
		d := 0
		for _, c := range first {
			d += c.Width
		}
		return d
	}
	d := 0
	for _, c := range sel.features {
		d += max(1, cols[c].width)
	}
	return d
}

// start lays the features out in the matrix from the first record: the width
// of a list column is the length of its first non-null list.
func (p *recordPlan) start(rec arrow.Record) error {
	as := p.as
	widths := make([]int, len(p.sel.features))
	for j, c := range p.sel.features {
		ci := p.cols[c]
		switch {
		case !ci.vector:
			widths[j] = 1
		case as.cols != nil:
			widths[j] = as.cols[j].Width
		case ci.width > 0:
			widths[j] = ci.width
			// The schema's width must be the data's: a damaged one must
			// not name columns the file does not hold.
			if l, ok := rec.Column(p.rec.features[j]).(array.ListLike); ok && int64(l.ListValues().Len()) < rec.NumRows()*int64(ci.width) {
				return inputErr(as.path, ci.name, 0, "corrupt vector column: %d values for %d rows of %d", l.ListValues().Len(), rec.NumRows(), ci.width)
			}
		default:
			switch widths[j] = firstWidth(rec.Column(p.rec.features[j])); {
			case widths[j] == -2:
				return inputErr(as.path, ci.name, 1, "corrupt list offsets")
			case widths[j] <= 0:
				return inputErr(as.path, ci.name, 0, "the first %d rows of the vector column are null or empty: its width is unknown", rec.NumRows())
			}
		}
	}
	as.ensureBuilder(p.cols, p.sel, widths, max(p.total, 0))
	at := 0
	for j, c := range p.sel.features {
		ci := p.cols[c]
		f := featSrc{col: p.rec.features[j], at: at, name: ci.name}
		if ci.vector {
			f.width = widths[j]
		}
		p.feat = append(p.feat, f)
		at += widths[j]
	}
	return nil
}

// consume converts one record into the builder, BatchRows rows at a time.
func (p *recordPlan) consume(rec arrow.Record) error {
	if rec.NumRows() == 0 {
		return nil
	}
	if p.feat == nil {
		if err := p.start(rec); err != nil {
			return err
		}
	}
	n := rec.NumRows()
	for off := int64(0); off < n; off += int64(p.batchRows) {
		end := min(n, off+int64(p.batchRows))
		part := rec
		if off != 0 || end != n {
			part = rec.NewSlice(off, end)
		}
		err := p.consumePart(part)
		if part != rec {
			part.Release()
		}
		if err != nil {
			return err
		}
		p.as.progress()
	}
	return nil
}

func (p *recordPlan) consumePart(rec arrow.Record) error {
	b := p.as.b
	n := int(rec.NumRows())
	dst := b.begin(n)
	for _, f := range p.feat {
		if f.width == 0 {
			b.fillArrow(dst, f.at, rec.Column(f.col))
		} else if err := b.fillList(dst, f.at, f.width, f.name, rec.Column(f.col)); err != nil {
			return err
		}
	}
	keep, err := b.finish()
	if err != nil {
		return err
	}
	if err := p.appendPass(p.idP, p.rec.id, p.idKey, rec, n, keep, b.seen); err != nil {
		return err
	}
	if err := p.appendPass(p.labelP, p.rec.label, p.labelKey, rec, n, keep, b.seen); err != nil {
		return err
	}
	if len(b.fresh) > 0 && p.idP != nil {
		b.noteIDs(func(i int) string {
			if p.idKey >= 0 {
				v, _ := p.as.keyValue(p.idKey)
				return v
			}
			return textAt(rec.Column(p.rec.id), i)
		})
	}
	b.advance(n)
	return nil
}

// appendPass appends the kept rows of a pass-through column: record column
// col, or folder key key.
func (p *recordPlan) appendPass(pc *passCol, col, key int, rec arrow.Record, n int, keep []bool, rowBase int64) error {
	switch {
	case pc == nil:
		return nil
	case key >= 0:
		v, null := p.as.keyValue(key)
		return pc.appendConst(v, null, n, keep, rowBase)
	}
	return pc.appendArrow(rec.Column(col), keep, rowBase)
}

// selectArrow runs column selection on the Arrow schema of the current part
// (with the dataset's folder keys) and checks pass-through types and widths.
func (as *assembly) selectArrow(sc *arrow.Schema) ([]colInfo, selection, error) {
	cols := as.withKeys(arrowCols(sc))
	sel, err := as.selectPart(cols)
	if err != nil {
		return nil, sel, err
	}
	if err := checkPassTypes(as.path, sc, sel); err != nil {
		return nil, sel, err
	}
	return cols, sel, as.checkWidths(cols, sel)
}

// recordSel returns the selection in terms of the columns of records that
// hold every schema field in order (folder keys become -1).
func recordSel(sc *arrow.Schema, sel selection) selection {
	out := sel
	if sel.id >= sc.NumFields() {
		out.id = -1
	}
	if sel.label >= sc.NumFields() {
		out.label = -1
	}
	return out
}

func (as *assembly) readParquet(path string, f *os.File) error {
	st, err := f.Stat()
	if err != nil {
		return wrapInputErr(path, "", 0, err, "cannot read")
	}
	size := st.Size()
	mem := allocFor(size)
	props := parquet.NewReaderProperties(mem)
	// Stream each column chunk through a small buffer instead of loading whole column
	// chunks: a row group of a wide table would otherwise sit in memory at once.
	props.BufferedStreamEnabled = true
	props.BufferSize = 64 << 10
	opts := []file.ReadOption{file.WithReadProps(props)}
	cached := as.ds.footers.get(path, size, st.ModTime())
	if cached != nil {
		opts = append(opts, file.WithMetadata(cached))
	}
	pf, err := file.NewParquetReader(f, opts...)
	if err != nil {
		return wrapInputErr(path, "", 0, err, "cannot read Parquet metadata")
	}
	defer pf.Close()
	// One buffer per column read: at most about 32 MiB in all for wide tables.
	props.BufferSize = min(64<<10, max(8<<10, (32<<20)/max(1, int64(pf.MetaData().Schema.NumColumns()))))
	if cached == nil {
		if err := checkParquetMeta(path, pf.MetaData(), size); err != nil {
			return err
		}
		dropStatistics(pf.MetaData())
		as.ds.footers.put(path, size, st.ModTime(), pf.MetaData())
	}
	// Ignore an Arrow schema stored by an Arrow writer: with it pqarrow reads a
	// dictionary column as dictionary arrays, which its record reader cannot return
	// once a batch spans two dictionaries (ErrNotImplemented in v17). The Parquet
	// types alone give the same features, ids and labels (labels as plain strings).
	for _, kv := range pf.MetaData().KeyValueMetadata() {
		if kv.Key == "ARROW:schema" {
			kv.Key = "ARROW:schema (not used by nightjar)"
		}
	}
	fr, err := pqarrow.NewFileReader(pf, pqarrow.ArrowReadProperties{Parallel: false}, mem)
	if err != nil {
		return wrapInputErr(path, "", 0, err, "cannot read Parquet schema")
	}
	sc, err := fr.Schema()
	if err != nil {
		return wrapInputErr(path, "", 0, err, "cannot read Parquet schema")
	}
	cols, sel, err := as.selectArrow(sc)
	if err != nil {
		return err
	}
	total := pf.NumRows()
	if total == 0 {
		if len(as.ds.Parts) == 1 {
			return inputErr(path, "", 0, "empty table (0 rows)")
		}
		return nil
	}
	leaves, rsel, err := parquetLeaves(path, fr, sc, sel)
	if err != nil {
		return err
	}
	plan := as.newPlan(sc, cols, sel, rsel, total)
	if as.cols == nil {
		plan.batchRows = as.ctl.batch(as.opt, parquetWidth(pf.MetaData(), fr, sc, sel))
	}
	// The column readers reserve a whole batch: no more than the file holds.
	fr.Props.BatchSize = max(1, min(int64(plan.batchRows), total))
	rr, err := fr.GetRecordReader(context.Background(), leaves, nil)
	if err != nil {
		return wrapInputErr(path, "", 0, err, "cannot read Parquet columns")
	}
	defer rr.Release()
	var seen int64
	for rr.Next() {
		rec := rr.Record()
		seen += rec.NumRows()
		if err := plan.consume(rec); err != nil {
			return err
		}
	}
	if err := rr.Err(); err != nil && !errors.Is(err, io.EOF) {
		return wrapInputErr(path, "", seen+1, err, "corrupt Parquet data")
	}
	if seen != total {
		return inputErr(path, "", 0, "Parquet metadata announces %d rows but %d were read", total, seen)
	}
	return nil
}

// parquetLeaves returns the leaf columns to read for the selected schema fields,
// each needed field once, and the selection in terms of the columns of the
// records read (the record reader returns the fields in the order of the leaf
// columns asked for; folder keys are -1). A vector column is read through its
// one leaf; other nested columns are an error.
func parquetLeaves(path string, fr *pqarrow.FileReader, sc *arrow.Schema, sel selection) ([]int, selection, error) {
	var leaves, fields []int
	at := make(map[int]int) // schema field -> record column
	need := func(field int) int {
		if field < 0 || field >= sc.NumFields() {
			return -1
		}
		if c, ok := at[field]; ok {
			return c
		}
		at[field] = len(leaves)
		leaves = append(leaves, leafOf(fr.Manifest.Fields[field]))
		fields = append(fields, field)
		return at[field]
	}
	rsel := selection{id: -1, label: -1, patterns: sel.patterns}
	for _, fi := range sel.features {
		rsel.features = append(rsel.features, need(fi))
	}
	rsel.id = need(sel.id)
	rsel.label = need(sel.label)
	for k, leaf := range leaves {
		if leaf < 0 {
			return nil, rsel, inputErr(path, sc.Field(fields[k]).Name, 0, "nested column cannot be read")
		}
	}
	return leaves, rsel, nil
}

// leafOf returns the leaf column of a flat field or of a list of a flat type,
// or -1. (A field is a leaf when it has no children: pqarrow v17 leaves the
// ColIndex of a list field at 0, not −1.)
func leafOf(f pqarrow.SchemaField) int {
	if len(f.Children) == 0 {
		return f.ColIndex
	}
	if len(f.Children) == 1 && len(f.Children[0].Children) == 0 {
		if ok, _ := vectorWidth(f.Field.Type); ok {
			return f.Children[0].ColIndex
		}
	}
	return -1
}

// parquetWidth estimates the matrix width of the selected columns from the
// first row group's metadata: a list column's values per row.
func parquetWidth(md *metadata.FileMetaData, fr *pqarrow.FileReader, sc *arrow.Schema, sel selection) int {
	d := 0
	for _, fi := range sel.features {
		w := 1
		if ok, fixed := vectorWidth(sc.Field(fi).Type); ok {
			w = fixed
			if leaf := leafOf(fr.Manifest.Fields[fi]); w == 0 && leaf >= 0 && len(md.RowGroups) > 0 {
				rg := md.RowGroup(0)
				if cc, err := rg.ColumnChunk(leaf); err == nil && rg.NumRows() > 0 {
					w = int(min(cc.NumValues()/rg.NumRows(), 1<<20))
				}
			}
		}
		d += max(1, w)
	}
	return d
}

func (as *assembly) readArrowFile(path string, f *os.File) error {
	// Checked before the Arrow library sees the file; see ipcFileRows.
	total, err := ipcFileRows(f)
	if err != nil {
		return wrapInputErr(path, "", 0, err, "corrupt Arrow IPC file")
	}
	if total == 0 && len(as.ds.Parts) == 1 {
		return inputErr(path, "", 0, "empty table (0 rows)")
	}
	r, err := ipc.NewFileReader(f, ipc.WithAllocator(allocFor(fileSize(path))))
	if err != nil {
		return wrapInputErr(path, "", 0, err, "cannot read Arrow IPC file")
	}
	defer r.Close()
	sc := r.Schema()
	cols, sel, err := as.selectArrow(sc)
	if err != nil {
		return err
	}
	plan := as.newPlan(sc, cols, sel, recordSel(sc, sel), total)
	var seen int64
	for i := 0; i < r.NumRecords(); i++ {
		rec, err := r.RecordAt(i)
		if err != nil {
			return wrapInputErr(path, "", seen+1, err, "corrupt Arrow IPC record batch %d", i)
		}
		seen += rec.NumRows()
		err = plan.consume(rec)
		rec.Release()
		if err != nil {
			return err
		}
	}
	if seen != total {
		return inputErr(path, "", 0, "corrupt Arrow IPC file: the footer announces %d rows but %d were read", total, seen)
	}
	return nil
}

func (as *assembly) readArrowStream(path string, f *os.File) error {
	// Checked before the Arrow library sees the stream; see ipcStreamCheck.
	if err := ipcStreamCheck(f); err != nil {
		var se *streamError
		switch {
		case !errors.As(err, &se):
			return wrapInputErr(path, "", 0, err, "cannot read Arrow IPC stream")
		case se.schema:
			return wrapInputErr(path, "", 0, se.err, "corrupt Arrow IPC stream: bad schema message")
		default:
			return wrapInputErr(path, "", se.rows+1, se.err, "truncated or corrupt Arrow IPC stream")
		}
	}
	r, err := ipc.NewReader(bufio.NewReaderSize(f, 1<<20), ipc.WithAllocator(allocFor(fileSize(path))))
	if err != nil {
		return wrapInputErr(path, "", 0, err, "cannot read Arrow IPC stream")
	}
	defer r.Release()
	sc := r.Schema()
	cols, sel, err := as.selectArrow(sc)
	if err != nil {
		return err
	}
	plan := as.newPlan(sc, cols, sel, recordSel(sc, sel), -1)
	var seen int64
	for r.Next() {
		seen += r.Record().NumRows()
		if err := plan.consume(r.Record()); err != nil {
			return err
		}
	}
	if err := r.Err(); err != nil {
		return wrapInputErr(path, "", seen+1, err, "truncated or corrupt Arrow IPC stream")
	}
	if seen == 0 && len(as.ds.Parts) == 1 {
		return inputErr(path, "", 0, "empty table (0 rows)")
	}
	return nil
}

// countRows returns the rows a Parquet or Arrow IPC file announces in its
// metadata, or -1 for other files and when it cannot tell.
func countRows(path string) (n int64) {
	f, err := os.Open(path)
	if err != nil {
		return -1
	}
	defer f.Close()
	size := fileSize(path)
	format, _, err := detect(path, f, size)
	if err != nil {
		return -1
	}
	defer func() {
		if recover() != nil {
			n = -1
		}
	}()
	switch format {
	case "parquet":
		pf, err := file.NewParquetReader(f, file.WithReadProps(parquet.NewReaderProperties(allocFor(size))))
		if err != nil {
			return -1
		}
		defer pf.Close()
		if checkParquetMeta(path, pf.MetaData(), size) != nil {
			return -1
		}
		return pf.NumRows()
	case "arrow":
		if n, err := ipcFileRows(f); err == nil {
			return n
		}
	}
	return -1
}

// cappedAlloc is the Arrow allocator for decoding one file: it refuses (by a panic
// that guard turns into an InputError) any single allocation larger than limit, so
// that a damaged length field in a file cannot make the library exhaust memory.
type cappedAlloc struct {
	limit int
	mem   memory.Allocator
}

// allocFor returns the allocator for a file of the given size: up to 64 bytes per
// byte of file (room for compressed buffers) and at least 64 MiB per allocation.
func allocFor(size int64) cappedAlloc {
	return cappedAlloc{limit: int(max(64<<20, min(64*size, 1<<40))), mem: memory.DefaultAllocator}
}

func (c cappedAlloc) check(n int) {
	if n > c.limit {
		panic(fmt.Sprintf("a length field asks for %d bytes", n))
	}
}

func (c cappedAlloc) Allocate(n int) []byte { c.check(n); return c.mem.Allocate(n) }

func (c cappedAlloc) Reallocate(n int, b []byte) []byte { c.check(n); return c.mem.Reallocate(n, b) }

func (c cappedAlloc) Free(b []byte) { c.mem.Free(b) }
