package ingest

import (
	"bytes"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/ipc"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"

	"nightjar/internal/core"
)

// The fuzz targets read arbitrary bytes as a table file, the way Read meets a
// user's file, and check:
//
//   - no panic, and every error an *InputError on one line;
//   - allocation bounded by the file: at most 64 bytes per byte of file plus
//     64 MiB, plus 32 bytes per value of the table actually returned (a
//     tiny file may legitimately hold many run-length-encoded values: those
//     are paid for by being read, never by being announced).
//
// Seeds: testdata/fuzz/FuzzCSV, FuzzParquet and FuzzArrow, written by
// TestWriteFuzzCorpus (NIGHTJAR_WRITE_CORPUS=1 go test -run
// TestWriteFuzzCorpus ./ingest), and the samples added below. Run with, e.g.,
// go test -fuzz FuzzParquet -fuzztime 60s ./ingest.

// allocBound is the allocation the targets allow for a file of size bytes
// that gave a table of values values.
func allocBound(size, values int) uint64 {
	return 64*uint64(size) + 64<<20 + 32*uint64(values)
}

// fuzzFile is the temporary file of a fuzz worker, rewritten for each input.
var fuzzFile struct {
	sync.Mutex
	dir string
}

// fuzzRead writes data to a file named name in a directory kept for the
// process and checks the properties above for Read with opt.
func fuzzRead(t *testing.T, name string, data []byte, opt Options) {
	fuzzFile.Lock()
	defer fuzzFile.Unlock()
	if fuzzFile.dir == "" {
		dir, err := os.MkdirTemp("", "nightjar-fuzz")
		if err != nil {
			t.Fatal(err)
		}
		fuzzFile.dir = dir
	}
	path := filepath.Join(fuzzFile.dir, name)
	if err := os.WriteFile(path, data, 0o644); err != nil {
		t.Fatal(err)
	}
	var got *Table
	var err error
	alloc := allocated(func() { got, err = Read(path, opt) })
	values := 0
	if err != nil {
		var ie *InputError
		if !errors.As(err, &ie) {
			t.Fatalf("error of type %T: %v", err, err)
		}
		if strings.ContainsAny(err.Error(), "\r\n") {
			t.Fatalf("message not on one line: %q", err)
		}
	} else {
		values = got.N * max(got.D, 1)
	}
	if b := allocBound(len(data), values); alloc > b {
		t.Fatalf("allocated %d bytes for a file of %d bytes (%d values); bound %d", alloc, len(data), values, b)
	}
}

// FuzzCSV reads arbitrary bytes as CSV (also as .tsv and .csv.gz, where the
// content decides the compression).
func FuzzCSV(f *testing.F) {
	for _, s := range csvSeeds(f) {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		fuzzRead(t, "t.csv", data, Options{})
		fuzzRead(t, "t.tsv.gz", data, Options{SkipInvalid: true, ID: "id", Label: "kind", BatchRows: 3})
	})
}

// FuzzParquet reads arbitrary bytes as a Parquet file.
func FuzzParquet(f *testing.F) {
	for _, s := range parquetSeeds(f) {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		fuzzRead(t, "t.parquet", data, Options{})
		fuzzRead(t, "t.parquet", data, Options{SkipInvalid: true, ID: "id", BatchRows: 5})
	})
}

// FuzzArrow reads arbitrary bytes as an Arrow IPC file or stream.
func FuzzArrow(f *testing.F) {
	for _, s := range arrowSeeds(f) {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		fuzzRead(t, "t.arrow", data, Options{})
		fuzzRead(t, "t.arrows", data, Options{SkipInvalid: true, ID: "id", BatchRows: 2})
	})
}

// csvSeeds are small CSV texts of the layouts Read takes.
func csvSeeds(tb testing.TB) [][]byte {
	texts := []string{
		"id,kind,a,b\n1,x,0.5,-2\n2,\"y, z\",1e3,3\n3,,NaN,4\n",
		"\ufeffid\tkind\ta\r\n7\tq\t1.25\r\n8\tr\t2\r\n",
		"a,b\n0x1p3,1_000\n1,2\n",
		"id,a\n1,2\n3\n",
		"kind,a\n1,\n2,inf\n",
	}
	out := make([][]byte, 0, 2*len(texts))
	for _, s := range texts {
		out = append(out, []byte(s))
	}
	out = append(out, gzipBytes(tb, []byte(texts[0])), zstdBytes(tb, []byte(texts[1])))
	return out
}

