package ingest

import (
	"bytes"
	"encoding/binary"
	"strings"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet/metadata"
	flatbuffers "github.com/google/flatbuffers/go"
)

// setI64 returns a copy of b with the int64 at at set to v.
func setI64(b []byte, at int, v int64) []byte {
	b = bytes.Clone(b)
	binary.LittleEndian.PutUint64(b[at:], uint64(v))
	return b
}

// recordBatchHeader returns the record batch header of message k of a stream
// and its position in the stream.
func recordBatchHeader(t *testing.T, stream []byte, k int) (fbTable, int) {
	t.Helper()
	pos, metaLen := messageAt(t, stream, k)
	msg, ok := fbRoot(stream[pos+8 : pos+8+metaLen])
	if !ok {
		t.Fatal("bad message")
	}
	hdr, _, ok := msg.tableField(messageHeader)
	if !ok {
		t.Fatal("bad header")
	}
	return hdr, pos + 8
}

// TestHostileBatches: a record batch whose buffer announces a length of −8, a
// negative offset, or a field node whose null count is −8 or above its length,
// in an Arrow IPC stream or file, is refused with a message saying which part
// of the header is wrong, not with a recovered panic's text.
func TestHostileBatches(t *testing.T) {
	file, stream := arrowSamples(t)
	hdr, base := recordBatchHeader(t, stream, 1)
	bufs, nb, ok := hdr.vector(recordBatchBuffers, bufferSize)
	nodes, nn, ok2 := hdr.vector(recordBatchNodes, fieldNodeSize)
	if !ok || !ok2 || nb < 2 || nn < 2 {
		t.Fatalf("sample batch has %d buffers, %d nodes", nb, nn)
	}
	at := func(vec flatbuffers.UOffsetT, k, size, field int) int { return base + int(vec) + k*size + field }
	cases := []struct {
		name   string
		data   []byte
		reason string
	}{
		{"buffer length -8", setI64(stream, at(bufs, 1, bufferSize, 8), -8), "buffer 1 (offset 0, length -8) lies outside the body"},
		{"buffer offset -8", setI64(stream, at(bufs, 1, bufferSize, 0), -8), "lies outside the body"},
		{"buffer past the body", setI64(stream, at(bufs, 1, bufferSize, 8), 1<<20), "lies outside the body"},
		{"null count -8", setI64(stream, at(nodes, 1, fieldNodeSize, 8), -8), "field node 1 announces 4 values of which -8 null"},
		{"node length -8", setI64(stream, at(nodes, 1, fieldNodeSize, 0), -8), "field node 1 announces -8 values"},
	}
	for _, c := range cases {
		t.Run("stream "+c.name, func(t *testing.T) {
			path := writeTemp(t, "hostile.arrows", c.data)
			_, err := Read(path, Options{ID: "id"})
			wantInputError(t, err, path, "", 1, c.reason)
			if strings.Contains(err.Error(), "runtime error") {
				t.Errorf("message holds a recovered panic: %v", err)
			}
		})
	}
	// The same fault in a file: its record batch message sits at the block's offset.
	flen := int(binary.LittleEndian.Uint32(file[len(file)-fileTrailer:]))
	fstart := len(file) - fileTrailer - flen
	root, _ := fbRoot(file[fstart : fstart+flen])
	blocks, _, _ := root.vector(footerRecordBatches, blockSize)
	off := int(root.GetInt64(blocks + blockOffset))
	msg, _ := fbRoot(file[off+8:])
	fhdr, _, _ := msg.tableField(messageHeader)
	fbufs, _, _ := fhdr.vector(recordBatchBuffers, bufferSize)
	bad := setI64(file, off+8+int(fbufs)+bufferSize+8, -8)
	path := writeTemp(t, "hostile.arrow", bad)
	_, err := Read(path, Options{ID: "id"})
	wantInputError(t, err, path, "", 0, "record batch 0: buffer 1 (offset 0, length -8) lies outside the body")
}

// parquetWithRows rewrites the footer of a Parquet file so that row group 0
// (and, with both, the file) announces rows rows: the footer is decoded and
// re-encoded with Arrow's Go Parquet metadata package.
func parquetWithRows(t *testing.T, pq []byte, rows int64, both bool) []byte {
	t.Helper()
	flen := int(binary.LittleEndian.Uint32(pq[len(pq)-8:]))
	start := len(pq) - 8 - flen
	md, err := metadata.NewFileMetaData(pq[start:len(pq)-8], nil)
	if err != nil {
		t.Fatal(err)
	}
	md.RowGroups[0].NumRows = rows
	if both {
		md.NumRows = rows
	}
	var footer bytes.Buffer
	if _, err := md.WriteTo(&footer, nil); err != nil {
		t.Fatal(err)
	}
	out := append(bytes.Clone(pq[:start]), footer.Bytes()...)
	out = binary.LittleEndian.AppendUint32(out, uint32(footer.Len()))
	return append(out, "PAR1"...)
}

