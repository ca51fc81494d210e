package ingest

import (
	"bytes"
	"context"
	"errors"
	"math"
	"slices"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet/file"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"

	"nightjar/internal/core"
)

// closeRecorder is a writer that notes whether Close was called.
type closeRecorder struct {
	bytes.Buffer
	closed bool
}

func (c *closeRecorder) Close() error { c.closed = true; return nil }

// TestWriteEmbedding reads the file back with pqarrow itself: schema, exact float64
// values, ids and labels, row groups of WriteChunkRows rows; the writer is not closed.
func TestWriteEmbedding(t *testing.T) {
	cases := []struct {
		name      string
		n, dims   int
		id, label *Column
		wantNames []string
		idType    arrow.DataType
	}{
		{"2-D int id and label", 70000, 2, &Column{Name: "cell"}, &Column{Name: "type"}, []string{"cell", "type", "map_1", "map_2"}, arrow.PrimitiveTypes.Int64},
		{"3-D text id", 5, 3, &Column{Name: "key", Strings: []string{"a", "b", "c", "d", "e"}}, nil, []string{"key", "map_1", "map_2", "map_3"}, arrow.BinaryTypes.String},
		{"no pass-through, unnamed label", 4, 2, nil, &Column{Ints: []int64{1, 2, 3, 4}}, []string{"label", "map_1", "map_2"}, nil},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			y := make([]float64, c.n*c.dims)
			for i := range y {
				y[i] = math.Sin(float64(i)) * 1e3 // any float64 bits
			}
			if c.id != nil && c.id.Strings == nil {
				c.id.Ints = make([]int64, c.n)
				for i := range c.id.Ints {
					c.id.Ints[i] = int64(i * 3)
				}
			}
			if c.label != nil && c.label.Ints == nil {
				c.label.Strings = make([]string, c.n)
				for i := range c.label.Strings {
					c.label.Strings[i] = []string{"alpha", "beta"}[i%2]
				}
			}
			var w closeRecorder
			if err := WriteEmbedding(&w, c.id, c.label, y, c.dims); err != nil {
				t.Fatal(err)
			}
			if w.closed {
				t.Error("WriteEmbedding closed the caller's writer")
			}
			pf, err := file.NewParquetReader(bytes.NewReader(w.Bytes()))
			if err != nil {
				t.Fatal(err)
			}
			if want := (c.n + WriteChunkRows - 1) / WriteChunkRows; pf.NumRowGroups() != want {
				t.Errorf("%d row groups, want %d", pf.NumRowGroups(), want)
			}
			fr, _ := pqarrow.NewFileReader(pf, pqarrow.ArrowReadProperties{}, memory.DefaultAllocator)
			tbl, err := fr.ReadTable(context.Background())
			if err != nil {
				t.Fatal(err)
			}
			defer tbl.Release()
			var names []string
			for _, f := range tbl.Schema().Fields() {
				names = append(names, f.Name)
			}
			if !slices.Equal(names, c.wantNames) {
				t.Fatalf("columns %v, want %v", names, c.wantNames)
			}
			if c.idType != nil && !arrow.TypeEqual(tbl.Schema().Field(0).Type, c.idType) {
				t.Errorf("id type %v, want %v", tbl.Schema().Field(0).Type, c.idType)
			}
			first := len(names) - c.dims
			for k := 0; k < c.dims; k++ {
				i := 0
				for _, chunk := range tbl.Column(first + k).Data().Chunks() {
					for _, v := range chunk.(*array.Float64).Float64Values() {
						if math.Float64bits(v) != math.Float64bits(y[i*c.dims+k]) {
							t.Fatalf("map_%d row %d = %v, want %v", k+1, i, v, y[i*c.dims+k])
						}
						i++
					}
				}
			}
			// And through Read: the pass-through columns come back.
			got, err := Read(writeTemp(t, "emb.parquet", w.Bytes()), Options{Features: []string{"map_*"}, ID: names[0]})
			if err != nil {
				t.Fatal(err)
			}
			if got.N != c.n || got.D != c.dims {
				t.Fatalf("Read gave %d×%d", got.N, got.D)
			}
			if c.id != nil && got.ID.String(c.n-1) != c.id.String(c.n-1) {
				t.Errorf("last id %q, want %q", got.ID.String(c.n-1), c.id.String(c.n-1))
			}
		})
	}
}

type failWriter struct{ after int }

func (f *failWriter) Write(p []byte) (int, error) {
	if f.after -= len(p); f.after < 0 {
		return 0, errors.New("disk full")
	}
	return len(p), nil
}

