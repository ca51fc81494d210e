package ingest

import (
	"fmt"
	"math"
	"os"
	"slices"
	"strconv"
	"strings"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/float16"
	"github.com/apache/arrow/go/v17/arrow/ipc"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"

	"nightjar/internal/core"
)

// mnistTable builds a table from the first n MNIST test images (see mnistRows) with
// integer ids and digit labels, plus edge values of IEEE 754 binary32 in row 0 (common
// practice: signed zero, the smallest subnormal, the largest finite value).
func mnistTable(t *testing.T, n int) *Table {
	m, lab := mnistRows(t, n)
	names := make([]string, m.D)
	for j := range names {
		names[j] = fmt.Sprintf("px_%03d", j)
	}
	copy(m.Data, []float32{float32(math.Copysign(0, -1)), math.SmallestNonzeroFloat32, math.MaxFloat32, -math.MaxFloat32})
	ids := make([]int64, n)
	for i := range ids {
		ids[i] = int64(i)*1_000_003 - 7
	}
	return &Table{Matrix: m, Features: names, ID: &Column{Name: "image", Ints: ids}, Label: &Column{Name: "digit", Strings: lab}}
}

// TestParquetRoundTrip writes MNIST rows with WriteTable and reads them back: the
// values must come back bit for bit, with ids, labels and a Hash that matches its
// definition, whatever the chunk size.
func TestParquetRoundTrip(t *testing.T) {
	n := 300
	want := mnistTable(t, n)
	path := writeTableFile(t, want)
	var first string
	for _, batch := range []int{0, 7, 128, 1000} {
		t.Run(fmt.Sprint("batch", batch), func(t *testing.T) {
			var calls int
			var last [2]int64
			got, err := Read(path, Options{ID: "image", Label: "digit", BatchRows: batch,
				Progress: func(done, total int64) { calls++; last = [2]int64{done, total} }})
			if err != nil {
				t.Fatal(err)
			}
			if got.Format != "parquet" || got.N != n || got.D != want.D || !slices.Equal(got.Features, want.Features) {
				t.Fatalf("got format %s, %d×%d, features %v…", got.Format, got.N, got.D, got.Features[:3])
			}
			if !equalBits(got.Data, want.Data) {
				t.Fatal("feature values differ")
			}
			if cap(got.Data) != n*want.D {
				t.Errorf("cap(Data) = %d, want exactly N×D = %d (pre-sized from metadata)", cap(got.Data), n*want.D)
			}
			if !slices.Equal(got.ID.Ints, want.ID.Ints) || got.ID.Name != "image" {
				t.Fatal("ids differ")
			}
			if !slices.Equal(got.Label.Strings, want.Label.Strings) {
				t.Fatal("labels differ")
			}
			if got.Hash != fingerprint(want.D, want.Data) || Fingerprint(want.Matrix) != got.Hash {
				t.Fatal("Hash does not match its definition")
			}
			if first == "" {
				first = got.Hash
			} else if got.Hash != first {
				t.Fatal("Hash depends on the chunk size")
			}
			if last != [2]int64{int64(n), int64(n)} || calls == 0 {
				t.Fatalf("last progress = %v after %d calls, want [%d %d]", last, calls, n, n)
			}
		})
	}
}

// TestStringIDRoundTrip: text ids stay text, integer labels stay integers, a
// null label stays null (hand-worked).
func TestStringIDRoundTrip(t *testing.T) {
	tab := &Table{
		Matrix:   core.Matrix{N: 3, D: 2, Data: []float32{1, 2, 3, 4, 5, 6}},
		Features: []string{"a", "b"},
		ID:       &Column{Name: "key", Strings: []string{"x-1", "x-2", "x-1"}},
		Label:    &Column{Name: "grp", Ints: []int64{7, -3, 0}, Null: []bool{false, false, true}},
	}
	got, err := Read(writeTableFile(t, tab), Options{ID: "key", Label: "grp"})
	if err != nil {
		t.Fatal(err)
	}
	if got.ID.Ints != nil || !slices.Equal(got.ID.Strings, tab.ID.Strings) {
		t.Errorf("ids = %v %v", got.ID.Ints, got.ID.Strings)
	}
	if !slices.Equal(got.Label.Ints, []int64{7, -3, 0}) || !slices.Equal(got.Label.Null, []bool{false, false, true}) {
		t.Errorf("labels = %+v", got.Label)
	}
	// Duplicate rows are valid data.
	tab.Data = []float32{1, 2, 1, 2, 1, 2}
	got, err = Read(writeTableFile(t, tab), Options{ID: "key", Label: "grp"})
	if err != nil || got.N != 3 {
		t.Fatalf("duplicate rows: %v, N = %v", err, got)
	}
}

