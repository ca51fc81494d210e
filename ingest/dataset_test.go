package ingest

import (
	"bytes"
	"fmt"
	"os"
	"path/filepath"
	"slices"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"

	"nightjar/internal/core"
)

// putFile writes b at dir/rel, creating directories.
func putFile(t *testing.T, dir, rel string, b []byte) string {
	t.Helper()
	p := filepath.Join(dir, filepath.FromSlash(rel))
	if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(p, b, 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// partTable is rows lo…lo+n−1 of the plumbing table used by the dataset tests:
// an int64 id and three float32 features a, b, c.
func partTable(lo, n int) *Table {
	t := &Table{Matrix: core.Matrix{N: n, D: 3, Data: vectorValues(n, 3, uint64(lo+1))}, Features: []string{"a", "b", "c"},
		ID: &Column{Name: "id", Ints: make([]int64, n)}}
	for i := range n {
		t.ID.Ints[i] = int64(lo + i)
	}
	return t
}

func tableBytes(t *testing.T, tab *Table) []byte {
	t.Helper()
	var buf bytes.Buffer
	if err := WriteTable(&buf, tab); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

// TestOpenDataset: directories are walked recursively in byte order of paths,
// hidden and underscore files are passed over, other non-table files are listed
// as ignored, a file without extension counts by its magic bytes, key=value
// folders become keys (URL-unescaped, the Hive null name a null), globs match
// path elements with "**" for any depth, and a file named twice is refused.
func TestOpenDataset(t *testing.T) {
	dir := t.TempDir()
	pq := tableBytes(t, partTable(0, 3))
	putFile(t, dir, "sample=B/part-0.parquet", pq)
	putFile(t, dir, "sample=A/part-1.csv", []byte("id,a,b,c\n9,1,2,3\n"))
	putFile(t, dir, "sample=A/part-0.parquet", pq)
	putFile(t, dir, "sample=A/deeper/x.parquet", pq)
	putFile(t, dir, "sample=C%20D/part.parquet", pq)
	putFile(t, dir, "sample=__HIVE_DEFAULT_PARTITION__/p.parquet", pq)
	putFile(t, dir, "_SUCCESS", nil)
	putFile(t, dir, ".hidden.parquet", pq)
	putFile(t, dir, "_tmp/part.parquet", pq)
	putFile(t, dir, "README.md", []byte("notes"))
	putFile(t, dir, "noext", pq)
	ds, err := OpenDataset(dir)
	if err != nil {
		t.Fatal(err)
	}
	rel := func(ds *Dataset) []string {
		var out []string
		for _, p := range ds.Parts {
			r, _ := filepath.Rel(dir, p.Path)
			out = append(out, filepath.ToSlash(r))
		}
		return out
	}
	want := []string{"noext", "sample=A/deeper/x.parquet", "sample=A/part-0.parquet", "sample=A/part-1.csv", "sample=B/part-0.parquet",
		"sample=C%20D/part.parquet", "sample=__HIVE_DEFAULT_PARTITION__/p.parquet"}
	if got := rel(ds); !slices.Equal(got, want) {
		t.Fatalf("parts %q\nwant  %q", got, want)
	}
	if !slices.Equal(ds.Keys, []string{"sample"}) || len(ds.Ignored) != 1 || filepath.Base(ds.Ignored[0]) != "README.md" {
		t.Errorf("keys %v, ignored %v", ds.Keys, ds.Ignored)
	}
	keys := func(p Part) string {
		if p.Null[0] {
			return "<null>"
		}
		return p.Keys[0]
	}
	var got []string
	for _, p := range ds.Parts {
		got = append(got, keys(p))
	}
	if !slices.Equal(got, []string{"<null>", "A", "A", "A", "B", "C D", "<null>"}) {
		t.Errorf("key values %q", got)
	}
	globs := []struct {
		pattern string
		want    []string
	}{
		{"sample=*/*.parquet", []string{"sample=A/part-0.parquet", "sample=B/part-0.parquet", "sample=C%20D/part.parquet", "sample=__HIVE_DEFAULT_PARTITION__/p.parquet"}},
		{"**/*.csv", []string{"sample=A/part-1.csv"}},
		{"sample=[AB]", []string{"sample=A/deeper/x.parquet", "sample=A/part-0.parquet", "sample=A/part-1.csv", "sample=B/part-0.parquet"}},
		{"**/x.parquet", []string{"sample=A/deeper/x.parquet"}},
	}
	for _, g := range globs {
		ds, err := OpenDataset(filepath.Join(dir, g.pattern))
		if err != nil {
			t.Fatalf("%s: %v", g.pattern, err)
		}
		if got := rel(ds); !slices.Equal(got, g.want) {
			t.Errorf("%s: %q, want %q", g.pattern, got, g.want)
		}
	}
	// Repeated inputs keep their order; within each, byte order.
	ds, err = OpenDataset(filepath.Join(dir, "sample=B"), filepath.Join(dir, "sample=A", "*.parquet"))
	if err != nil {
		t.Fatal(err)
	}
	if got := rel(ds); !slices.Equal(got, []string{"sample=B/part-0.parquet", "sample=A/part-0.parquet"}) {
		t.Errorf("two inputs: %q", got)
	}
	bad := []struct {
		inputs []string
		file   string
		reason string
	}{
		{[]string{filepath.Join(dir, "absent.parquet")}, filepath.Join(dir, "absent.parquet"), "cannot open: no such file or directory"},
		{[]string{filepath.Join(dir, "*.tsv")}, filepath.Join(dir, "*.tsv"), "pattern matches no Parquet, Arrow or CSV file"},
		{[]string{dir, filepath.Join(dir, "noext")}, filepath.Join(dir, "noext"), "named twice"},
		{[]string{filepath.Join(dir, "[x")}, filepath.Join(dir, "[x"), "bad pattern"},
	}
	for _, b := range bad {
		_, err := OpenDataset(b.inputs...)
		wantInputError(t, err, b.file, "", 0, b.reason)
	}
}

// TestHiveParts: a hive-partitioned directory of 4 Parquet parts (Arrow's Go
// writer) reads as the same matrix, fingerprint and ids as one table holding
// the same rows in the parts' order; the folder key is a text label (never a
// default feature), progress counts every part against their total.
func TestHiveParts(t *testing.T) {
	dir := t.TempDir()
	sizes := []int{300, 1, 250, 449}
	var all []*Table
	lo := 0
	for k, n := range sizes {
		part := partTable(lo, n)
		all = append(all, part)
		putFile(t, dir, fmt.Sprintf("batch=b%d/part-%d.parquet", k+1, k), tableBytes(t, part))
		lo += n
	}
	whole := concatTables(all)
	want, err := Read(writeTableFile(t, whole), Options{ID: "id"})
	if err != nil {
		t.Fatal(err)
	}
	var last [2]int64
	got, err := Read(dir, Options{ID: "id", Label: "batch", BatchRows: 128, Progress: func(d, n int64) { last = [2]int64{d, n} }})
	if err != nil {
		t.Fatal(err)
	}
	if !equalBits(got.Data, want.Data) || got.Hash != want.Hash || !slices.Equal(got.ID.Ints, want.ID.Ints) {
		t.Fatal("the parts do not read as the one table")
	}
	if !slices.Equal(got.Features, []string{"a", "b", "c"}) || got.Parts != 4 || got.Format != "parquet" {
		t.Errorf("features %v, parts %d, format %q", got.Features, got.Parts, got.Format)
	}
	if got.Label.Strings == nil || got.Label.Strings[0] != "b1" || got.Label.Strings[300] != "b2" || got.Label.Strings[lo-1] != "b4" {
		t.Errorf("labels %v", got.Label)
	}
	if last != [2]int64{int64(lo), int64(lo)} {
		t.Errorf("last progress %v, want %d of %d", last, lo, lo)
	}
	// The folder key as id.
	byKey, err := Read(dir, Options{ID: "batch"})
	if err != nil || byKey.ID.Strings[301] != "b3" {
		t.Fatalf("key as id: %v %v", err, byKey)
	}
}

// concatTables stacks tables of the same columns.
func concatTables(ts []*Table) *Table {
	out := &Table{Features: ts[0].Features, ID: &Column{Name: "id", Ints: []int64{}}}
	out.D = ts[0].D
	for _, t := range ts {
		out.Data = append(out.Data, t.Data...)
		out.N += t.N
		out.ID.Ints = append(out.ID.Ints, t.ID.Ints...)
	}
	return out
}

// TestPartsDiffer: every part must have the first part's feature columns;
// an extra numeric column matters only when features are chosen by default
// or pattern; a vector width must agree; formats may mix.
func TestPartsDiffer(t *testing.T) {
	dir := t.TempDir()
	first := putFile(t, dir, "p0.parquet", tableBytes(t, partTable(0, 5)))
	missing := putFile(t, dir, "p1.csv", []byte("id,a,c\n5,1,2\n"))
	_, err := Read(filepath.Join(dir, "*"), Options{ID: "id"})
	wantInputError(t, err, missing, "b", 0, "the first part ("+first+") has it as a feature")

	dir = t.TempDir()
	putFile(t, dir, "p0.parquet", tableBytes(t, partTable(0, 5)))
	extra := putFile(t, dir, "p1.csv", []byte("id,c,b,a,z\n5,1,2,3,4\n"))
	_, err = Read(dir, Options{ID: "id"})
	wantInputError(t, err, extra, "z", 0, "feature column not in the first part")
	got, err := Read(dir, Options{ID: "id", Features: []string{"a", "b", "c"}})
	if err != nil {
		t.Fatal(err)
	}
	if got.N != 6 || got.Format != "parquet, csv" || !slices.Equal(got.Row(5), []float32{3, 2, 1}) {
		t.Errorf("N %d, format %q, last row %v (columns by name)", got.N, got.Format, got.Row(5))
	}

	// Vector widths.
	v1 := vectorRecord(t, arrow.FixedSizeListOf(4, arrow.PrimitiveTypes.Float32), vectorValues(3, 4, 1), 3, 4, nil)
	v2 := vectorRecord(t, arrow.FixedSizeListOf(5, arrow.PrimitiveTypes.Float32), vectorValues(3, 5, 1), 3, 5, nil)
	dir = t.TempDir()
	a := writeArrowFile(t, "a.arrow", v1)
	b := writeArrowFile(t, "b.arrow", v2)
	_, err = readInputs(t, a, b)
	wantInputError(t, err, b, "emb", 0, "vector column holds 5 values per row here, 4 in the first part")
	l2 := vectorRecord(t, arrow.ListOf(arrow.PrimitiveTypes.Float32), vectorValues(3, 5, 1), 3, 5, nil)
	c := writeParquetFile(t, "c.parquet", l2)
	_, err = readInputs(t, a, c)
	wantInputError(t, err, c, "emb", 1, "vector of 5 values; every row must hold 4")
}

// readInputs opens the inputs and reads them without a reduction.
func readInputs(t *testing.T, inputs ...string) (*Table, error) {
	t.Helper()
	ds, err := OpenDataset(inputs...)
	if err != nil {
		t.Fatal(err)
	}
	got, _, err := ds.Read(Options{}, Reduction{})
	return got, err
}

// TestReadRows: the rows read by position are those of the full read (after
// skipped rows), with the same fingerprint.
func TestReadRows(t *testing.T) {
	dir := t.TempDir()
	putFile(t, dir, "a.csv", []byte("x,y\n1,2\nNaN,3\n4,5\n"))
	putFile(t, dir, "b.csv", []byte("x,y\n6,7\n8,9\n"))
	ds, err := OpenDataset(dir)
	if err != nil {
		t.Fatal(err)
	}
	full, _, err := ds.Read(Options{SkipInvalid: true}, Reduction{})
	if err != nil {
		t.Fatal(err)
	}
	got, hash, err := ds.ReadRows(Options{SkipInvalid: true, BatchRows: 1}, []int32{0, 2, 3})
	if err != nil {
		t.Fatal(err)
	}
	if hash != full.Hash || got.N != 3 || !equalBits(got.Data, []float32{1, 2, 6, 7, 8, 9}) {
		t.Fatalf("%v %v", got, hash == full.Hash)
	}
	if _, _, err := ds.ReadRows(Options{SkipInvalid: true}, []int32{4}); err == nil {
		t.Error("a row beyond the table accepted")
	}
}