func TestWriteErrors(t *testing.T) {
	y := []float64{1, 2, 3, 4}
	cases := []struct {
		name string
		err  error
	}{
		{"dims 4", WriteEmbedding(&bytes.Buffer{}, nil, nil, y, 4)},
		{"dims 1", WriteEmbedding(&bytes.Buffer{}, nil, nil, y, 1)},
		{"ragged", WriteEmbedding(&bytes.Buffer{}, nil, nil, y[:3], 2)},
		{"short id", WriteEmbedding(&bytes.Buffer{}, &Column{Ints: []int64{1}}, nil, y, 2)},
		{"name clash", WriteEmbedding(&bytes.Buffer{}, &Column{Name: "map_1", Ints: []int64{1, 2}}, nil, y, 2)},
		{"write fails", WriteEmbedding(&failWriter{after: 100}, nil, nil, make([]float64, 20000), 2)},
		{"table shape", WriteTable(&bytes.Buffer{}, &Table{Matrix: core.Matrix{N: 2, D: 2, Data: []float32{1}}, Features: []string{"a", "b"}})},
		{"table names", WriteTable(&bytes.Buffer{}, &Table{Matrix: core.Matrix{N: 1, D: 2, Data: []float32{1, 2}}, Features: []string{"a"}})},
	}
	for _, c := range cases {
		if c.err == nil {
			t.Errorf("%s: no error", c.name)
		}
	}
}

// TestTableWriterParts: a table written in parts whose sizes are multiples
// of WriteChunkRows has the bytes of WriteTable on the whole table (the
// reference), and parts that do not fit the file are refused.
func TestTableWriterParts(t *testing.T) {
	n, d := 2*WriteChunkRows+77, 3
	whole := &Table{Matrix: core.Matrix{N: n, D: d, Data: make([]float32, n*d)}, Features: []string{"a", "b", "c"},
		ID: &Column{Name: "id", Ints: make([]int64, n)}, Label: &Column{Name: "kind", Strings: make([]string, n), Null: make([]bool, n)}}
	for i := range n {
		whole.ID.Ints[i] = int64(i)
		whole.Label.Strings[i] = []string{"x", "y", "z"}[i%3]
		whole.Label.Null[i] = i%11 == 0
		for j := range d {
			whole.Data[i*d+j] = float32(i) - 0.5*float32(j)
		}
	}
	part := func(lo, hi int) *Table {
		return &Table{Matrix: core.Matrix{N: hi - lo, D: d, Data: whole.Data[lo*d : hi*d]}, Features: whole.Features,
			ID: &Column{Name: "id", Ints: whole.ID.Ints[lo:hi]}, Label: &Column{Name: "kind", Strings: whole.Label.Strings[lo:hi], Null: whole.Label.Null[lo:hi]}}
	}
	var want, got bytes.Buffer
	if err := WriteTable(&want, whole); err != nil {
		t.Fatal(err)
	}
	tw, err := NewTableWriter(&got, whole.Features, &Column{Name: "id", Ints: []int64{}}, &Column{Name: "kind", Null: []bool{}})
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range [][2]int{{0, WriteChunkRows}, {WriteChunkRows, n}} {
		if err := tw.Write(part(r[0], r[1])); err != nil {
			t.Fatal(err)
		}
	}
	if err := tw.Close(); err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(got.Bytes(), want.Bytes()) {
		t.Errorf("written in two parts: %d bytes unlike WriteTable's %d", got.Len(), want.Len())
	}

	tw, err = NewTableWriter(&bytes.Buffer{}, whole.Features, &Column{Name: "id", Ints: []int64{}}, &Column{Name: "kind"})
	if err != nil {
		t.Fatal(err)
	}
	p := part(0, 10)
	for _, c := range []struct {
		name string
		t    *Table
	}{
		{"other features", &Table{Matrix: p.Matrix, Features: []string{"a", "b", "d"}, ID: p.ID, Label: &Column{Name: "kind", Strings: p.Label.Strings}}},
		{"no id", &Table{Matrix: p.Matrix, Features: p.Features, Label: &Column{Name: "kind", Strings: p.Label.Strings}}},
		{"text id", &Table{Matrix: p.Matrix, Features: p.Features, ID: &Column{Name: "id", Strings: p.Label.Strings}, Label: &Column{Name: "kind", Strings: p.Label.Strings}}},
		{"nulls in a column without them", p},
	} {
		if err := tw.Write(c.t); err == nil {
			t.Errorf("%s: written without an error", c.name)
		}
	}
}