// widthsRecord builds a record with one feature column of every integer and float
// width, a dictionary-encoded label, an int32 id and a large-string column, for rows
// [lo, lo+n). The expected feature value of row i, column c is wantWidth(i, c).
func widthsRecord(mem memory.Allocator, lo, n int, dict arrow.Array) arrow.Record {
	dictType := &arrow.DictionaryType{IndexType: arrow.PrimitiveTypes.Int8, ValueType: arrow.BinaryTypes.String}
	fields := []arrow.Field{
		{Name: "id", Type: arrow.PrimitiveTypes.Int32},
		{Name: "kind", Type: dictType},
		{Name: "note", Type: arrow.BinaryTypes.LargeString},
		{Name: "i8", Type: arrow.PrimitiveTypes.Int8}, {Name: "i16", Type: arrow.PrimitiveTypes.Int16},
		{Name: "i32", Type: arrow.PrimitiveTypes.Int32}, {Name: "i64", Type: arrow.PrimitiveTypes.Int64},
		{Name: "u8", Type: arrow.PrimitiveTypes.Uint8}, {Name: "u16", Type: arrow.PrimitiveTypes.Uint16},
		{Name: "u32", Type: arrow.PrimitiveTypes.Uint32}, {Name: "u64", Type: arrow.PrimitiveTypes.Uint64},
		{Name: "f16", Type: arrow.FixedWidthTypes.Float16},
		{Name: "f32", Type: arrow.PrimitiveTypes.Float32}, {Name: "f64", Type: arrow.PrimitiveTypes.Float64},
		{Name: "flag", Type: arrow.FixedWidthTypes.Boolean},
	}
	sc := arrow.NewSchema(fields, nil)
	// Build column 1 as its int8 indices, then wrap them with the shared dictionary.
	bfields := slices.Clone(fields)
	bfields[1].Type = arrow.PrimitiveTypes.Int8
	rb := array.NewRecordBuilder(mem, arrow.NewSchema(bfields, nil))
	defer rb.Release()
	for i := lo; i < lo+n; i++ {
		rb.Field(0).(*array.Int32Builder).Append(int32(i))
		rb.Field(1).(*array.Int8Builder).Append(int8(i % dict.Len()))
		rb.Field(2).(*array.LargeStringBuilder).Append(fmt.Sprintf("note %d", i))
		rb.Field(3).(*array.Int8Builder).Append(int8(wantWidth(i, 0)))
		rb.Field(4).(*array.Int16Builder).Append(int16(wantWidth(i, 1)))
		rb.Field(5).(*array.Int32Builder).Append(int32(wantWidth(i, 2)))
		rb.Field(6).(*array.Int64Builder).Append([]int64{math.MinInt64, math.MaxInt64, int64(wantWidth(i, 3))}[min(i, 2)])
		rb.Field(7).(*array.Uint8Builder).Append(uint8(wantWidth(i, 4)))
		rb.Field(8).(*array.Uint16Builder).Append(uint16(wantWidth(i, 5)))
		rb.Field(9).(*array.Uint32Builder).Append(uint32(wantWidth(i, 6)))
		rb.Field(10).(*array.Uint64Builder).Append([]uint64{0, math.MaxUint64, uint64(wantWidth(i, 7))}[min(i, 2)])
		rb.Field(11).(*array.Float16Builder).Append(float16.New(float32(wantWidth(i, 8))))
		rb.Field(12).(*array.Float32Builder).Append(float32(wantWidth(i, 9)))
		rb.Field(13).(*array.Float64Builder).Append(wantWidth(i, 10))
		rb.Field(14).(*array.BooleanBuilder).Append(i%2 == 0)
	}
	rec := rb.NewRecord()
	defer rec.Release()
	kinds := array.NewDictionaryArray(dictType, rec.Column(1), dict)
	defer kinds.Release()
	cols := slices.Clone(rec.Columns())
	cols[1] = kinds
	return array.NewRecord(sc, cols, int64(n))
}

