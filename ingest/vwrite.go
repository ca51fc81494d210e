package ingest

import (
	"bufio"
	"fmt"
	"io"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/ipc"
	"github.com/apache/arrow/go/v17/arrow/memory"
)

// VectorWriter writes an Arrow IPC file of three columns: an int64 id, a text
// label and a fixed_size_list<float32>[width] vector, one record batch per
// call of Write, so that a table far larger than memory can be written chunk
// by chunk. (Parquet has no fixed-size list, and Arrow's Go Parquet writer
// loses the values of one: apache/arrow-go issue 584.)
type VectorWriter struct {
	w     *ipc.FileWriter
	out   *posWriter
	sc    *arrow.Schema
	width int
}

// posWriter buffers writes and tells its position, the one kind of Seek that
// Arrow's IPC file writer asks for.
type posWriter struct {
	w   *bufio.Writer
	pos int64
}

func (p *posWriter) Write(b []byte) (int, error) {
	n, err := p.w.Write(b)
	p.pos += int64(n)
	return n, err
}

func (p *posWriter) Seek(offset int64, whence int) (int64, error) {
	if offset != 0 || whence != io.SeekCurrent {
		return 0, fmt.Errorf("writing vectors: cannot seek")
	}
	return p.pos, nil
}

// NewVectorWriter starts the file on w with the given column names. w is not
// closed by Close. It returns an error if width < 1 or the names clash.
func NewVectorWriter(w io.Writer, id, label, vector string, width int) (*VectorWriter, error) {
	if width < 1 {
		return nil, fmt.Errorf("writing vectors: width %d", width)
	}
	if id == label || id == vector || label == vector {
		return nil, fmt.Errorf("writing vectors: column names %q, %q, %q clash", id, label, vector)
	}
	sc := arrow.NewSchema([]arrow.Field{
		{Name: id, Type: arrow.PrimitiveTypes.Int64},
		{Name: label, Type: arrow.BinaryTypes.String},
		{Name: vector, Type: arrow.FixedSizeListOfNonNullable(int32(width), arrow.PrimitiveTypes.Float32)},
	}, nil)
	out := &posWriter{w: bufio.NewWriterSize(w, 1<<20)}
	fw, err := ipc.NewFileWriter(out, ipc.WithSchema(sc))
	if err != nil {
		return nil, fmt.Errorf("writing vectors: %w", err)
	}
	return &VectorWriter{w: fw, out: out, sc: sc, width: width}, nil
}

// Write appends len(ids) rows: ids, their labels and their vectors (vals holds
// len(ids)×width values, row-major). The values are not copied.
func (v *VectorWriter) Write(ids []int64, labels []string, vals []float32) error {
	n := len(ids)
	if len(labels) != n || len(vals) != n*v.width {
		return fmt.Errorf("writing vectors: %d ids, %d labels, %d values for width %d", n, len(labels), len(vals), v.width)
	}
	mem := memory.DefaultAllocator
	ib := array.NewInt64Builder(mem)
	defer ib.Release()
	ib.AppendValues(ids, nil)
	idArr := ib.NewArray()
	defer idArr.Release()
	lb := array.NewStringBuilder(mem)
	defer lb.Release()
	lb.AppendValues(labels, nil)
	labelArr := lb.NewArray()
	defer labelArr.Release()
	valData := array.NewData(arrow.PrimitiveTypes.Float32, n*v.width,
		[]*memory.Buffer{nil, memory.NewBufferBytes(arrow.Float32Traits.CastToBytes(vals))}, nil, 0, 0)
	defer valData.Release()
	listData := array.NewData(v.sc.Field(2).Type, n, []*memory.Buffer{nil}, []arrow.ArrayData{valData}, 0, 0)
	defer listData.Release()
	listArr := array.MakeFromData(listData)
	defer listArr.Release()
	rec := array.NewRecord(v.sc, []arrow.Array{idArr, labelArr, listArr}, int64(n))
	defer rec.Release()
	if err := v.w.Write(rec); err != nil {
		return fmt.Errorf("writing vectors: %w", err)
	}
	return nil
}

// Close finishes the file (its footer). It does not close the writer given to
// NewVectorWriter.
func (v *VectorWriter) Close() error {
	if err := v.w.Close(); err != nil {
		return fmt.Errorf("writing vectors: %w", err)
	}
	if err := v.out.w.Flush(); err != nil {
		return fmt.Errorf("writing vectors: %w", err)
	}
	return nil
}
