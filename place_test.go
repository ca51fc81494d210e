package nightjar

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"sync"
	"sync/atomic"
	"testing"

	"nightjar/bench"
	"nightjar/checkpoint"
	"nightjar/ingest"
)

// writeTableFile writes t as Parquet to path.
func writePlaceTable(t testing.TB, path string, tab *ingest.Table) {
	t.Helper()
	if err := checkpoint.AtomicWrite(path, func(w io.Writer) error { return ingest.WriteTable(w, tab) }); err != nil {
		t.Fatal(err)
	}
}

// rowsOf returns rows [lo, hi) of t as a table of their own.
func tableRows(t *ingest.Table, lo, hi int) *ingest.Table {
	d := t.D
	out := &ingest.Table{Matrix: Matrix{N: hi - lo, D: d, Data: t.Data[lo*d : hi*d]}, Features: t.Features}
	if t.ID != nil {
		out.ID = sliceColumn(t.ID, lo, hi)
	}
	if t.Label != nil {
		out.Label = sliceColumn(t.Label, lo, hi)
	}
	return out
}

// demoFixture is a finished reference run of invented demo rows and a table
// of further rows of the same survey (plumbing tests only: invented data).
type demoFixture struct {
	ref, table string
	newRows    int
}

var (
	demoOnce sync.Once
	demoFix  demoFixture
	demoErr  error
)

// demoPlacement returns the shared fixture: 2,000 reference rows mapped with
// 300 iterations, 12,000 new rows (two chunks).
func demoPlacement(t *testing.T) demoFixture {
	t.Helper()
	demoOnce.Do(func() {
		dir, err := os.MkdirTemp("", "nightjar-place-")
		if err != nil {
			demoErr = err
			return
		}
		all := bench.Demo(14000, 11, 2)
		writePlaceTable(t, filepath.Join(dir, "ref.parquet"), tableRows(all, 0, 2000))
		writePlaceTable(t, filepath.Join(dir, "new.parquet"), tableRows(all, 2000, 14000))
		s := DefaultSettings()
		s.ID, s.Label, s.Iterations, s.EarlyIterations = "id", "population", 300, 100
		rt := DefaultRuntime()
		rt.Threads, rt.ScoreSample = 2, 0
		if _, err := Embed(context.Background(), FromFile(filepath.Join(dir, "ref.parquet")), filepath.Join(dir, "ref"), s, rt, nil); err != nil {
			demoErr = err
			return
		}
		demoFix = demoFixture{ref: filepath.Join(dir, "ref"), table: filepath.Join(dir, "new.parquet"), newRows: 12000}
	})
	if demoErr != nil {
		t.Fatal(demoErr)
	}
	return demoFix
}

func TestMain(m *testing.M) {
	code := m.Run()
	if demoFix.ref != "" {
		os.RemoveAll(filepath.Dir(demoFix.ref))
	}
	os.Exit(code)
}

func placeRuntime(threads int) Runtime {
	rt := DefaultRuntime()
	rt.Threads, rt.ScoreSample = threads, 500
	return rt
}

// TestPlaceShardsMergeSameBits: four shards on two threads, merged, write
// the same placed.parquet bytes as one placement on one thread.
func TestPlaceShardsMergeSameBits(t *testing.T) {
	fx := demoPlacement(t)
	dir := t.TempDir()
	s := DefaultPlaceSettings()
	whole, err := Place(context.Background(), fx.ref, FromFile(fx.table), filepath.Join(dir, "whole"), s, placeRuntime(1), nil)
	if err != nil {
		t.Fatal(err)
	}
	for i := range 4 {
		s.Shard, s.Shards = i, 4
		if _, err := Place(context.Background(), fx.ref, FromFile(fx.table), filepath.Join(dir, "sharded"), s, placeRuntime(2), nil); err != nil {
			t.Fatal(err)
		}
	}
	merged, err := MergePlacement(context.Background(), filepath.Join(dir, "sharded"), placeRuntime(2), nil)
	if err != nil {
		t.Fatal(err)
	}
	a, _ := os.ReadFile(whole.Placed)
	b, _ := os.ReadFile(merged.Placed)
	if len(a) == 0 || !bytes.Equal(a, b) {
		t.Fatalf("merged placed.parquet (%d bytes) differs from the whole placement's (%d bytes)", len(b), len(a))
	}
	ra, rb := whole.Report, merged.Report
	if ra.Rows != fx.newRows || rb.Rows != fx.newRows || ra.Scores == nil || rb.Scores == nil ||
		*ra.Scores.Agreement != *rb.Scores.Agreement || *ra.Scores.MapAccuracy != *rb.Scores.MapAccuracy {
		t.Errorf("reports differ: whole %+v %+v, merged %+v %+v", ra, ra.Scores, rb, rb.Scores)
	}
	t.Logf("agreement %.4f, map accuracy %.4f, share %.3f, cost %.3f → %.3f (lowered for %.3f)",
		*ra.Scores.Agreement, *ra.Scores.MapAccuracy, ra.Scores.VoteShareMean, ra.Optimiser.CostStart, ra.Optimiser.CostEnd, ra.Optimiser.Lowered)
	for _, f := range []string{FileMap, FileReport} {
		if _, err := os.Stat(filepath.Join(dir, "sharded", f)); err != nil {
			t.Error(err)
		}
	}
	// A second merge, and a part missing.
	if err := os.Remove(filepath.Join(dir, "sharded", dirParts, PartName(2, 4))); err != nil {
		t.Fatal(err)
	}
	_, err = MergePlacement(context.Background(), filepath.Join(dir, "sharded"), placeRuntime(2), nil)
	if !IsUserFault(err) || !strings.Contains(err.Error(), "shard(s) 2 of 4 are missing") {
		t.Errorf("merge without part 2: %v", err)
	}
}

