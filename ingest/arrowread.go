package ingest

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"io"
	"os"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/ipc"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet"
	"github.com/apache/arrow/go/v17/parquet/file"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"
)

// recordPlan maps the roles of the selected columns to columns of the records read.
type recordPlan struct {
	feat        []int // record column per feature
	id, label   int   // record column, -1 when not requested
	idP, labelP *passCol
	batchRows   int
	total       int64 // -1 when unknown
	progress    func(done, total int64)
}

// planFor builds the plan for records holding every schema field.
func planFor(file string, sc *arrow.Schema, sel selection, opt Options, total int64, noPass bool) *recordPlan {
	p := &recordPlan{feat: sel.features, id: sel.id, label: sel.label, batchRows: opt.BatchRows, total: total, progress: opt.Progress}
	if noPass {
		return p
	}
	if sel.id >= 0 {
		p.idP = newPassCol(file, sc.Field(sel.id).Name, true, isIntegerType(sc.Field(sel.id).Type))
	}
	if sel.label >= 0 {
		p.labelP = newPassCol(file, sc.Field(sel.label).Name, false, false)
	}
	return p
}

// selectArrow runs column selection on an Arrow schema and checks pass-through types.
func selectArrow(file string, sc *arrow.Schema, opt Options) (selection, error) {
	sel, err := selectColumns(file, arrowCols(sc), opt)
	if err != nil {
		return sel, err
	}
	return sel, checkPassTypes(file, sc, sel)
}

// consume converts one record into the builder, BatchRows rows at a time.
func (p *recordPlan) consume(b *builder, rec arrow.Record) error {
	n := rec.NumRows()
	for off := int64(0); off < n; off += int64(p.batchRows) {
		end := min(n, off+int64(p.batchRows))
		part := rec
		if off != 0 || end != n {
			part = rec.NewSlice(off, end)
		}
		err := p.consumePart(b, part)
		if part != rec {
			part.Release()
		}
		if err != nil {
			return err
		}
		if p.progress != nil {
			p.progress(b.seen, p.total)
		}
	}
	return nil
}

func (p *recordPlan) consumePart(b *builder, rec arrow.Record) error {
	n := int(rec.NumRows())
	dst := b.begin(n)
	for j, c := range p.feat {
		b.fillArrow(dst, j, rec.Column(c))
	}
	keep, err := b.finish()
	if err != nil {
		return err
	}
	if p.idP != nil {
		if err := p.idP.appendArrow(rec.Column(p.id), keep, b.seen); err != nil {
			return err
		}
	}
	if p.labelP != nil {
		if err := p.labelP.appendArrow(rec.Column(p.label), keep, b.seen); err != nil {
			return err
		}
	}
	b.advance(n)
	return nil
}

func (p *recordPlan) finishTable(b *builder) (*Table, error) {
	t, err := b.table()
	if err != nil {
		return nil, err
	}
	if p.idP != nil {
		t.ID = p.idP.col
	}
	if p.labelP != nil {
		t.Label = p.labelP.col
	}
	return t, nil
}

func readParquet(path string, f *os.File, opt Options, ctl readCtl) (*Table, error) {
	mem := allocFor(fileSize(f))
	props := parquet.NewReaderProperties(mem)
	// Stream each column chunk through a small buffer instead of loading whole column
	// chunks: a row group of a wide table would otherwise sit in memory at once.
	props.BufferedStreamEnabled = true
	props.BufferSize = 64 << 10
	pf, err := file.NewParquetReader(f, file.WithReadProps(props))
	if err != nil {
		return nil, wrapInputErr(path, "", 0, err, "cannot read Parquet metadata")
	}
	defer pf.Close()
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
		return nil, wrapInputErr(path, "", 0, err, "cannot read Parquet schema")
	}
	sc, err := fr.Schema()
	if err != nil {
		return nil, wrapInputErr(path, "", 0, err, "cannot read Parquet schema")
	}
	sel, err := selectArrow(path, sc, opt)
	if err != nil {
		return nil, err
	}
	opt.BatchRows = ctl.batch(opt, len(sel.features))
	total := pf.NumRows()
	// The column readers reserve a whole batch: no more than the file holds.
	fr.Props.BatchSize = max(1, min(int64(opt.BatchRows), total))
	if total == 0 {
		return nil, inputErr(path, "", 0, "empty table (0 rows)")
	}
	leaves, rsel, err := parquetLeaves(path, fr, sc, sel)
	if err != nil {
		return nil, err
	}
	rr, err := fr.GetRecordReader(context.Background(), leaves, nil)
	if err != nil {
		return nil, wrapInputErr(path, "", 0, err, "cannot read Parquet columns")
	}
	defer rr.Release()
	plan := planFor(path, sc, sel, opt, total, ctl.noPass)
	plan.feat, plan.id, plan.label = rsel.features, rsel.id, rsel.label
	b := newBuilder(path, sel.names(arrowCols(sc)), opt, presizeRows(total, len(sel.features), fileSize(f)), ctl)
	for rr.Next() {
		if err := plan.consume(b, rr.Record()); err != nil {
			return nil, err
		}
	}
	if err := rr.Err(); err != nil && !errors.Is(err, io.EOF) {
		return nil, wrapInputErr(path, "", b.seen+1, err, "corrupt Parquet data")
	}
	if b.seen != total {
		return nil, inputErr(path, "", 0, "Parquet metadata announces %d rows but %d were read", total, b.seen)
	}
	return plan.finishTable(b)
}

