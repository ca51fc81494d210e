package bench

import (
	"bytes"
	"math"
	"os"
	"path/filepath"
	"testing"

	"nightjar/ingest"
)

// TestDocuments: the documents scenario writes an Arrow IPC file that reads
// back (through ingest, as a user's file would) as rows×768 features from one
// fixed_size_list column, ids 0…rows−1, topic labels; the bytes depend on the
// seed, not on the thread count; most rows' nearest neighbour by cosine
// shares their topic (the scenario clusters by topic).
func TestDocuments(t *testing.T) {
	const rows = 700
	var one, two bytes.Buffer
	if err := WriteDocuments(&one, rows, 5, 1); err != nil {
		t.Fatal(err)
	}
	if err := WriteDocuments(&two, rows, 5, 3); err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(one.Bytes(), two.Bytes()) {
		t.Fatal("the file depends on the thread count")
	}
	path := filepath.Join(t.TempDir(), "docs.arrow")
	if err := os.WriteFile(path, one.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	tab, err := ingest.Read(path, ingest.Options{ID: "doc_id", Label: "topic"})
	if err != nil {
		t.Fatal(err)
	}
	if tab.N != rows || tab.D != DocumentWidth || len(tab.Columns) != 1 || !tab.Columns[0].Vector || tab.ID.Ints[rows-1] != rows-1 {
		t.Fatalf("%d×%d, columns %+v", tab.N, tab.D, tab.Columns)
	}
	same := 0
	for i := range rows {
		best, bestCos := -1, -2.0
		for j := range rows {
			if j == i {
				continue
			}
			if c := cosine(tab.Row(i), tab.Row(j)); c > bestCos {
				best, bestCos = j, c
			}
		}
		if tab.Label.Strings[best] == tab.Label.Strings[i] {
			same++
		}
	}
	if same < rows*3/4 {
		t.Errorf("only %d of %d rows have a nearest neighbour of their topic", same, rows)
	}
}

func cosine(a, b []float32) float64 {
	var ab, aa, bb float64
	for j := range a {
		ab += float64(a[j]) * float64(b[j])
		aa += float64(a[j]) * float64(a[j])
		bb += float64(b[j]) * float64(b[j])
	}
	return ab / math.Sqrt(aa*bb)
}
