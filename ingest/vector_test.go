package ingest

import (
	"bytes"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"slices"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/ipc"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"

	"nightjar/internal/core"
)

// vectorValues returns n×w pseudo-random float32 values (plumbing data).
func vectorValues(n, w int, seed uint64) []float32 {
	rng := rand.New(rand.NewPCG(seed, 7))
	out := make([]float32, n*w)
	for i := range out {
		out[i] = float32(rng.NormFloat64())
	}
	return out
}

// writeArrowFile writes the records as an Arrow IPC file with Arrow's own Go
// writer (ipc.FileWriter) and returns its path.
func writeArrowFile(t *testing.T, name string, recs ...arrow.Record) string {
	t.Helper()
	path := writeTemp(t, name, nil)
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	w, err := ipc.NewFileWriter(f, ipc.WithSchema(recs[0].Schema()))
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
	f.Close()
	return path
}

// writeParquetFile writes the records with Arrow's Go Parquet writer
// (pqarrow.FileWriter) and returns its path.
func writeParquetFile(t *testing.T, name string, recs ...arrow.Record) string {
	t.Helper()
	var buf bytes.Buffer
	w, err := pqarrow.NewFileWriter(recs[0].Schema(), &buf, nil, pqarrow.DefaultWriterProps())
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
	return writeTemp(t, name, buf.Bytes())
}

// vectorRecord builds a record of an int64 "id", a vector column "emb" of
// type vt holding vals (n×w; nulls[i] makes row i a null list), and a float64
// scalar "x" = i/2.
func vectorRecord(t *testing.T, vt arrow.DataType, vals []float32, n, w int, nulls map[int]bool) arrow.Record {
	t.Helper()
	sc := arrow.NewSchema([]arrow.Field{
		{Name: "id", Type: arrow.PrimitiveTypes.Int64},
		{Name: "emb", Type: vt, Nullable: true},
		{Name: "x", Type: arrow.PrimitiveTypes.Float64},
	}, nil)
	rb := array.NewRecordBuilder(memory.DefaultAllocator, sc)
	defer rb.Release()
	lb := rb.Field(1).(array.ListLikeBuilder)
	for i := range n {
		rb.Field(0).(*array.Int64Builder).Append(int64(i))
		rb.Field(2).(*array.Float64Builder).Append(float64(i) / 2)
		if nulls[i] {
			lb.AppendNull()
			continue
		}
		lb.Append(true)
		row := vals[i*w : (i+1)*w]
		switch vb := lb.ValueBuilder().(type) {
		case *array.Float32Builder:
			vb.AppendValues(row, nil)
		case *array.Float64Builder:
			for _, v := range row {
				vb.Append(float64(v))
			}
		case *array.Int16Builder:
			for _, v := range row {
				vb.Append(int16(v))
			}
		default:
			t.Fatalf("value builder %T", vb)
		}
	}
	return rb.NewRecord()
}

