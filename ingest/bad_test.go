package ingest

import (
	"bytes"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"runtime/debug"
	"strings"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/ipc"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"

	"nightjar/internal/core"
)

// writeParquetRecord writes rec with pqarrow's own writer (not WriteTable), so that
// tests can make files WriteTable never would (nulls, odd types).
func writeParquetRecord(t *testing.T, name string, rec arrow.Record) string {
	t.Helper()
	var buf bytes.Buffer
	fw, err := pqarrow.NewFileWriter(rec.Schema(), &buf, nil, pqarrow.DefaultWriterProps())
	if err != nil {
		t.Fatal(err)
	}
	if err := fw.Write(rec); err != nil {
		t.Fatal(err)
	}
	if err := fw.Close(); err != nil {
		t.Fatal(err)
	}
	return writeTemp(t, name, buf.Bytes())
}

// nullRecord builds columns id (int64), f (float64), s (string), x (float64) with
// nulls where the masks say false.
func nullRecord(ids []int64, idValid []bool, f []float64, fValid []bool) arrow.Record {
	mem := memory.DefaultAllocator
	sc := arrow.NewSchema([]arrow.Field{
		{Name: "id", Type: arrow.PrimitiveTypes.Int64, Nullable: true},
		{Name: "f", Type: arrow.PrimitiveTypes.Float64, Nullable: true},
		{Name: "s", Type: arrow.BinaryTypes.String},
		{Name: "x", Type: arrow.PrimitiveTypes.Float64},
	}, nil)
	rb := array.NewRecordBuilder(mem, sc)
	defer rb.Release()
	rb.Field(0).(*array.Int64Builder).AppendValues(ids, idValid)
	rb.Field(1).(*array.Float64Builder).AppendValues(f, fValid)
	for i := range ids {
		rb.Field(2).(*array.StringBuilder).Append(fmt.Sprint("s", i))
		rb.Field(3).(*array.Float64Builder).Append(float64(i))
	}
	return rb.NewRecord()
}

// bigTable is an N×3 table (columns a, g7, c) with v at row `row` (1-based) of g7.
func bigTable(n, row int, v float32) *Table {
	t := &Table{Matrix: core.Matrix{N: n, D: 3, Data: make([]float32, n*3)}, Features: []string{"a", "g7", "c"}}
	for i := range t.Data {
		t.Data[i] = float32(i % 17)
	}
	t.Data[(row-1)*3+1] = v
	return t
}

