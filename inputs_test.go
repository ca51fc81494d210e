package nightjar

import (
	"bytes"
	"compress/gzip"
	"context"
	"encoding/csv"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/ipc"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"

	"nightjar/checkpoint"
	"nightjar/ingest"
)

// quickSettings are settings for tests about bits: few iterations.
func quickSettings() Settings {
	s := DefaultSettings()
	s.Perplexity, s.Iterations, s.EarlyIterations = 15, 30, 10
	return s
}

func quickRuntime() Runtime {
	rt := DefaultRuntime()
	rt.Threads, rt.ScoreSample = 2, 0
	return rt
}

// embedFiles maps the inputs into a new run directory.
func embedFiles(t *testing.T, s Settings, rt Runtime, paths ...string) *Result {
	t.Helper()
	res, err := Embed(context.Background(), FromFiles(paths...), filepath.Join(t.TempDir(), "run"), s, rt, nil)
	if err != nil {
		t.Fatal(err)
	}
	return res
}

// sameBits reports whether two maps are equal bit for bit.
func sameBits(a, b []float64) bool {
	return slices.EqualFunc(a, b, func(x, y float64) bool { return math.Float64bits(x) == math.Float64bits(y) })
}

// record builds an Arrow record of the given columns (equal lengths).
func record(fields []arrow.Field, fill func(rb *array.RecordBuilder)) arrow.Record {
	rb := array.NewRecordBuilder(memory.DefaultAllocator, arrow.NewSchema(fields, nil))
	defer rb.Release()
	fill(rb)
	return rb.NewRecord()
}

