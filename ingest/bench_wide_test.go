package ingest

import (
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"strconv"
	"testing"
	"time"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet"
	"github.com/apache/arrow/go/v17/parquet/compress"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"
)

// The wide-table benchmark: an invented expression-like table (cells of 25
// types in a 20-dimensional latent space, mapped to the columns by fixed
// loadings, plus noise per value), written once as Parquet by
// TestWriteWideTable, then reduced to 50 components by BenchmarkReduceWide in
// a process of its own (so that its peak memory is the reduction's):
//
//	NIGHTJAR_WIDE_FILE=/tmp/wide.parquet NIGHTJAR_WIDE_ROWS=100000 NIGHTJAR_WIDE_COLS=5000 \
//	  go test ./ingest -run TestWriteWideTable -timeout 1h
//	NIGHTJAR_WIDE_FILE=/tmp/wide.parquet /usr/bin/time -v \
//	  go test ./ingest -run XXX -bench ReduceWide -benchtime 1x -timeout 1h

// wideRows fills vals (n×d) with rows lo … lo+n−1 of the wide table.
func wideRows(lo, n, d int, vals []float32) {
	const types, latent = 25, 20
	rng := rand.New(rand.NewPCG(42, 1))
	centres := make([]float64, types*latent)
	for i := range centres {
		centres[i] = 3 * rng.NormFloat64()
	}
	load := make([]float64, latent*d)
	for i := range load {
		load[i] = rng.NormFloat64() / math.Sqrt(latent)
	}
	z := make([]float64, latent)
	for r := range n {
		row := rand.New(rand.NewPCG(43, uint64(lo+r)))
		c := row.IntN(types)
		for f := range z {
			z[f] = centres[c*latent+f] + 0.7*row.NormFloat64()
		}
		out := vals[r*d : (r+1)*d]
		for j := range out {
			v := 0.0
			for f, zf := range z {
				v += zf * load[f*d+j]
			}
			out[j] = float32(v + row.NormFloat64())
		}
	}
}

// TestWriteWideTable writes the benchmark's table when NIGHTJAR_WIDE_FILE is set.
func TestWriteWideTable(t *testing.T) {
	path := os.Getenv("NIGHTJAR_WIDE_FILE")
	if path == "" {
		t.Skip("set NIGHTJAR_WIDE_FILE, NIGHTJAR_WIDE_ROWS and NIGHTJAR_WIDE_COLS to write the wide benchmark table")
	}
	n, _ := strconv.Atoi(os.Getenv("NIGHTJAR_WIDE_ROWS"))
	d, _ := strconv.Atoi(os.Getenv("NIGHTJAR_WIDE_COLS"))
	if n < 1 || d < 1 {
		t.Fatal("NIGHTJAR_WIDE_ROWS and NIGHTJAR_WIDE_COLS must be positive")
	}
	fields := make([]arrow.Field, d)
	for j := range fields {
		fields[j] = arrow.Field{Name: fmt.Sprintf("gene%05d", j), Type: arrow.PrimitiveTypes.Float32}
	}
	sc := arrow.NewSchema(fields, nil)
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	const group = 2048
	props := parquet.NewWriterProperties(parquet.WithCompression(compress.Codecs.Snappy), parquet.WithDictionaryDefault(false), parquet.WithMaxRowGroupLength(group))
	w, err := pqarrow.NewFileWriter(sc, f, props, pqarrow.DefaultWriterProps())
	if err != nil {
		t.Fatal(err)
	}
	vals := make([]float32, group*d)
	rb := array.NewRecordBuilder(memory.DefaultAllocator, sc)
	defer rb.Release()
	for lo := 0; lo < n; lo += group {
		m := min(group, n-lo)
		wideRows(lo, m, d, vals)
		for j := range d {
			fb := rb.Field(j).(*array.Float32Builder)
			fb.Reserve(m)
			for i := range m {
				fb.UnsafeAppend(vals[i*d+j])
			}
		}
		rec := rb.NewRecord()
		err := w.Write(rec)
		rec.Release()
		if err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
}

// BenchmarkReduceWide reduces the table at NIGHTJAR_WIDE_FILE to 50
// components on 2 threads, streamed (ReadReduced).
func BenchmarkReduceWide(b *testing.B) {
	path := os.Getenv("NIGHTJAR_WIDE_FILE")
	if path == "" {
		b.Skip("set NIGHTJAR_WIDE_FILE (see TestWriteWideTable)")
	}
	for b.Loop() {
		t0 := time.Now()
		got, p, err := ReadReduced(path, Options{Threads: 2}, 50)
		if err != nil {
			b.Fatal(err)
		}
		var kept float64
		for _, v := range p.Variance {
			kept += v
		}
		b.ReportMetric(float64(p.Passes), "passes")
		b.ReportMetric(kept/p.TotalVariance, "explained")
		b.ReportMetric(time.Since(t0).Seconds(), "s")
		b.Logf("%d×%d → %d×%d: %d passes, explained %.4f, angle bound %.2g, %.1fs", got.N, p.D, got.N, got.D, p.Passes, kept/p.TotalVariance, p.AngleBound, time.Since(t0).Seconds())
	}
}