// stopPlacing cancels when the placement's progress passes a row.
type stopPlacing struct {
	quietObserver
	at     int64
	cancel context.CancelFunc
	phase  atomic.Value
}

func (c *stopPlacing) Phase(name string, _ int64) { c.phase.Store(name) }
func (c *stopPlacing) Progress(done, _ int64) {
	if p, _ := c.phase.Load().(string); p == "placing rows" && done >= c.at {
		c.cancel()
	}
}

// TestPlaceStopResumeSameBits: a placement stopped in its second chunk
// continues from the saved chunks and ends with the bits of one never
// stopped; the directory then refuses other settings.
func TestPlaceStopResumeSameBits(t *testing.T) {
	fx := demoPlacement(t)
	dir := t.TempDir()
	s := DefaultPlaceSettings()
	whole, err := Place(context.Background(), fx.ref, FromFile(fx.table), filepath.Join(dir, "whole"), s, placeRuntime(2), nil)
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	cut := filepath.Join(dir, "cut")
	_, err = Place(ctx, fx.ref, FromFile(fx.table), cut, s, placeRuntime(2), &stopPlacing{at: placeChunk + 100, cancel: cancel})
	var stop *StoppedError
	if !errors.As(err, &stop) || stop.Iteration != placeChunk {
		t.Fatalf("stopped placement: %v, want a StoppedError after the first chunk", err)
	}
	if !IsPlacement(cut) {
		t.Fatal("the stopped placement's directory is not recognised")
	}
	res, err := ResumePlace(context.Background(), cut, placeRuntime(1), nil)
	if err != nil {
		t.Fatal(err)
	}
	a, _ := os.ReadFile(whole.Placed)
	b, _ := os.ReadFile(res.Placed)
	if !bytes.Equal(a, b) {
		t.Fatal("the resumed placement differs from the uninterrupted one")
	}
	if !res.Report.Resumed {
		t.Error("the report does not say the placement was resumed")
	}
	again, err := Place(context.Background(), fx.ref, FromFile(fx.table), cut, s, placeRuntime(2), nil)
	if err != nil || !again.AlreadyFinished {
		t.Errorf("placing again into the finished directory: %v, %+v", err, again)
	}
	s.Steps = 10
	if _, err := Place(context.Background(), fx.ref, FromFile(fx.table), cut, s, placeRuntime(2), nil); !IsUserFault(err) || !strings.Contains(err.Error(), "steps") {
		t.Errorf("other settings into the same directory: %v", err)
	}
}

// TestPlaceBadInput: a new table without one of the reference's features,
// with an extra feature, and a reference that is not finished, are refused
// with messages naming the column or saying so.
func TestPlaceBadInput(t *testing.T) {
	fx := demoPlacement(t)
	dir := t.TempDir()
	all := bench.Demo(300, 11, 1)
	narrow := &ingest.Table{Matrix: Matrix{N: 300, D: 49, Data: make([]float32, 300*49)}, Features: all.Features[1:], ID: all.ID}
	for i := range 300 {
		copy(narrow.Data[i*49:(i+1)*49], all.Row(i)[1:])
	}
	writePlaceTable(t, filepath.Join(dir, "narrow.parquet"), narrow)
	wide := &ingest.Table{Matrix: Matrix{N: 300, D: 51, Data: make([]float32, 300*51)}, Features: append([]string{"extra"}, all.Features...), ID: all.ID}
	for i := range 300 {
		copy(wide.Data[i*51+1:(i+1)*51], all.Row(i))
	}
	writePlaceTable(t, filepath.Join(dir, "wide.parquet"), wide)
	for _, tc := range []struct{ file, want string }{
		{"narrow.parquet", `column "f01": the reference's feature column is missing`},
		{"wide.parquet", `column "extra": is a feature of the new table but not one of the reference's 50 features`},
	} {
		_, err := Place(context.Background(), fx.ref, FromFile(filepath.Join(dir, tc.file)), filepath.Join(dir, "out-"+tc.file), DefaultPlaceSettings(), placeRuntime(1), nil)
		if !IsUserFault(err) || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: %v, want a user fault saying %q", tc.file, err, tc.want)
		}
	}
	// A reference stopped before it finished.
	x, lab := blobs(300, 6, 3)
	ctx, cancel := context.WithCancel(context.Background())
	st := DefaultSettings()
	st.Perplexity, st.Iterations, st.EarlyIterations = 10, 200, 50
	_, err := Embed(ctx, FromMatrix(x, nil, lab), filepath.Join(dir, "unfinished"), st, DefaultRuntime(), &cancelAt{at: 60, cancel: cancel})
	var stop *StoppedError
	if !errors.As(err, &stop) {
		t.Fatalf("reference run: %v, want it stopped", err)
	}
	_, err = Place(context.Background(), filepath.Join(dir, "unfinished"), FromMatrix(x, nil, nil), filepath.Join(dir, "out-unfinished"), DefaultPlaceSettings(), placeRuntime(1), nil)
	if !IsUserFault(err) || !strings.Contains(err.Error(), "the reference run is not finished") {
		t.Errorf("placing into an unfinished run: %v", err)
	}
}