// wantWidth is the value of row i in width column c: the extremes of each type in
// rows 0 and 1, then small values every type holds exactly (and float16 too).
func wantWidth(i, c int) float64 {
	extremes := [][2]float64{
		{math.MinInt8, math.MaxInt8}, {math.MinInt16, math.MaxInt16}, {math.MinInt32, math.MaxInt32},
		{math.MinInt64, math.MaxInt64}, {0, math.MaxUint8}, {0, math.MaxUint16}, {0, math.MaxUint32},
		{0, math.MaxUint64}, {-65504, 65504}, {-math.MaxFloat32, math.MaxFloat32}, {-1e30, 1e30},
	}
	if i < 2 {
		return extremes[c][i] // float64 of MaxInt64 and MaxUint64 round up to 2⁶³ and 2⁶⁴
	}
	return float64((i*7+c*3)%100) + 0.5*float64(c/8)
}

var widthNames = []string{"i8", "i16", "i32", "i64", "u8", "u16", "u32", "u64", "f16", "f32", "f64"}

// TestArrowIPCWidths writes the same batches as an Arrow IPC file and stream and as
// Parquet with Arrow's own writers and checks every width converts to the nearest float32 (the
// extremes of the 64-bit integers round, as float32 conversion does), dictionary
// labels decode, an integer id stays an integer, and an empty batch is harmless.
func TestArrowIPCWidths(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.DefaultAllocator)
	dictB := array.NewStringBuilder(mem)
	dictB.AppendValues([]string{"sparrow", "wren", "finch"}, nil)
	dict := dictB.NewArray()
	dictB.Release()
	defer dict.Release()
	sizes := []int{5, 0, 9, 1}
	var recs []arrow.Record
	lo := 0
	for _, n := range sizes {
		recs = append(recs, widthsRecord(mem, lo, n, dict))
		lo += n
	}
	total := lo
	for _, format := range []string{"arrow", "arrow-stream", "parquet", "arrow-zstd"} {
		t.Run(format, func(t *testing.T) {
			path := writeTemp(t, "widths.bin", nil) // no extension: magic bytes decide
			f, err := os.Create(path)
			if err != nil {
				t.Fatal(err)
			}
			defer f.Close()
			var w interface {
				Write(arrow.Record) error
				Close() error
			}
			switch format {
			case "arrow":
				w, err = ipc.NewFileWriter(f, ipc.WithSchema(recs[0].Schema()), ipc.WithAllocator(mem))
			case "arrow-stream":
				w = ipc.NewWriter(f, ipc.WithSchema(recs[0].Schema()), ipc.WithAllocator(mem))
			case "arrow-zstd": // compressed record batch bodies
				w, err = ipc.NewFileWriter(f, ipc.WithSchema(recs[0].Schema()), ipc.WithAllocator(mem), ipc.WithZstd())
			default:
				// pqarrow's writer, one row group per batch, storing the Arrow schema
				// (dictionary label) that made pqarrow's record reader fail with
				// ErrNotImplemented on batches spanning two dictionaries.
				w, err = pqarrow.NewFileWriter(recs[0].Schema(), f, nil, pqarrow.NewArrowWriterProperties(pqarrow.WithStoreSchema()))
			}
			if err != nil {
				t.Fatal(err)
			}
			for _, r := range recs {
				if err := w.Write(r); err != nil {
					t.Fatal(err)
				}
			}
			if err := w.Close(); err != nil {
				t.Fatal(err)
			}
			got, err := Read(path, Options{ID: "id", Label: "kind", BatchRows: 4})
			if err != nil {
				t.Fatal(err)
			}
			if format == "arrow-zstd" {
				format = "arrow"
			}
			if got.Format != format {
				t.Errorf("Format = %q, want %q", got.Format, format)
			}
			if format == "arrow" {
				// Row count from the footer: the matrix is allocated once, at its size.
				f, _ := os.Open(path)
				rows, err := ipcFileRows(f)
				f.Close()
				if err != nil || rows != int64(total) {
					t.Errorf("ipcFileRows = %d, %v; want %d", rows, err, total)
				}
				if cap(got.Data) != total*len(widthNames) {
					t.Errorf("cap(Data) = %d, want exactly N×D = %d", cap(got.Data), total*len(widthNames))
				}
			}
			if !slices.Equal(got.Features, widthNames) {
				t.Fatalf("default features = %v, want %v (numeric columns except id, label)", got.Features, widthNames)
			}
			if got.N != total {
				t.Fatalf("N = %d, want %d", got.N, total)
			}
			for i := 0; i < total; i++ {
				for c := range widthNames {
					if w := float32(wantWidth(i, c)); got.Row(i)[c] != w {
						t.Errorf("row %d %s = %v, want %v", i, widthNames[c], got.Row(i)[c], w)
					}
				}
				if got.ID.Ints[i] != int64(i) {
					t.Errorf("id %d = %d", i, got.ID.Ints[i])
				}
				if want := []string{"sparrow", "wren", "finch"}[i%3]; got.Label.Strings[i] != want {
					t.Errorf("label %d = %q, want %q", i, got.Label.Strings[i], want)
				}
			}
			// A large-string column as id, the integer id as label: integers stay integers.
			got, err = Read(path, Options{Features: []string{"f*"}, ID: "note", Label: "id"})
			if err != nil {
				t.Fatal(err)
			}
			if !slices.Equal(got.Features, []string{"f16", "f32", "f64"}) {
				t.Errorf("pattern f* gave %v", got.Features)
			}
			if got.ID.Strings[3] != "note 3" || got.Label.Ints == nil || got.Label.Ints[3] != 3 {
				t.Errorf("id %q label %v", got.ID.Strings[3], got.Label)
			}
		})
	}
	for _, r := range recs {
		r.Release()
	}
}

