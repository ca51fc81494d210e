package ingest

import (
	"bytes"
	"encoding/binary"
	"os"
	"runtime"
	"testing"
	"unsafe"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/ipc"
	"github.com/apache/arrow/go/v17/arrow/memory"
	flatbuffers "github.com/google/flatbuffers/go"
)

// arrowSamples returns a small valid Arrow IPC file and stream of the same
// record (written by Arrow's own writers).
func arrowSamples(t *testing.T) (file, stream []byte) {
	t.Helper()
	rec := nullRecord([]int64{1, 2, 3, 4}, nil, []float64{1, 2, 3, 4}, nil)
	defer rec.Release()
	path := writeTemp(t, "sample.arrow", nil)
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	fw, err := ipc.NewFileWriter(f, ipc.WithSchema(rec.Schema()))
	if err != nil {
		t.Fatal(err)
	}
	var sb bytes.Buffer
	sw := ipc.NewWriter(&sb, ipc.WithSchema(rec.Schema()))
	for _, w := range []interface{ Write(arrow.Record) error }{fw, sw} {
		if err := w.Write(rec); err != nil {
			t.Fatal(err)
		}
	}
	for _, c := range []interface{ Close() error }{fw, sw, f} {
		if err := c.Close(); err != nil {
			t.Fatal(err)
		}
	}
	file, err = os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	return file, sb.Bytes()
}

// fieldCountFile is an Arrow IPC file whose footer announces n schema fields and
// holds none: the (empty) fields vector is the last thing in the footer, so a
// reader that trusts n finds its first field past the end. Built by hand with
// the flatbuffers builder after File.fbs and Schema.fbs; a hostile file.
func fieldCountFile(t *testing.T, n uint32) []byte {
	t.Helper()
	b := flatbuffers.NewBuilder(64)
	b.StartVector(flatbuffers.SizeUOffsetT, 0, flatbuffers.SizeUOffsetT)
	fields := b.EndVector(0)
	b.StartObject(schemaFeatures + 1)
	b.PrependUOffsetTSlot(schemaFields, fields, 0)
	schema := b.EndObject()
	b.StartObject(footerRecordBatches + 2)
	b.PrependUOffsetTSlot(footerSchema, schema, 0)
	b.Finish(b.EndObject())
	footer := bytes.Clone(b.FinishedBytes())
	root, _ := fbRoot(footer)
	s, _, _ := root.tableField(footerSchema)
	start, count, ok := s.vector(schemaFields, flatbuffers.SizeUOffsetT)
	if !ok || count != 0 || int(start) != len(footer) {
		t.Fatalf("fields vector at %d of %d (count %d): not last", start, len(footer), count)
	}
	binary.LittleEndian.PutUint32(footer[start-4:], n)
	out := append([]byte("ARROW1\x00\x00"), footer...)
	out = binary.LittleEndian.AppendUint32(out, uint32(len(footer)))
	return append(out, "ARROW1"...)
}

// messageAt returns the position and metadata length of message k of a stream.
func messageAt(t *testing.T, stream []byte, k int) (pos, metaLen int) {
	t.Helper()
	for i := 0; ; i++ {
		if binary.LittleEndian.Uint32(stream[pos:]) != continuation {
			t.Fatalf("message %d has no continuation marker", i)
		}
		metaLen = int(binary.LittleEndian.Uint32(stream[pos+4:]))
		if i == k {
			return pos, metaLen
		}
		msg, _ := fbRoot(stream[pos+8 : pos+8+metaLen])
		body, _ := msg.int64Field(messageBodyLength)
		pos += 8 + metaLen + int(body)
	}
}

// hostileIPC returns damaged copies of the samples, each announcing a size that
// the file cannot hold, with the number of bytes a reader trusting the size would
// allocate (0: not measured).
func hostileIPC(t *testing.T) []struct {
	name, ext string
	data      []byte
	alloc     uint64
} {
	file, stream := arrowSamples(t)
	const big = 64 << 20
	setU32 := func(b []byte, at int, v uint32) []byte {
		b = bytes.Clone(b)
		binary.LittleEndian.PutUint32(b[at:], v)
		return b
	}
	setI64 := func(b []byte, at int, v int64) []byte {
		b = bytes.Clone(b)
		binary.LittleEndian.PutUint64(b[at:], uint64(v))
		return b
	}
	// The first record batch block of the file's footer.
	flen := int(binary.LittleEndian.Uint32(file[len(file)-fileTrailer:]))
	fstart := len(file) - fileTrailer - flen
	root, _ := fbRoot(file[fstart : fstart+flen])
	blocks, nb, ok := root.vector(footerRecordBatches, blockSize)
	if !ok || nb != 1 {
		t.Fatalf("sample file has %d record batch blocks", nb)
	}
	block := fstart + int(blocks)
	// The record batch message of the stream.
	pos, metaLen := messageAt(t, stream, 1)
	msg, _ := fbRoot(stream[pos+8 : pos+8+metaLen])
	bodyOff, _, _ := msg.field(messageBodyLength, 8)
	const fields = 1 << 19
	return []struct {
		name, ext string
		data      []byte
		alloc     uint64
	}{
		{"file announces 2^19 schema fields", ".arrow", fieldCountFile(t, fields), fields * uint64(unsafe.Sizeof(arrow.Field{}))},
		{"file record batch body beyond the end", ".arrow", setI64(file, block+blockBodyLength, big), 0},
		{"file record batch metadata beyond the end", ".arrow", setU32(file, block+blockMetaLength, big), 0},
		{"stream schema message of 64 MiB", ".arrows", setU32(stream, 4, big), big},
		{"stream record batch metadata of 64 MiB", ".arrows", setU32(stream, pos+4, big), big},
		{"stream record batch body of 64 MiB", ".arrows", setI64(stream, pos+8+int(msg.Pos+bodyOff), big), 0},
	}
}