// parquetLeaves returns the leaf columns to read for the selected schema fields,
// each needed field once, and the selection in terms of the columns of the
// records read (the record reader returns the fields in the order of the leaf
// columns asked for). A nested column is an error.
func parquetLeaves(path string, fr *pqarrow.FileReader, sc *arrow.Schema, sel selection) ([]int, selection, error) {
	var leaves, fields []int
	at := make(map[int]int) // schema field -> record column
	need := func(field int) int {
		if c, ok := at[field]; ok {
			return c
		}
		at[field] = len(leaves)
		leaves = append(leaves, fr.Manifest.Fields[field].ColIndex)
		fields = append(fields, field)
		return at[field]
	}
	rsel := selection{id: -1, label: -1}
	for _, fi := range sel.features {
		rsel.features = append(rsel.features, need(fi))
	}
	if sel.id >= 0 {
		rsel.id = need(sel.id)
	}
	if sel.label >= 0 {
		rsel.label = need(sel.label)
	}
	for k, leaf := range leaves {
		if leaf < 0 {
			return nil, rsel, inputErr(path, sc.Field(fields[k]).Name, 0, "nested column cannot be read")
		}
	}
	return leaves, rsel, nil
}

func readArrowFile(path string, f *os.File, opt Options, ctl readCtl) (*Table, error) {
	// Checked before the Arrow library sees the file; see ipcFileRows.
	total, err := ipcFileRows(f)
	if err != nil {
		return nil, wrapInputErr(path, "", 0, err, "corrupt Arrow IPC file")
	}
	if total == 0 {
		return nil, inputErr(path, "", 0, "empty table (0 rows)")
	}
	r, err := ipc.NewFileReader(f, ipc.WithAllocator(allocFor(fileSize(f))))
	if err != nil {
		return nil, wrapInputErr(path, "", 0, err, "cannot read Arrow IPC file")
	}
	defer r.Close()
	sc := r.Schema()
	sel, err := selectArrow(path, sc, opt)
	if err != nil {
		return nil, err
	}
	opt.BatchRows = ctl.batch(opt, len(sel.features))
	plan := planFor(path, sc, sel, opt, total, ctl.noPass)
	b := newBuilder(path, sel.names(arrowCols(sc)), opt, presizeRows(total, len(sel.features), fileSize(f)), ctl)
	for i := 0; i < r.NumRecords(); i++ {
		rec, err := r.RecordAt(i)
		if err != nil {
			return nil, wrapInputErr(path, "", b.seen+1, err, "corrupt Arrow IPC record batch %d", i)
		}
		err = plan.consume(b, rec)
		rec.Release()
		if err != nil {
			return nil, err
		}
	}
	if b.seen != total {
		return nil, inputErr(path, "", 0, "corrupt Arrow IPC file: the footer announces %d rows but %d were read", total, b.seen)
	}
	return plan.finishTable(b)
}

func readArrowStream(path string, f *os.File, opt Options, ctl readCtl) (*Table, error) {
	// Checked before the Arrow library sees the stream; see ipcStreamCheck.
	if err := ipcStreamCheck(f); err != nil {
		var se *streamError
		switch {
		case !errors.As(err, &se):
			return nil, wrapInputErr(path, "", 0, err, "cannot read Arrow IPC stream")
		case se.schema:
			return nil, wrapInputErr(path, "", 0, se.err, "corrupt Arrow IPC stream: bad schema message")
		default:
			return nil, wrapInputErr(path, "", se.rows+1, se.err, "truncated or corrupt Arrow IPC stream")
		}
	}
	r, err := ipc.NewReader(bufio.NewReaderSize(f, 1<<20), ipc.WithAllocator(allocFor(fileSize(f))))
	if err != nil {
		return nil, wrapInputErr(path, "", 0, err, "cannot read Arrow IPC stream")
	}
	defer r.Release()
	sc := r.Schema()
	sel, err := selectArrow(path, sc, opt)
	if err != nil {
		return nil, err
	}
	opt.BatchRows = ctl.batch(opt, len(sel.features))
	plan := planFor(path, sc, sel, opt, -1, ctl.noPass)
	b := newBuilder(path, sel.names(arrowCols(sc)), opt, 0, ctl)
	for r.Next() {
		if err := plan.consume(b, r.Record()); err != nil {
			return nil, err
		}
	}
	if err := r.Err(); err != nil {
		return nil, wrapInputErr(path, "", b.seen+1, err, "truncated or corrupt Arrow IPC stream")
	}
	return plan.finishTable(b)
}

func fileSize(f *os.File) int64 {
	st, err := f.Stat()
	if err != nil {
		return 0
	}
	return st.Size()
}

// cappedAlloc is the Arrow allocator for decoding one file: it refuses (by a panic
// that guard turns into an InputError) any single allocation larger than limit, so
// that a damaged length field in a file cannot make the library exhaust memory.
type cappedAlloc struct {
	limit int
	mem   memory.Allocator
}

// allocFor returns the allocator for a file of the given size: up to 64 bytes per
// byte of file (room for compressed buffers) and at least 256 MiB per allocation.
func allocFor(size int64) cappedAlloc {
	return cappedAlloc{limit: int(max(256<<20, min(64*size, 1<<40))), mem: memory.DefaultAllocator}
}

func (c cappedAlloc) check(n int) {
	if n > c.limit {
		panic(fmt.Sprintf("a length field asks for %d bytes", n))
	}
}

func (c cappedAlloc) Allocate(n int) []byte { c.check(n); return c.mem.Allocate(n) }

func (c cappedAlloc) Reallocate(n int, b []byte) []byte { c.check(n); return c.mem.Reallocate(n, b) }

func (c cappedAlloc) Free(b []byte) { c.mem.Free(b) }