// parquetSeeds are small Parquet files of Arrow's Go writer: scalar columns
// with an id and a label, a list column, nulls.
func parquetSeeds(tb testing.TB) [][]byte {
	var out [][]byte
	var buf bytes.Buffer
	tab := &Table{Matrix: core.Matrix{N: 4, D: 2, Data: []float32{1, 2, 3, 4, 5, 6, 7, 8}}, Features: []string{"a", "b"},
		ID: &Column{Name: "id", Ints: []int64{1, 2, 3, 4}}, Label: &Column{Name: "kind", Strings: []string{"x", "y", "x", ""}, Null: []bool{false, false, false, true}}}
	if err := WriteTable(&buf, tab); err != nil {
		tb.Fatal(err)
	}
	out = append(out, bytes.Clone(buf.Bytes()))
	for _, rec := range []arrow.Record{listSeed(arrow.ListOf(arrow.PrimitiveTypes.Float32)), nullRecord([]int64{1, 2, 3}, []bool{true, true, false}, []float64{1, 0, 3}, []bool{true, false, true})} {
		buf.Reset()
		w, err := pqarrow.NewFileWriter(rec.Schema(), &buf, nil, pqarrow.DefaultWriterProps())
		if err != nil {
			tb.Fatal(err)
		}
		if err := w.Write(rec); err != nil {
			tb.Fatal(err)
		}
		w.Close()
		rec.Release()
		out = append(out, bytes.Clone(buf.Bytes()))
	}
	return out
}

// arrowSeeds are small Arrow IPC files and streams of Arrow's Go writers: a
// fixed-size list, a list, compressed bodies.
func arrowSeeds(tb testing.TB) [][]byte {
	var out [][]byte
	recs := []arrow.Record{
		listSeed(arrow.FixedSizeListOf(3, arrow.PrimitiveTypes.Float32)),
		listSeed(arrow.LargeListOf(arrow.PrimitiveTypes.Int16)),
		nullRecord([]int64{1, 2, 3, 4}, nil, []float64{1, 2, 3, 4}, nil),
	}
	for k, rec := range recs {
		for _, stream := range []bool{false, true} {
			var buf seekBuffer
			opts := []ipc.Option{ipc.WithSchema(rec.Schema())}
			if k == 2 {
				opts = append(opts, ipc.WithZstd())
			}
			var w interface {
				Write(arrow.Record) error
				Close() error
			}
			if stream {
				w = ipc.NewWriter(&buf, opts...)
			} else {
				fw, err := ipc.NewFileWriter(&buf, opts...)
				if err != nil {
					tb.Fatal(err)
				}
				w = fw
			}
			if err := w.Write(rec); err != nil {
				tb.Fatal(err)
			}
			if err := w.Close(); err != nil {
				tb.Fatal(err)
			}
			out = append(out, buf.b)
		}
		rec.Release()
	}
	return out
}

// listSeed is a record of an int64 id and a three-value vector column "emb"
// of type vt (float32 or int16 values).
func listSeed(vt arrow.DataType) arrow.Record {
	sc := arrow.NewSchema([]arrow.Field{{Name: "id", Type: arrow.PrimitiveTypes.Int64}, {Name: "emb", Type: vt, Nullable: true}}, nil)
	rb := array.NewRecordBuilder(memory.DefaultAllocator, sc)
	defer rb.Release()
	lb := rb.Field(1).(array.ListLikeBuilder)
	for i := range 3 {
		rb.Field(0).(*array.Int64Builder).Append(int64(i))
		lb.Append(true)
		for e := range 3 {
			switch vb := lb.ValueBuilder().(type) {
			case *array.Float32Builder:
				vb.Append(float32(i*3 + e))
			case *array.Int16Builder:
				vb.Append(int16(i*3 + e))
			}
		}
	}
	return rb.NewRecord()
}

// seekBuffer is an in-memory io.WriteSeeker for Arrow's IPC file writer.
type seekBuffer struct {
	b   []byte
	pos int
}

func (s *seekBuffer) Write(p []byte) (int, error) {
	if s.pos+len(p) > len(s.b) {
		s.b = append(s.b, make([]byte, s.pos+len(p)-len(s.b))...)
	}
	copy(s.b[s.pos:], p)
	s.pos += len(p)
	return len(p), nil
}

func (s *seekBuffer) Seek(off int64, whence int) (int64, error) {
	switch whence {
	case 0:
		s.pos = int(off)
	case 1:
		s.pos += int(off)
	default:
		s.pos = len(s.b) + int(off)
	}
	return int64(s.pos), nil
}

// TestWriteFuzzCorpus writes the seeds as the committed corpora of the fuzz
// targets (testdata/fuzz/<target>/seed-NN) when NIGHTJAR_WRITE_CORPUS is set.
func TestWriteFuzzCorpus(t *testing.T) {
	if os.Getenv("NIGHTJAR_WRITE_CORPUS") == "" {
		t.Skip("set NIGHTJAR_WRITE_CORPUS=1 to rewrite testdata/fuzz")
	}
	for target, seeds := range map[string][][]byte{"FuzzCSV": csvSeeds(t), "FuzzParquet": parquetSeeds(t), "FuzzArrow": arrowSeeds(t)} {
		dir := filepath.Join("testdata", "fuzz", target)
		if err := os.MkdirAll(dir, 0o755); err != nil {
			t.Fatal(err)
		}
		for k, s := range seeds {
			body := "go test fuzz v1\n[]byte(" + strconv.Quote(string(s)) + ")\n"
			if err := os.WriteFile(filepath.Join(dir, fmt.Sprintf("seed-%02d", k)), []byte(body), 0o644); err != nil {
				t.Fatal(err)
			}
		}
	}
}