// TestHostileParquet: a row group announcing 2^40 rows is refused before any
// page is read, whether or not the file's total agrees; so is a consistent
// footer announcing more rows than a thousand per byte of file.
func TestHostileParquet(t *testing.T) {
	pq := tableBytes(t, partTable(0, 777))
	if _, err := Read(writeTemp(t, "ok.parquet", parquetWithRows(t, pq, 777, true)), Options{}); err != nil {
		t.Fatalf("re-encoded footer: %v", err)
	}
	cases := []struct {
		name   string
		data   []byte
		column string
		reason string
	}{
		{"row group only", parquetWithRows(t, pq, 1<<40, false), "id", "row group 0 announces 1099511627776 rows, but the column chunk holds 777 values"},
		{"row group and file", parquetWithRows(t, pq, 1<<40, true), "id", "row group 0 announces 1099511627776 rows"},
		{"negative", parquetWithRows(t, pq, -8, true), "", "row group 0 announces -8 rows"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			path := writeTemp(t, "hostile.parquet", c.data)
			_, err := Read(path, Options{})
			wantInputError(t, err, path, c.column, 0, c.reason)
		})
	}
}

// TestDuplicateNames: two columns of one name are an error when the name is
// used (by default selection, by name, as id or label), and harmless when not.
func TestDuplicateNames(t *testing.T) {
	csvPath := writeTemp(t, "dup.csv", []byte("a,b,a,note,note\n1,2,3,x,y\n4,5,6,z,w\n"))
	for _, opt := range []Options{{}, {Features: []string{"a"}}, {Features: []string{"b"}, Label: "a"}, {Features: []string{"?"}}} {
		_, err := Read(csvPath, opt)
		wantInputError(t, err, csvPath, "a", 0, "two columns have this name (columns 1 and 3); rename one")
	}
	got, err := Read(csvPath, Options{Features: []string{"b"}})
	if err != nil || got.D != 1 {
		t.Fatalf("unused duplicates: %v", err)
	}
	_, err = Read(csvPath, Options{Features: []string{"b"}, Label: "note"})
	wantInputError(t, err, csvPath, "note", 0, "two columns have this name (columns 4 and 5)")
	// Arrow IPC (Arrow's Go writer keeps duplicate field names).
	sc := arrow.NewSchema([]arrow.Field{{Name: "x", Type: arrow.PrimitiveTypes.Float32}, {Name: "x", Type: arrow.PrimitiveTypes.Float64}}, nil)
	rb := array.NewRecordBuilder(memory.DefaultAllocator, sc)
	rb.Field(0).(*array.Float32Builder).AppendValues([]float32{1, 2}, nil)
	rb.Field(1).(*array.Float64Builder).AppendValues([]float64{3, 4}, nil)
	rec := rb.NewRecord()
	rb.Release()
	path := writeArrowFile(t, "dup.arrow", rec)
	_, err = Read(path, Options{})
	wantInputError(t, err, path, "x", 0, "two columns have this name")
}

// TestCSVNumberSyntax: decimal numbers are numbers; hexadecimal floats and
// digit separators, which strconv.ParseFloat would accept, are text (the
// decision documented on Read).
func TestCSVNumberSyntax(t *testing.T) {
	yes := []string{"1", "-0.5", "+.5", "5.", "1e-3", "1E+07", "  2 ", "nan", "-Inf", "INFINITY"}
	no := []string{"0x1p3", "0X1P-2", "1_000", "1,000", "0x_1p3", ".", "e5", "1e", "1.2.3", "--1", "inf1", "١"}
	for _, s := range yes {
		if _, ok := parseNumber(s); !ok {
			t.Errorf("%q is not a number", s)
		}
	}
	for _, s := range no {
		if _, ok := parseNumber(s); ok {
			t.Errorf("%q is a number", s)
		}
	}
	path := writeTemp(t, "hex.csv", []byte("a,b\n1,2\n3,0x1p3\n5,6\n"))
	_, err := Read(path, Options{})
	wantInputError(t, err, path, "b", 2, `value is not a number: "0x1p3"`)
	path = writeTemp(t, "sep.csv", []byte("a,b\n1,1_000\n2,2_000\n3,4\n"))
	_, err = Read(path, Options{Features: []string{"b"}})
	wantInputError(t, err, path, "b", 0, "feature column is not numeric (type text)")
}