// TestCSV reads CSV text: header row, quoted fields (RFC 4180 quoting, as
// encoding/csv implements it), tab separation, integer and text ids, a text column
// left out of the default features. Expected values are hand-worked from the text.
func TestCSV(t *testing.T) {
	cases := []struct {
		name, file, text string
		opt              Options
		features         []string
		data             []float32
		ids              any
		labels           []string
	}{
		{"comma", "a.csv", "id,colour,x,y\n1,red,0.5,-2\n2,\"blue, dark\",1e3,3\n3,,-0,4\n",
			Options{ID: "id", Label: "colour"}, []string{"x", "y"},
			[]float32{0.5, -2, 1000, 3, float32(math.Copysign(0, -1)), 4}, []int64{1, 2, 3}, []string{"red", "blue, dark", ""}},
		{"tab by extension", "a.tsv", "name\tv\nab\t1\ncd\t2\n",
			Options{ID: "name"}, []string{"v"}, []float32{1, 2}, []string{"ab", "cd"}, nil},
		{"tab sniffed, BOM, CRLF", "a.txt", "\ufeffk\tv\r\n7\t1.25\r\n8\t2\r\n",
			Options{Label: "k"}, []string{"v"}, []float32{1.25, 2}, nil, []string{"7", "8"}},
		{"leading zeros keep text ids", "z.csv", "code,v\n007,1\n8,2\n",
			Options{ID: "code"}, []string{"v"}, []float32{1, 2}, []string{"007", "8"}, nil},
		{"integer id", "z.csv", "code,v\n-5,1\n8,2\n",
			Options{ID: "code"}, []string{"v"}, []float32{1, 2}, []int64{-5, 8}, nil},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			got, err := Read(writeTemp(t, c.file, []byte(c.text)), c.opt)
			if err != nil {
				t.Fatal(err)
			}
			if got.Format != "csv" || !slices.Equal(got.Features, c.features) || !equalBits(got.Data, c.data) {
				t.Fatalf("got %s %v %v, want csv %v %v", got.Format, got.Features, got.Data, c.features, c.data)
			}
			switch ids := c.ids.(type) {
			case []int64:
				if !slices.Equal(got.ID.Ints, ids) {
					t.Errorf("ids %v, want %v", got.ID.Ints, ids)
				}
			case []string:
				if !slices.Equal(got.ID.Strings, ids) {
					t.Errorf("ids %v %v, want %v", got.ID.Ints, got.ID.Strings, ids)
				}
			}
			if c.labels != nil && !slices.Equal(columnText(got.Label), c.labels) {
				t.Errorf("labels %q, want %q", columnText(got.Label), c.labels)
			}
		})
	}
}

