package ingest_test

import (
	"bytes"
	"fmt"
	"os"
	"path/filepath"

	"nightjar/ingest"

	"nightjar/internal/core"
)

// Invented demo data: a tiny CSV table of three flowers.
func ExampleRead() {
	dir, _ := os.MkdirTemp("", "example")
	defer os.RemoveAll(dir)
	path := filepath.Join(dir, "flowers.csv")
	os.WriteFile(path, []byte("id,kind,petal_len,petal_wid,note\n"+
		"1,tulip,4.5,1.5,tall\n2,daisy,1.2,0.3,\n3,tulip,4.1,NaN,bent\n"), 0o644)

	t, err := ingest.Read(path, ingest.Options{Features: []string{"petal_*"}, ID: "id", Label: "kind", SkipInvalid: true})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(t.Format, t.N, "rows", t.Features, "skipped", t.Skipped)
	for i := 0; i < t.N; i++ {
		fmt.Println(t.ID.String(i), t.Label.String(i), t.Row(i))
	}

	// Without SkipInvalid the NaN is an error naming file, column and row.
	_, err = ingest.Read(path, ingest.Options{Features: []string{"petal_*"}})
	fmt.Println(err.(*ingest.InputError).Column, err.(*ingest.InputError).Row)
	// Output:
	// csv 2 rows [petal_len petal_wid] skipped 1
	// 1 tulip [4.5 1.5]
	// 2 daisy [1.2 0.3]
	// petal_wid 3
}

// Invented demo data: a 2-D map of three points written as Parquet and read back.
func ExampleWriteEmbedding() {
	id := &ingest.Column{Name: "id", Ints: []int64{10, 11, 12}}
	label := &ingest.Column{Name: "kind", Strings: []string{"tulip", "daisy", "tulip"}}
	y := []float64{0.5, -1, 2, 0.25, -3, 4} // N×2, row-major
	var buf bytes.Buffer
	if err := ingest.WriteEmbedding(&buf, id, label, y, 2); err != nil {
		fmt.Println(err)
		return
	}

	dir, _ := os.MkdirTemp("", "example")
	defer os.RemoveAll(dir)
	path := filepath.Join(dir, "map.parquet")
	os.WriteFile(path, buf.Bytes(), 0o644)
	t, _ := ingest.Read(path, ingest.Options{ID: "id", Label: "kind"})
	fmt.Println(t.Format, t.Features)
	for i := 0; i < t.N; i++ {
		fmt.Println(t.ID.Ints[i], t.Label.Strings[i], t.Row(i))
	}
	// Output:
	// parquet [map_1 map_2]
	// 10 tulip [0.5 -1]
	// 11 daisy [2 0.25]
	// 12 tulip [-3 4]
}

// FitPCA and Project on a tiny invented matrix: the points lie on the line y = 2x.
func ExampleFitPCA() {
	m := core.Matrix{N: 4, D: 2, Data: []float32{0, 0, 1, 2, 2, 4, 3, 6}}
	p, _ := ingest.FitPCA(m, 1, 1)
	fmt.Printf("variance %.4f, direction [%.4f %.4f]\n", p.Variance[0], p.Components[0], p.Components[1])
	fmt.Printf("scores %.4f\n", p.Project(m, 1))
	// Output:
	// variance 8.3333, direction [0.4472 0.8944]
	// scores [-3.3541 -1.1180 1.1180 3.3541]
}