// TestBadInput checks each class of bad input of the project's standard: the error is
// an *InputError whose one-line message names the file, the column and the row. The
// expected column and row of each case are hand-worked from the file built for it.
func TestBadInput(t *testing.T) {
	dir := t.TempDir()
	put := func(name string, b []byte) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	// A valid Parquet and Arrow file and stream to damage.
	good := &Table{Matrix: core.Matrix{N: 50, D: 2, Data: make([]float32, 100)}, Features: []string{"u", "v"},
		Label: &Column{Name: "name", Strings: make([]string, 50)}}
	var pq bytes.Buffer
	if err := WriteTable(&pq, good); err != nil {
		t.Fatal(err)
	}
	rec := nullRecord([]int64{1, 2, 3, 4}, nil, []float64{1, 2, 3, 4}, nil)
	defer rec.Release()
	var stream bytes.Buffer
	sw := ipc.NewWriter(&stream, ipc.WithSchema(rec.Schema()))
	if err := sw.Write(rec); err != nil {
		t.Fatal(err)
	}
	sw.Close()
	arrowPath := put("good.arrow", nil)
	af, _ := os.Create(arrowPath)
	fw, err := ipc.NewFileWriter(af, ipc.WithSchema(rec.Schema()))
	if err != nil {
		t.Fatal(err)
	}
	fw.Write(rec)
	fw.Close()
	af.Close()
	arrowBytes, _ := os.ReadFile(arrowPath)

	// PNG signature and IHDR start (PNG specification, section 5.2).
	png := []byte("\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR\x00\x00\x00\x10")
	random := make([]byte, 3000)
	rng := rand.New(rand.NewPCG(1, 2))
	for i := range random {
		random[i] = byte(rng.Uint32())
	}
	emptyParquet := writeParquetRecord(t, "empty.parquet", nullRecord(nil, nil, nil, nil))
	nullID := writeParquetRecord(t, "nullid.parquet", nullRecord([]int64{1, 2, 0}, []bool{true, true, false}, []float64{1, 2, 3}, nil))
	nullF := writeParquetRecord(t, "nullf.parquet", nullRecord([]int64{1, 2, 3}, nil, []float64{1, 0, 3}, []bool{true, false, true}))
	nanRow := writeTableFile(t, bigTable(1100, 1043, float32(math.NaN())))
	infRow := writeTableFile(t, bigTable(1100, 7, float32(math.Inf(-1))))

	cases := []struct {
		name   string
		path   string
		opt    Options
		column string
		row    int64
		reason string
	}{
		{"png", put("picture.png", png), Options{}, "", 0, "not a Parquet, Arrow or CSV table"},
		{"png named csv", put("picture.csv", png), Options{}, "", 0, "not a Parquet, Arrow or CSV table"},
		{"random bytes", put("noise.parquet", random), Options{}, "", 0, "not a Parquet, Arrow or CSV table"},
		{"zero bytes", put("nothing.csv", nil), Options{}, "", 0, "empty file"},
		{"truncated parquet", put("cut.parquet", pq.Bytes()[:pq.Len()/2]), Options{}, "", 0, "truncated Parquet file"},
		{"parquet cut in magic", put("cut2.parquet", pq.Bytes()[:2]), Options{}, "", 0, "truncated Parquet file"},
		{"truncated arrow file", put("cut.arrow", arrowBytes[:len(arrowBytes)-20]), Options{}, "", 0, "truncated Arrow IPC file"},
		{"truncated arrow stream", put("cut.arrows", stream.Bytes()[:stream.Len()-40]), Options{}, "", 1, "truncated or corrupt Arrow IPC stream"},
		{"corrupt parquet footer", put("bad.parquet", append([]byte("PAR1garbagegarbage\x05\x00\x00\x00"), "PAR1"...)), Options{}, "", 0, "cannot read Parquet metadata"},
		{"missing feature", arrowPath, Options{Features: []string{"g7"}}, "g7", 0, `no such column (the table has columns "id", "f", "s", "x")`},
		{"missing id", arrowPath, Options{ID: "key"}, "key", 0, "no such column"},
		{"missing label", arrowPath, Options{Label: "species"}, "species", 0, "no such column"},
		{"pattern matches nothing", arrowPath, Options{Features: []string{"pc_*"}}, "", 0, `feature pattern "pc_*" matches no column`},
		{"pattern matches text only", arrowPath, Options{Features: []string{"s*"}}, "", 0, `matches no numeric column`},
		{"bad pattern", arrowPath, Options{Features: []string{"[x"}}, "", 0, "bad feature pattern"},
		{"text feature", arrowPath, Options{Features: []string{"x", "s"}}, "s", 0, "feature column is not numeric (type utf8)"},
		{"text feature csv", put("t.csv", []byte("a,b\n1,x\n2,y\n")), Options{Features: []string{"b"}}, "b", 0, "not numeric (type text)"},
		{"no numeric column", put("words.csv", []byte("a,b\nx,y\n")), Options{}, "", 0, "no numeric feature columns"},
		{"only id and label numeric", put("il.csv", []byte("id,grp,name\n1,2,x\n")), Options{ID: "id", Label: "grp"}, "", 0, "no numeric feature columns"},
		{"float id", arrowPath, Options{ID: "x", Features: []string{"f"}}, "x", 0, "id column has type float64"},
		{"empty parquet", emptyParquet, Options{}, "", 0, "empty table (0 rows)"},
		{"empty csv", put("h.csv", []byte("a,b\n")), Options{}, "", 0, "empty table (0 rows)"},
		{"csv without header", put("e.csv", []byte("\n\n")), Options{}, "", 0, "empty CSV file"},
		{"NaN parquet", nanRow, Options{BatchRows: 100}, "g7", 1043, "value is NaN"},
		{"-Inf parquet", infRow, Options{}, "g7", 7, "value is -Inf"},
		{"null feature", nullF, Options{ID: "id"}, "f", 2, "value is null"},
		{"null id", nullID, Options{ID: "id"}, "id", 3, "id is null"},
		{"NaN csv", put("n.csv", []byte("a,b\n1,2\n3,nan\n")), Options{}, "b", 2, "value is NaN"},
		{"+Inf csv", put("i.csv", []byte("a,b\n1,2\n3,4\n5,+Inf\n")), Options{}, "b", 3, "value is +Inf"},
		{"overflow csv", put("o.csv", []byte("a,b\n1,1e39\n")), Options{}, "b", 1, "outside the float32 range"},
		{"empty cell csv", put("c.csv", []byte("a,b\n1,2\n,4\n")), Options{}, "a", 2, "value is null"},
		{"text in number csv", put("x.csv", []byte("a,b\n1,2\n3,4\n5,n/a\n")), Options{}, "b", 3, `value is not a number: "n/a"`},
		{"null id csv", put("ni.csv", []byte("id,b\n1,2\n,4\n")), Options{ID: "id"}, "id", 2, "id is null"},
		{"ragged csv", put("r.csv", []byte("a,b\n1,2\n3\n")), Options{}, "", 2, "malformed CSV (line 3): wrong number of fields"},
		{"bad quote csv", put("q.csv", []byte("a,b\n1,\"2\n")), Options{}, "", 1, "malformed CSV"},
		{"all rows dropped", put("d.csv", []byte("a\nNaN\ninf\n")), Options{SkipInvalid: true}, "", 0, "empty table: all 2 rows were dropped"},
		{"directory without tables", docsDir(t), Options{}, "", 0, "directory holds no Parquet, Arrow or CSV files"},
		{"no such file", filepath.Join(dir, "absent.parquet"), Options{}, "", 0, "cannot open: no such file or directory"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := Read(c.path, c.opt)
			wantInputError(t, err, c.path, c.column, c.row, c.reason)
		})
	}
}

