package nightjar

import (
	"context"
	"errors"
	"path/filepath"
	"reflect"
	"slices"
	"testing"

	"nightjar/checkpoint"
	"nightjar/ingest"
)

// TestFeaturesReadBack: a run drops its features from memory once the
// neighbour graph is known and reads them back from features.njs for the
// start and the scores. The scores in its report are those computed from
// the features in memory (scoreMap on the same map), and reading back
// gives the table's values; a file that does not match the table read is
// refused.
func TestFeaturesReadBack(t *testing.T) {
	x, lab := blobs(500, 6, 21)
	s := DefaultSettings()
	s.Perplexity, s.Iterations, s.EarlyIterations = 15, 150, 40
	rt := DefaultRuntime()
	rt.ScoreSample = 300
	dir := filepath.Join(t.TempDir(), "run")
	res, err := Embed(context.Background(), FromMatrix(x, nil, lab), dir, s, rt, nil)
	if err != nil {
		t.Fatal(err)
	}
	want := scoreMap(x, res.Map, s.Dims, lab.Strings, scoreK, rt.ScoreSample, s.Seed, rt.Threads, tableSpace(s.Metric, nil))
	got := *res.Report.Quality
	got.KL, got.KLMethod, got.Seconds, want.Seconds = 0, "", 0, 0
	if !reflect.DeepEqual(got, want) {
		t.Errorf("report's scores %+v, want those of the features in memory %+v", got, want)
	}

	run, err := checkpoint.Open(dir)
	if err != nil {
		t.Fatal(err)
	}
	f, err := loadFeatures(run)
	if err != nil {
		t.Fatal(err)
	}
	j := &job{run: run, table: &ingest.Table{Matrix: Matrix{N: x.N, D: x.D}, Hash: f.Hash}}
	back, err := j.features()
	if err != nil || !slices.Equal(back.Data, x.Data) {
		t.Fatalf("features read back: equal %v, error %v", err == nil && slices.Equal(back.Data, x.Data), err)
	}
	j.table.Hash = "another input"
	var ce *checkpoint.CorruptError
	if _, err := j.features(); !errors.As(err, &ce) {
		t.Errorf("features of another input read back: %v, want a CorruptError", err)
	}
}