// TestHostileIPC: Read refuses Arrow IPC files and streams that announce sizes
// they cannot hold, with an *InputError and without allocating what they announce.
func TestHostileIPC(t *testing.T) {
	for _, c := range hostileIPC(t) {
		t.Run(c.name, func(t *testing.T) {
			path := writeTemp(t, "hostile"+c.ext, c.data)
			var err error
			alloc := allocated(func() { _, err = Read(path, Options{ID: "id"}) })
			wantInputError(t, err, path, "", errRow(err), "corrupt Arrow IPC")
			if alloc > 8<<20 {
				t.Errorf("Read allocated %d bytes for a file of %d", alloc, len(c.data))
			}
		})
	}
}

// errRow returns the row of an *InputError (any row is accepted here).
func errRow(err error) int64 {
	if ie, ok := err.(*InputError); ok {
		return ie.Row
	}
	return -1
}

// TestArrowReaderTrustsLengths is the reason for ipcfooter.go: Arrow's own IPC
// readers, even with an allocator that refuses anything above 1 MiB, allocate the
// lengths a hostile file announces, because they size Go slices with make (a
// schema's field count, a stream message's metadata length) outside the allocator.
// The length fields allow 2^32 fields (about 350 GiB of arrow.Field) and 2 GiB of
// metadata per message; the cases here announce tens of MiB. If this test fails,
// the library has started to check these lengths itself, and ipcfooter.go may be
// replaceable by a capped allocator.
func TestArrowReaderTrustsLengths(t *testing.T) {
	for _, c := range hostileIPC(t) {
		if c.alloc == 0 {
			continue // lengths that do go through the allocator
		}
		t.Run(c.name, func(t *testing.T) {
			capped := &cappedRecorder{limit: 1 << 20}
			alloc := allocated(func() { arrowOpen(c.data, c.ext == ".arrows", capped) })
			if alloc < c.alloc {
				t.Errorf("Arrow's reader allocated %d bytes, want at least the %d announced", alloc, c.alloc)
			}
			if capped.largest > capped.limit {
				t.Errorf("the allocator was asked for %d bytes: it could have refused", capped.largest)
			}
		})
	}
}

// arrowOpen reads data with Arrow's IPC file or stream reader, ignoring the outcome
// (an error or a recovered panic).
func arrowOpen(data []byte, stream bool, mem memory.Allocator) {
	defer func() { _ = recover() }()
	if stream {
		r, err := ipc.NewReader(bytes.NewReader(data), ipc.WithAllocator(mem))
		if err != nil {
			return
		}
		defer r.Release()
		for r.Next() {
		}
		return
	}
	r, err := ipc.NewFileReader(bytes.NewReader(data), ipc.WithAllocator(mem))
	if err != nil {
		return
	}
	defer r.Close()
	for i := 0; i < r.NumRecords(); i++ {
		if rec, err := r.RecordAt(i); err == nil {
			rec.Release()
		}
	}
}

// allocated returns the bytes allocated on the Go heap while f runs.
func allocated(f func()) uint64 {
	var before, after runtime.MemStats
	runtime.ReadMemStats(&before)
	f()
	runtime.ReadMemStats(&after)
	return after.TotalAlloc - before.TotalAlloc
}

// cappedRecorder is an allocator that refuses (panics on) requests above limit
// and records the largest request.
type cappedRecorder struct {
	limit, largest int
}

func (c *cappedRecorder) check(n int) {
	c.largest = max(c.largest, n)
	if n > c.limit {
		panic("allocation refused")
	}
}

func (c *cappedRecorder) Allocate(n int) []byte {
	c.check(n)
	return memory.DefaultAllocator.Allocate(n)
}

func (c *cappedRecorder) Reallocate(n int, b []byte) []byte {
	c.check(n)
	return memory.DefaultAllocator.Reallocate(n, b)
}

func (c *cappedRecorder) Free(b []byte) { memory.DefaultAllocator.Free(b) }

// TestIPCChecksAcceptValidFiles: the checks pass the samples and count their rows.
func TestIPCChecksAcceptValidFiles(t *testing.T) {
	file, stream := arrowSamples(t)
	f, err := os.Open(writeTemp(t, "ok.arrow", file))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if n, err := ipcFileRows(f); n != 4 || err != nil {
		t.Errorf("ipcFileRows = %d, %v; want 4 rows", n, err)
	}
	g, err := os.Open(writeTemp(t, "ok.arrows", stream))
	if err != nil {
		t.Fatal(err)
	}
	defer g.Close()
	if err := ipcStreamCheck(g); err != nil {
		t.Errorf("ipcStreamCheck: %v", err)
	}
}