// docsDir returns a directory holding only a text file that is not a table by its name.
func docsDir(t *testing.T) string {
	dir := t.TempDir()
	if err := os.WriteFile(filepath.Join(dir, "README.md"), []byte("# notes\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	return dir
}

// TestInputErrorFormat pins the message layout of the example on InputError.
func TestInputErrorFormat(t *testing.T) {
	cases := []struct {
		e    InputError
		want string
	}{
		{InputError{File: "data.parquet", Column: "g7", Row: 1043, Reason: "value is NaN"}, `data.parquet: column "g7", row 1043: value is NaN`},
		{InputError{File: "a.csv", Row: 2, Reason: "x"}, `a.csv: row 2: x`},
		{InputError{File: "a.csv", Column: "b", Reason: "x"}, `a.csv: column "b": x`},
		{InputError{File: "a.csv", Reason: "bad\nthing\there"}, `a.csv: bad thing here`},
	}
	for _, c := range cases {
		if got := c.e.Error(); got != c.want {
			t.Errorf("got %q, want %q", got, c.want)
		}
	}
	if !strings.Contains((&InputError{File: "f", Reason: "r", Err: os.ErrNotExist}).Unwrap().Error(), "not exist") {
		t.Error("Unwrap lost the cause")
	}
}

// TestDamagedFiles flips bytes, one at a time, of a small Arrow IPC file, Arrow IPC
// stream and Parquet file (every byte of the first 64 and last 192, and every ninth
// in between): reading
// must not panic and must either succeed or give an *InputError; the IPC checks of
// ipcfooter.go must not panic on any of them either.
func TestDamagedFiles(t *testing.T) {
	rec := nullRecord([]int64{1, 2, 3, 4, 5}, nil, []float64{1, 2, 3, 4, 5}, nil)
	defer rec.Release()
	path := writeTemp(t, "d.arrow", nil)
	f, _ := os.Create(path)
	w, err := ipc.NewFileWriter(f, ipc.WithSchema(rec.Schema()))
	if err != nil {
		t.Fatal(err)
	}
	w.Write(rec)
	w.Write(rec)
	w.Close()
	f.Close()
	arrowFile, _ := os.ReadFile(path)
	pqFile, _ := os.ReadFile(writeParquetRecord(t, "d.parquet", rec))
	var stream bytes.Buffer
	sw := ipc.NewWriter(&stream, ipc.WithSchema(rec.Schema()))
	sw.Write(rec)
	sw.Write(rec)
	sw.Close()
	for _, orig := range [][]byte{arrowFile, pqFile, stream.Bytes()} {
		damage(t, orig)
	}
}

func damage(t *testing.T, orig []byte) {
	stride := 9
	if testing.Short() {
		stride = 27
	}
	dir := t.TempDir()
	if d, err := os.MkdirTemp("/dev/shm", "ingest"); err == nil { // memory-backed: many small writes
		dir = d
		defer os.RemoveAll(d)
	}
	bad := filepath.Join(dir, "bad.bin")
	for p := 0; p < len(orig); p++ {
		if p >= 64 && p < len(orig)-192 && p%stride != 0 {
			continue // every byte of the header and footer, every stride-th in between
		}
		b := bytes.Clone(orig)
		b[p] ^= 0x5a
		os.WriteFile(bad, b, 0o644)
		func() {
			defer func() {
				if r := recover(); r != nil {
					t.Fatalf("byte %d flipped: panic %v\n%s", p, r, debug.Stack())
				}
			}()
			g, _ := os.Open(bad)
			ipcFileRows(g)
			ipcStreamCheck(g)
			g.Close()
			_, err := Read(bad, Options{ID: "id"})
			var ie *InputError
			if err != nil && !errors.As(err, &ie) {
				t.Fatalf("byte %d flipped: %v is not an *InputError", p, err)
			}
		}()
	}
}