// columnText returns the values of c as text ("" for nulls).
func columnText(c *Column) []string {
	out := make([]string, c.Len())
	for i := range out {
		out[i] = c.String(i)
	}
	return out
}

// TestCSVIDTurnsText: an id column that looks integer in the sampled rows and holds
// text later switches to text without losing the earlier ids.
func TestCSVIDTurnsText(t *testing.T) {
	var b strings.Builder
	b.WriteString("id,v\n")
	n := csvSampleRows + 10
	for i := 0; i < n; i++ {
		if i == n-1 {
			fmt.Fprintf(&b, "last,%d\n", i)
		} else {
			fmt.Fprintf(&b, "%d,%d\n", i, i)
		}
	}
	got, err := Read(writeTemp(t, "ids.csv", []byte(b.String())), Options{ID: "id", BatchRows: 100})
	if err != nil {
		t.Fatal(err)
	}
	if got.ID.Ints != nil || len(got.ID.Strings) != n || got.ID.Strings[5] != "5" || got.ID.Strings[n-1] != "last" {
		t.Fatalf("ids not converted to text: %d strings", len(got.ID.Strings))
	}
	if got.N != n || got.Row(n - 1)[0] != float32(n-1) {
		t.Fatalf("N = %d", got.N)
	}
}

// TestFeatureSelection checks names, glob patterns (path.Match syntax), order and
// exclusion of id/label; expected selections hand-worked.
func TestFeatureSelection(t *testing.T) {
	tab := &Table{
		Matrix:   core.Matrix{N: 2, D: 5, Data: []float32{1, 2, 3, 4, 5, 6, 7, 8, 9, 10}},
		Features: []string{"pc_1", "pc_2", "g7", "pc_10", "score"},
		ID:       &Column{Name: "pc_id", Ints: []int64{1, 2}},
		Label:    &Column{Name: "label", Strings: []string{"a", "b"}},
	}
	path := writeTableFile(t, tab)
	cases := []struct {
		features []string
		want     []string
	}{
		{nil, []string{"pc_1", "pc_2", "g7", "pc_10", "score"}},
		{[]string{"pc_*"}, []string{"pc_1", "pc_2", "pc_10"}}, // the id pc_id is not a feature
		{[]string{"score", "pc_?"}, []string{"score", "pc_1", "pc_2"}},
		{[]string{"g7", "*"}, []string{"g7", "pc_1", "pc_2", "pc_10", "score"}},
		{[]string{"pc_[12]", "pc_1"}, []string{"pc_1", "pc_2"}},
	}
	for _, c := range cases {
		got, err := Read(path, Options{Features: c.features, ID: "pc_id", Label: "label"})
		if err != nil {
			t.Fatalf("%v: %v", c.features, err)
		}
		if !slices.Equal(got.Features, c.want) {
			t.Errorf("%v selected %v, want %v", c.features, got.Features, c.want)
		}
		for j, name := range got.Features {
			src := slices.Index(tab.Features, name)
			for i := 0; i < got.N; i++ {
				if got.Row(i)[j] != tab.Row(i)[src] {
					t.Errorf("%v: row %d column %s = %v, want %v", c.features, i, name, got.Row(i)[j], tab.Row(i)[src])
				}
			}
		}
	}
}