// TestPlaceShardsOfParts: a new table in Parquet parts placed in four
// shards (each reading only the parts that hold its rows), merged, gives the
// bytes of the whole table placed in one go.
func TestPlaceShardsOfParts(t *testing.T) {
	fx := demoPlacement(t)
	dir := t.TempDir()
	all, err := ingest.Read(fx.table, ingest.Options{ID: "id", Label: "population"})
	if err != nil {
		t.Fatal(err)
	}
	parts := filepath.Join(dir, "new")
	if err := os.MkdirAll(parts, 0o755); err != nil {
		t.Fatal(err)
	}
	for i, r := range [][2]int{{0, 1000}, {1000, 7000}, {7000, 7100}, {7100, fx.newRows}} {
		writePlaceTable(t, filepath.Join(parts, fmt.Sprintf("part-%d.parquet", i)), tableRows(all, r[0], r[1]))
	}
	s := DefaultPlaceSettings()
	whole, err := Place(context.Background(), fx.ref, FromFile(parts), filepath.Join(dir, "whole"), s, placeRuntime(2), nil)
	if err != nil {
		t.Fatal(err)
	}
	for i := range 4 {
		s.Shard, s.Shards = i, 4
		if _, err := Place(context.Background(), fx.ref, FromFile(parts), filepath.Join(dir, "sharded"), s, placeRuntime(2), nil); err != nil {
			t.Fatal(err)
		}
	}
	st, err := readPlaceState(filepath.Join(dir, "sharded", dirShards, shardName(1, 4)))
	if err != nil || !strings.HasPrefix(st.Input.ValuesHash, "parts:") || st.First != 3000 || st.End != 6000 {
		t.Fatalf("shard 1: %+v, %v; want rows 3,000–6,000 read from the parts", st, err)
	}
	merged, err := MergePlacement(context.Background(), filepath.Join(dir, "sharded"), placeRuntime(2), nil)
	if err != nil {
		t.Fatal(err)
	}
	a, _ := os.ReadFile(whole.Placed)
	b, _ := os.ReadFile(merged.Placed)
	if len(a) == 0 || !bytes.Equal(a, b) {
		t.Fatal("the merged placement of the parts differs from the whole placement")
	}
}

// TestPlaceFarRowsWarn: new rows of another invented survey (another seed
// of the demo's model, so populations the reference lacks) are far from
// every reference row; the index finds fewer of their exact neighbours, and
// the placement says so with the remedy, while the same rows placed with
// the exact search have nothing to warn about.
func TestPlaceFarRowsWarn(t *testing.T) {
	fx := demoPlacement(t)
	dir := t.TempDir()
	path := filepath.Join(dir, "far.parquet")
	writePlaceTable(t, path, bench.Demo(1500, 7, 2))
	for _, how := range []string{"index", "exact"} {
		ps := DefaultPlaceSettings()
		ps.Neighbours = how
		obs := &notes{}
		res, err := Place(context.Background(), fx.ref, FromFile(path), filepath.Join(dir, how), ps, placeRuntime(2), obs)
		if err != nil {
			t.Fatal(err)
		}
		warned := slices.ContainsFunc(obs.warn, func(w string) bool { return strings.Contains(w, "--neighbours exact") })
		r := res.Report.Neighbours.Recall
		if r != nil {
			t.Logf("%s: recall %.4f, warned %v", how, *r, warned)
		}
		if how == "index" && (r == nil || *r >= placeRecallWarn || !warned) {
			t.Errorf("index: recall %v, warned %v; want a recall below %.2f and the warning", r, warned, placeRecallWarn)
		}
		if how == "exact" && warned {
			t.Errorf("exact: warned %q", obs.warn)
		}
	}
}
