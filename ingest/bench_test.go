package ingest

import (
	"bytes"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"nightjar/internal/core"
)

// benchTable is an invented n×d table (values are a cheap hash of the position).
func benchTable(n, d int) *Table {
	t := &Table{Matrix: core.Matrix{N: n, D: d, Data: make([]float32, n*d)}, Features: make([]string, d),
		ID: &Column{Name: "id", Ints: make([]int64, n)}, Label: &Column{Name: "label", Strings: make([]string, n)}}
	for j := range t.Features {
		t.Features[j] = fmt.Sprintf("f%02d", j)
	}
	for i := 0; i < n; i++ {
		t.ID.Ints[i] = int64(i)
		t.Label.Strings[i] = []string{"a", "b", "c", "d"}[i%4]
		for j := 0; j < d; j++ {
			t.Data[i*d+j] = float32((i*31+j*17)%1000) / 100
		}
	}
	return t
}

func benchFile(b *testing.B, n, d int, csv bool) string {
	b.Helper()
	t := benchTable(n, d)
	path := filepath.Join(b.TempDir(), "bench.parquet")
	var buf bytes.Buffer
	if csv {
		path = strings.TrimSuffix(path, ".parquet") + ".csv"
		buf.WriteString("id,label," + strings.Join(t.Features, ",") + "\n")
		for i := 0; i < n; i++ {
			fmt.Fprintf(&buf, "%d,%s", t.ID.Ints[i], t.Label.Strings[i])
			for _, v := range t.Row(i) {
				fmt.Fprintf(&buf, ",%g", v)
			}
			buf.WriteByte('\n')
		}
	} else if err := WriteTable(&buf, t); err != nil {
		b.Fatal(err)
	}
	if err := os.WriteFile(path, buf.Bytes(), 0o644); err != nil {
		b.Fatal(err)
	}
	return path
}

func benchRead(b *testing.B, n, d int, csv bool) {
	path := benchFile(b, n, d, csv)
	b.ResetTimer()
	for b.Loop() {
		if _, err := Read(path, Options{ID: "id", Label: "label"}); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(n)*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
}

func BenchmarkReadParquet200kx50(b *testing.B) { benchRead(b, 200_000, 50, false) }
func BenchmarkReadCSV50kx50(b *testing.B)      { benchRead(b, 50_000, 50, true) }

func BenchmarkWriteTable200kx50(b *testing.B) {
	t := benchTable(200_000, 50)
	for b.Loop() {
		var buf bytes.Buffer
		if err := WriteTable(&buf, t); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkWriteEmbedding1Mx2(b *testing.B) {
	n := 1_000_000
	y := make([]float64, 2*n)
	ids := &Column{Name: "id", Ints: make([]int64, n)}
	for i := range y {
		y[i] = float64(i%977) * 0.01
	}
	for b.Loop() {
		var buf bytes.Buffer
		if err := WriteEmbedding(&buf, ids, nil, y, 2); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkFitPCA200kx50(b *testing.B) {
	t := benchTable(200_000, 50)
	for b.Loop() {
		if _, err := FitPCA(t.Matrix, 2, 2); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkProject200kx50k2(b *testing.B) {
	t := benchTable(200_000, 50)
	p, _ := FitPCA(t.Matrix, 2, 2)
	for b.Loop() {
		p.Project(t.Matrix, 2)
	}
}