// TestSkipInvalid drops rows with NaN, ±Inf, null and text, counts them, keeps ids
// aligned and hashes only the kept rows (hand-worked expectations).
func TestSkipInvalid(t *testing.T) {
	text := "id,a,b\n1,1,2\n2,NaN,2\n3,3,inf\n4,4,\n5,x,5\n6,6,-Inf\n7,7,8\n"
	got, err := Read(writeTemp(t, "s.csv", []byte(text)), Options{ID: "id", SkipInvalid: true, BatchRows: 3})
	if err != nil {
		t.Fatal(err)
	}
	if got.Skipped != 5 || got.N != 2 || !slices.Equal(got.ID.Ints, []int64{1, 7}) || !equalBits(got.Data, []float32{1, 2, 7, 8}) {
		t.Fatalf("skipped %d, N %d, ids %v, data %v", got.Skipped, got.N, got.ID.Ints, got.Data)
	}
	if got.Hash != fingerprint(2, got.Data) {
		t.Error("Hash covers dropped rows")
	}
	// Parquet: NaN and ±Inf survive WriteTable and are dropped on reading.
	tab := &Table{Matrix: core.Matrix{N: 4, D: 1, Data: []float32{float32(math.NaN()), 1, float32(math.Inf(-1)), 2}}, Features: []string{"v"}}
	got, err = Read(writeTableFile(t, tab), Options{SkipInvalid: true})
	if err != nil || got.Skipped != 2 || !equalBits(got.Data, []float32{1, 2}) {
		t.Fatalf("parquet skip: %v %+v", err, got)
	}
}

// TestCSVParallelParse: a CSV of MNIST pixels (shortest decimal that round-trips each
// float32, strconv 'g' -1) reads back bit for bit, and the first bad value is found at
// the same row whatever the number of threads parsing blocks of rows.
func TestCSVParallelParse(t *testing.T) {
	n, d := 5000, 30
	m, _ := mnistRows(t, n)
	want := subColumns(m, 400, d)
	for i := range want {
		want[i] = want[i]*3.7 - 1.1 // not only multiples of 1/255
	}
	var b strings.Builder
	for j := 0; j < d; j++ {
		if j > 0 {
			b.WriteByte(',')
		}
		fmt.Fprintf(&b, "c%d", j)
	}
	b.WriteByte('\n')
	for i := 0; i < n; i++ {
		for j := 0; j < d; j++ {
			if j > 0 {
				b.WriteByte(',')
			}
			b.WriteString(strconv.FormatFloat(float64(want[i*d+j]), 'g', -1, 32))
		}
		b.WriteByte('\n')
	}
	good := writeTemp(t, "px.csv", []byte(b.String()))
	lines := strings.Split(b.String(), "\n")
	lines[3100] = "x" + lines[3100]                                         // first bad value: row 3100, column c0
	lines[3500] = "NaN" + lines[3500][strings.IndexByte(lines[3500], ','):] // second
	lines[4500] = "1," + lines[4500]                                        // malformed after both
	bad := writeTemp(t, "bad.csv", []byte(strings.Join(lines, "\n")))
	for _, threads := range []int{1, 2, 4, 0} {
		got, err := Read(good, Options{Threads: threads})
		if err != nil {
			t.Fatal(err)
		}
		if !equalBits(got.Data, want) {
			t.Fatalf("%d threads: values differ", threads)
		}
		_, err = Read(bad, Options{Threads: threads})
		wantInputError(t, err, bad, "c0", 3100, "value is not a number")
		_, err = Read(bad, Options{SkipInvalid: true, BatchRows: 4400, Threads: threads})
		wantInputError(t, err, bad, "", 4500, "wrong number of fields")
	}
}