// TestVectorColumn: a fixed_size_list<float32>[64] column of 5,000 rows (Arrow
// IPC file, Arrow's Go writer) reads as the same matrix, the same fingerprint,
// as the same values in 64 scalar float32 columns (Parquet, Arrow's Go writer);
// so do a list<float32> in Parquet and Arrow, and a large_list<float64> (exact
// for float32 values) in Arrow (pqarrow v17 does not write large lists); the
// table's columns name it with its width.
func TestVectorColumn(t *testing.T) {
	n, w := 5000, 64
	vals := vectorValues(n, w, 1)
	names := make([]string, w)
	for j := range names {
		names[j] = fmt.Sprintf("emb[%d]", j)
	}
	scalar := writeTableFile(t, &Table{Matrix: core.Matrix{N: n, D: w, Data: vals}, Features: names})
	want, err := Read(scalar, Options{})
	if err != nil {
		t.Fatal(err)
	}
	fixed := vectorRecord(t, arrow.FixedSizeListOf(int32(w), arrow.PrimitiveTypes.Float32), vals, n, w, nil)
	defer fixed.Release()
	list := vectorRecord(t, arrow.ListOf(arrow.PrimitiveTypes.Float32), vals, n, w, nil)
	defer list.Release()
	large := vectorRecord(t, arrow.LargeListOf(arrow.PrimitiveTypes.Float64), vals, n, w, nil)
	defer large.Release()
	files := map[string]string{
		"fixed_size_list arrow": writeArrowFile(t, "fixed.arrow", fixed),
		"list parquet":          writeParquetFile(t, "list.parquet", list),
		"large_list arrow":      writeArrowFile(t, "large.arrow", large),
		"list arrow":            writeArrowFile(t, "list.arrow", list),
	}
	for name, path := range files {
		t.Run(name, func(t *testing.T) {
			got, err := Read(path, Options{Features: []string{"emb"}, ID: "id", BatchRows: 700})
			if err != nil {
				t.Fatal(err)
			}
			if got.N != n || got.D != w || !equalBits(got.Data, want.Data) || got.Hash != want.Hash {
				t.Fatalf("got %d×%d, hash %s; want the scalar table's %d×%d, %s", got.N, got.D, got.Hash, n, w, want.Hash)
			}
			if !slices.Equal(got.Features, names) {
				t.Errorf("features %v…", got.Features[:3])
			}
			if len(got.Columns) != 1 || got.Columns[0].Name != "emb" || got.Columns[0].Width != w || !got.Columns[0].Vector || got.Columns[0].Pattern != "emb" {
				t.Errorf("columns %+v", got.Columns)
			}
			// Mixed with a scalar column, by default selection (the id excluded).
			mixed, err := Read(path, Options{ID: "id"})
			if err != nil {
				t.Fatal(err)
			}
			if mixed.D != w+1 || mixed.Features[w] != "x" || mixed.Row(17)[w] != 8.5 || mixed.Row(17)[3] != vals[17*w+3] {
				t.Errorf("mixed: D %d, features …%v, row 17: %v", mixed.D, mixed.Features[w-1:], mixed.Row(17)[w])
			}
		})
	}
}

// TestVectorBad: a ragged row is an error naming the row (even when skipping),
// a null list is a null value (an error, or a skipped row), NaN inside a
// vector names the element, an integer vector reads as floats.
func TestVectorBad(t *testing.T) {
	n, w := 40, 3
	vals := vectorValues(n, w, 2)
	// Ragged: row 26 (1-based) has one value fewer.
	sc := arrow.NewSchema([]arrow.Field{{Name: "emb", Type: arrow.ListOf(arrow.PrimitiveTypes.Float32)}}, nil)
	rb := array.NewRecordBuilder(memory.DefaultAllocator, sc)
	lb := rb.Field(0).(*array.ListBuilder)
	for i := range n {
		lb.Append(true)
		row := vals[i*w : (i+1)*w]
		if i == 25 {
			row = row[:2]
		}
		lb.ValueBuilder().(*array.Float32Builder).AppendValues(row, nil)
	}
	ragged := rb.NewRecord()
	rb.Release()
	for _, path := range []string{writeParquetFile(t, "ragged.parquet", ragged), writeArrowFile(t, "ragged.arrow", ragged)} {
		for _, skip := range []bool{false, true} {
			_, err := Read(path, Options{SkipInvalid: skip, BatchRows: 8})
			wantInputError(t, err, path, "emb", 26, "vector of 2 values; every row must hold 3")
		}
	}
	// A null list at row 5, a NaN at row 9, element 2.
	vals[8*w+2] = float32(math.NaN())
	rec := vectorRecord(t, arrow.FixedSizeListOf(int32(w), arrow.PrimitiveTypes.Float32), vals, n, w, map[int]bool{4: true})
	path := writeArrowFile(t, "nulls.arrow", rec)
	_, err := Read(path, Options{Features: []string{"emb"}})
	wantInputError(t, err, path, "emb[0]", 5, "value is null")
	got, err := Read(path, Options{Features: []string{"emb"}, ID: "id", SkipInvalid: true})
	if err != nil {
		t.Fatal(err)
	}
	if got.N != n-2 || got.Skipped != 2 || got.SkippedRows[1].Column != "emb[2]" || got.SkippedRows[1].Row != 9 || got.SkippedRows[1].ID != "8" {
		t.Errorf("N %d, skipped %+v", got.N, got.SkippedRows)
	}
	// Integers.
	ints := vectorRecord(t, arrow.ListOf(arrow.PrimitiveTypes.Int16), []float32{1, -2, 3, 4, 5, -6}, 2, 3, nil)
	got, err = Read(writeParquetFile(t, "ints.parquet", ints), Options{Features: []string{"emb"}})
	if err != nil || !equalBits(got.Data, []float32{1, -2, 3, 4, 5, -6}) {
		t.Fatalf("ints: %v %v", err, got)
	}
}