// writeArrow writes rec with Arrow's own Go IPC file writer.
func writeArrow(t *testing.T, path string, rec arrow.Record) {
	t.Helper()
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	w, err := ipc.NewFileWriter(f, ipc.WithSchema(rec.Schema()))
	if err != nil {
		t.Fatal(err)
	}
	if err := w.Write(rec); err != nil {
		t.Fatal(err)
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
}

// writeParquet writes rec with Arrow's Go Parquet writer (pqarrow).
func writeParquet(t *testing.T, path string, rec arrow.Record) {
	t.Helper()
	var buf bytes.Buffer
	w, err := pqarrow.NewFileWriter(rec.Schema(), &buf, nil, pqarrow.DefaultWriterProps())
	if err != nil {
		t.Fatal(err)
	}
	if err := w.Write(rec); err != nil {
		t.Fatal(err)
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, buf.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
}

// TestVectorColumnBits: a fixed_size_list<float32>[64] column of 5,000 rows
// (Arrow IPC file, Arrow's Go writer) gives the same map bits as the same
// values in 64 scalar float32 columns (Parquet, Arrow's Go writer); the report
// names the vector column with its width.
func TestVectorColumnBits(t *testing.T) {
	n, w := 5000, 64
	x, _ := blobs(n, w, 11)
	dir := t.TempDir()
	vec := record([]arrow.Field{
		{Name: "id", Type: arrow.PrimitiveTypes.Int64},
		{Name: "embedding", Type: arrow.FixedSizeListOf(int32(w), arrow.PrimitiveTypes.Float32)},
	}, func(rb *array.RecordBuilder) {
		lb := rb.Field(1).(*array.FixedSizeListBuilder)
		for i := range n {
			rb.Field(0).(*array.Int64Builder).Append(int64(i))
			lb.Append(true)
			lb.ValueBuilder().(*array.Float32Builder).AppendValues(x.Row(i), nil)
		}
	})
	defer vec.Release()
	fields := []arrow.Field{{Name: "id", Type: arrow.PrimitiveTypes.Int64}}
	for j := range w {
		fields = append(fields, arrow.Field{Name: fmt.Sprintf("f%d", j), Type: arrow.PrimitiveTypes.Float32})
	}
	scalar := record(fields, func(rb *array.RecordBuilder) {
		for i := range n {
			rb.Field(0).(*array.Int64Builder).Append(int64(i))
			for j := range w {
				rb.Field(1 + j).(*array.Float32Builder).Append(x.Data[i*w+j])
			}
		}
	})
	defer scalar.Release()
	vecPath, scalarPath := filepath.Join(dir, "vectors.arrow"), filepath.Join(dir, "scalars.parquet")
	writeArrow(t, vecPath, vec)
	writeParquet(t, scalarPath, scalar)
	s := quickSettings()
	s.ID = "id"
	a := embedFiles(t, s, quickRuntime(), vecPath)
	b := embedFiles(t, s, quickRuntime(), scalarPath)
	if !sameBits(a.Map, b.Map) {
		t.Fatal("the vector column's map differs from the scalar columns'")
	}
	fc := a.Report.FeatureColumns
	if len(fc) != 1 || fc[0].Name != "embedding" || fc[0].Width != w || a.Report.Features != w || a.Report.Reduced != nil {
		t.Errorf("feature columns %+v, features %d, reduced %v", fc, a.Report.Features, a.Report.Reduced)
	}
}

// TestPartitionedBits: a hive-partitioned directory of 4 Parquet parts gives
// the same map bits as the one table holding the same rows in the parts'
// order (byte order of their paths); the folder key labels the rows, and the
// input fingerprint covers every part: a changed part stops a resume.
func TestPartitionedBits(t *testing.T) {
	x, _ := blobs(1200, 5, 12)
	sizes := []int{200, 350, 50, 600}
	dir := t.TempDir()
	parts := filepath.Join(dir, "cells")
	fields := []arrow.Field{{Name: "cell", Type: arrow.BinaryTypes.String}}
	for j := range x.D {
		fields = append(fields, arrow.Field{Name: fmt.Sprintf("g%d", j), Type: arrow.PrimitiveTypes.Float64})
	}
	rows := func(lo, hi int) arrow.Record {
		return record(fields, func(rb *array.RecordBuilder) {
			for i := lo; i < hi; i++ {
				rb.Field(0).(*array.StringBuilder).Append(fmt.Sprintf("bc-%04d", i))
				for j := range x.D {
					rb.Field(1 + j).(*array.Float64Builder).Append(float64(x.Data[i*x.D+j]))
				}
			}
		})
	}
	lo := 0
	for k, n := range sizes {
		rec := rows(lo, lo+n)
		writeParquet(t, filepath.Join(parts, fmt.Sprintf("sample=s%d", k+1), "part-0.parquet"), rec)
		rec.Release()
		lo += n
	}
	whole := rows(0, lo)
	defer whole.Release()
	wholePath := filepath.Join(dir, "all.parquet")
	writeParquet(t, wholePath, whole)
	s := quickSettings()
	s.ID = "cell"
	b := embedFiles(t, s, quickRuntime(), wholePath)
	s.Label = "sample"
	rt := quickRuntime()
	a, err := Embed(context.Background(), FromFile(parts), filepath.Join(dir, "run"), s, rt, nil)
	if err != nil {
		t.Fatal(err)
	}
	if !sameBits(a.Map, b.Map) {
		t.Fatal("the parts' map differs from the one table's")
	}
	if len(a.Report.Parts) != 4 || a.Report.Features != x.D {
		t.Errorf("parts %v, features %d", a.Report.Parts, a.Report.Features)
	}
	emb, err := ingest.Read(a.Embedding, ingest.Options{Features: []string{"map_1"}, ID: "cell", Label: "sample"})
	if err != nil {
		t.Fatal(err)
	}
	if emb.ID.Strings[250] != "bc-0250" || emb.Label.Strings[250] != "s2" {
		t.Errorf("row 250: id %q label %q", emb.ID.Strings[250], emb.Label.Strings[250])
	}
	// A part that changes is noticed by a resume of the unfinished run.
	s.Iterations = 60
	rt.CheckpointEvery = 20
	ctx, cancel := context.WithCancel(context.Background())
	stop := &cancelAt{at: 25, cancel: cancel}
	runDir := filepath.Join(dir, "stopped")
	if _, err := Embed(ctx, FromFile(parts), runDir, s, rt, stop); err == nil {
		t.Fatal("the run was not stopped")
	}
	changed := rows(600, 650)
	writeParquet(t, filepath.Join(parts, "sample=s3", "part-0.parquet"), changed)
	changed.Release()
	_, err = Resume(context.Background(), runDir, rt, nil)
	if err == nil || !strings.Contains(err.Error(), "changed since the run began") {
		t.Fatalf("resume after a part changed: %v", err)
	}
}

// TestCompressedCSVBits: a .csv.gz gives the bits of the .csv; several inputs
// (FromFiles) read one after the other give the bits of their concatenation.
func TestCompressedCSVBits(t *testing.T) {
	x, lab := blobs(600, 4, 13)
	var b strings.Builder
	b.WriteString("id,group,a,b,c,d\n")
	for i := range x.N {
		fmt.Fprintf(&b, "%d,%s", i, lab.Strings[i])
		for _, v := range x.Row(i) {
			b.WriteString("," + strconv.FormatFloat(float64(v), 'g', -1, 32))
		}
		b.WriteByte('\n')
	}
	dir := t.TempDir()
	plain := filepath.Join(dir, "t.csv")
	os.WriteFile(plain, []byte(b.String()), 0o644)
	var gz bytes.Buffer
	zw := gzip.NewWriter(&gz)
	zw.Write([]byte(b.String()))
	zw.Close()
	packed := filepath.Join(dir, "t.csv.gz")
	os.WriteFile(packed, gz.Bytes(), 0o644)
	s := quickSettings()
	s.ID, s.Label = "id", "group"
	a := embedFiles(t, s, quickRuntime(), plain)
	c := embedFiles(t, s, quickRuntime(), packed)
	if !sameBits(a.Map, c.Map) || c.Report.Format != "csv+gzip" {
		t.Fatalf("the .csv.gz map differs (format %q)", c.Report.Format)
	}
	lines := strings.SplitAfter(b.String(), "\n")
	first, second := filepath.Join(dir, "p1.csv"), filepath.Join(dir, "p2.csv")
	os.WriteFile(first, []byte(strings.Join(lines[:301], "")), 0o644)
	os.WriteFile(second, []byte(lines[0]+strings.Join(lines[301:], "")), 0o644)
	two := embedFiles(t, s, quickRuntime(), first, second)
	if !sameBits(a.Map, two.Map) {
		t.Fatal("two inputs read one after the other differ from the whole")
	}
	m, err := os.ReadFile(filepath.Join(filepath.Dir(two.Embedding), "manifest.json"))
	if err != nil {
		t.Fatal(err)
	}
	var man struct {
		Params Settings `json:"params"`
	}
	if err := json.Unmarshal(m, &man); err != nil || len(man.Params.Inputs) != 2 || man.Params.Input != first {
		t.Errorf("manifest inputs %q, input %q (%v)", man.Params.Inputs, man.Params.Input, err)
	}
}

// TestLegacyReduce: settings written before automatic reduction, which left
// "reduce" out when it was 0, read back as no reduction; new settings keep
// every value, the automatic one included.
func TestLegacyReduce(t *testing.T) {
	s := DefaultSettings()
	if err := json.Unmarshal([]byte(`{"input":"x.csv","perplexity":20}`), &s); err != nil {
		t.Fatal(err)
	}
	if s.Reduce != 0 || s.Perplexity != 20 || s.Iterations != DefaultSettings().Iterations {
		t.Errorf("legacy settings: reduce %d, perplexity %g, iterations %d", s.Reduce, s.Perplexity, s.Iterations)
	}
	for _, r := range []int{ReduceAuto, 0, 30} {
		in := DefaultSettings()
		in.Reduce = r
		b, _ := json.Marshal(in)
		out := DefaultSettings()
		if err := json.Unmarshal(b, &out); err != nil || out.Reduce != r {
			t.Errorf("reduce %d came back as %d (%v)", r, out.Reduce, err)
		}
	}
}

// TestUnknownSettingsRefused: settings naming a setting this version does
// not have are refused, by name, and a run directory whose manifest holds
// them is refused naming the version that made it; every field of Settings
// reads back.
func TestUnknownSettingsRefused(t *testing.T) {
	s := DefaultSettings()
	err := json.Unmarshal([]byte(`{"input":"x.csv","spin_rate":3,"perplexity":20}`), &s)
	var unknown *UnknownSettingsError
	if !errors.As(err, &unknown) || len(unknown.Keys) != 1 || unknown.Keys[0] != "spin_rate" {
		t.Fatalf("unknown key: %v, want an UnknownSettingsError naming spin_rate", err)
	}
	b, _ := json.Marshal(DefaultSettings())
	if err := json.Unmarshal(b, &s); err != nil {
		t.Errorf("every setting: %v", err)
	}
	dir, _ := smallRun(t, 150, true, false)
	run, err := checkpoint.Open(dir)
	if err != nil {
		t.Fatal(err)
	}
	m := run.Manifest()
	var params map[string]any
	if err := json.Unmarshal(m.Params, &params); err != nil {
		t.Fatal(err)
	}
	params["spin_rate"] = 3
	m.Params, _ = json.Marshal(params)
	m.Version = "0.0.9"
	if err := run.SaveManifest(m); err != nil {
		t.Fatal(err)
	}
	_, err = Redraw(context.Background(), dir, RedrawOptions{}, nil)
	if !IsUserFault(err) || !strings.Contains(err.Error(), "spin_rate") || !strings.Contains(err.Error(), "0.0.9") {
		t.Errorf("re-drawing a run with an unknown setting: %v", err)
	}
}

// TestAutoReduce: a table of more than 100 features is reduced to 50
// components by default, the choice recorded; --reduce 0 keeps every feature;
// the scores of a reduced run say their space and give trustworthiness
// against the original features on the sample.
func TestAutoReduce(t *testing.T) {
	x, lab := blobs(400, 120, 14)
	s := quickSettings()
	rt := quickRuntime()
	rt.ScoreSample = 200
	res, err := Embed(context.Background(), FromMatrix(x, nil, lab), filepath.Join(t.TempDir(), "run"), s, rt, nil)
	if err != nil {
		t.Fatal(err)
	}
	r := res.Report
	if r.Reduced == nil || !r.Reduced.Automatic || r.Reduced.To != 50 || r.Reduced.From != 120 || r.Features != 50 || r.Reduced.Method != "exact covariance" {
		t.Fatalf("reduced %+v, features %d", r.Reduced, r.Features)
	}
	q := r.Quality
	if q.Space != "50 principal components, Euclidean distance" || q.Original == nil || q.Original.Rows != 200 ||
		q.Original.Space != "original features, Euclidean distance" || !(q.Original.Trustworthiness > 0.5) {
		t.Errorf("quality space %q, original %+v", q.Space, q.Original)
	}
	s.Reduce = 0
	res, err = Embed(context.Background(), FromMatrix(x, nil, lab), filepath.Join(t.TempDir(), "run"), s, rt, nil)
	if err != nil || res.Report.Reduced != nil || res.Report.Features != 120 || res.Report.Quality.Space != "input features, Euclidean distance" {
		t.Fatalf("--reduce 0: %v %+v", err, res.Report.Reduced)
	}
}

// TestSayWhatWasUsed: --skip-invalid writes the skipped rows (file, row, id,
// column, reason) into the run directory; duplicate ids and an integer
// column with few values taken as a feature are warned about and recorded;
// an integer label stays integers in embedding.parquet, a missing one null.
func TestSayWhatWasUsed(t *testing.T) {
	x, _ := blobs(300, 3, 15)
	var b strings.Builder
	b.WriteString("id,batch,grade,a,b,c\n")
	for i := range x.N {
		id := strconv.Itoa(i)
		if i == 40 || i == 41 {
			id = "7" // duplicates of row 7's id
		}
		grade := strconv.Itoa(i % 4)
		if i == 9 {
			grade = ""
		}
		fmt.Fprintf(&b, "%s,%d,%s", id, i%3, grade)
		for j, v := range x.Row(i) {
			if i == 12 && j == 1 {
				b.WriteString(",NaN")
				continue
			}
			b.WriteString("," + strconv.FormatFloat(float64(v), 'g', -1, 32))
		}
		b.WriteByte('\n')
	}
	path := filepath.Join(t.TempDir(), "t.csv")
	os.WriteFile(path, []byte(b.String()), 0o644)
	s := quickSettings()
	s.ID, s.Label, s.SkipInvalid = "id", "grade", true
	res := embedFiles(t, s, quickRuntime(), path)
	r := res.Report
	if r.Skipped != 1 || r.SkippedRowsFile != FileSkippedRows {
		t.Fatalf("skipped %d, file %q", r.Skipped, r.SkippedRowsFile)
	}
	f, err := os.Open(filepath.Join(res.Dir, FileSkippedRows))
	if err != nil {
		t.Fatal(err)
	}
	recs, err := csv.NewReader(f).ReadAll()
	f.Close()
	if err != nil || len(recs) != 2 || !slices.Equal(recs[1][1:], []string{"13", "12", "b", "value is NaN"}) {
		t.Errorf("skipped rows file %q (%v)", recs, err)
	}
	if r.DuplicateIDs == nil || r.DuplicateIDs.Values != 1 || r.DuplicateIDs.Rows != 3 || r.DuplicateIDs.First[0] != "7" {
		t.Errorf("duplicate ids %+v", r.DuplicateIDs)
	}
	warned := strings.Join(r.Warnings, "\n")
	if !strings.Contains(warned, `feature column "batch" holds integers with only 3 distinct value(s) (0, 1, 2)`) {
		t.Errorf("warnings %q", warned)
	}
	emb, err := ingest.Read(res.Embedding, ingest.Options{Features: []string{"map_1"}, Label: "grade"})
	if err != nil {
		t.Fatal(err)
	}
	if emb.Label.Ints == nil || emb.Label.Ints[3] != 3 || !emb.Label.IsNull(9) || emb.Label.IsNull(8) {
		t.Errorf("label column %+v", emb.Label)
	}
}
