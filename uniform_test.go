package nightjar

import (
	"context"
	"errors"
	"math"
	"path/filepath"
	"testing"

	"nightjar/checkpoint"
	"nightjar/ingest"
)

// TestUniformMNIST maps the first 3,000 MNIST training digits (LeCun,
// Cortes & Burges; the GoMNIST module's files) with the affinities
// calibrated by perplexity 30 and with uniform affinities over 15
// neighbours, and places the first 500 test digits into the uniform map.
// Böhm, Berens & Kobak (JMLR 23, 2022) report that uniform affinities over
// k = 15 neighbours give t-SNE maps close to those of perplexity 30 (from
// memory); the check: the uniform map's 10-NN label accuracy and
// trustworthiness@10 are within 0.02 of the calibrated map's, on the same
// sampled digits. Then the run directory's P holds only the two values the
// definition allows, 1/(2NK) and 1/(NK), and the placement's label votes,
// weighted by P_{j|i} = 1/K, are multiples of 1/15.
func TestUniformMNIST(t *testing.T) {
	if testing.Short() {
		t.Skip("half a minute: runs without -short")
	}
	train, test := mnistSplit(t, 3000, 500)
	dir := t.TempDir()
	in := filepath.Join(dir, "train.parquet")
	writePlaceTable(t, in, train)
	rt := DefaultRuntime()
	rt.Threads, rt.ScoreSample = 2, 1000
	var q [2]*Quality
	var uniformDir string
	for i, k := range []int{0, 15} {
		s := DefaultSettings()
		s.ID, s.Label, s.UniformNeighbours = "id", "digit", k
		run := filepath.Join(dir, []string{"calibrated", "uniform"}[i])
		res, err := Embed(context.Background(), FromFile(in), run, s, rt, nil)
		if err != nil {
			t.Fatal(err)
		}
		q[i] = res.Report.Quality
		if q[i] == nil || q[i].LabelAccuracyMap == nil {
			t.Fatalf("run %s: no label accuracy in the report", run)
		}
		t.Logf("k = %d: 10-NN label accuracy in the map %.4f, trustworthiness@10 %.4f, %d affinity entries",
			k, *q[i].LabelAccuracyMap, q[i].Trustworthiness, res.Report.Affinities.Entries)
		uniformDir = run
	}
	if d := *q[0].LabelAccuracyMap - *q[1].LabelAccuracyMap; d > 0.02 {
		t.Errorf("uniform map's label accuracy %.4f, %.4f below the calibrated map's", *q[1].LabelAccuracyMap, d)
	}
	if d := q[0].Trustworthiness - q[1].Trustworthiness; d > 0.02 {
		t.Errorf("uniform map's trustworthiness %.4f, %.4f below the calibrated map's", q[1].Trustworthiness, d)
	}

	run, err := checkpoint.Open(uniformDir)
	if err != nil {
		t.Fatal(err)
	}
	secs, err := run.LoadArtifact(fileP, "affinity")
	if err != nil {
		t.Fatal(err)
	}
	P, err := csrFromSections(secs, train.N)
	if err != nil {
		t.Fatal(err)
	}
	// 1/K is kept in float32 before the sum is scaled and rounded again:
	// two roundings of relative size ≤ 2⁻²⁴.
	one, two := 1/(2*3000.0*15), 1/(3000.0*15)
	mutual := 0
	for _, v := range P.Vals {
		switch {
		case math.Abs(float64(v)/one-1) <= 0x1p-23:
		case math.Abs(float64(v)/two-1) <= 0x1p-23:
			mutual++
		default:
			t.Fatalf("P holds %g, neither 1/(2NK) = %g nor 1/(NK) = %g", v, one, two)
		}
	}
	t.Logf("P: %d entries, %d of them between mutual neighbours", len(P.Vals), mutual)

	newPath := filepath.Join(dir, "test.parquet")
	writePlaceTable(t, newPath, test)
	res, err := Place(context.Background(), uniformDir, FromFile(newPath), filepath.Join(dir, "placed"), DefaultPlaceSettings(), placeRuntime(2), nil)
	if err != nil {
		t.Fatal(err)
	}
	got, err := ingest.Read(res.Placed, ingest.Options{Features: []string{"vote_share"}, ID: "id"})
	if err != nil {
		t.Fatal(err)
	}
	for i := range got.N {
		v := float64(got.Row(i)[0]) * 15
		if math.Abs(v-math.Round(v)) > 1e-5 || v < 1 {
			t.Fatalf("placed digit %d: vote share %g is not a multiple of 1/15", i, got.Row(i)[0])
		}
	}
	if sc := res.Report.Scores; sc == nil || sc.Agreement == nil {
		t.Fatal("no voted-label agreement in the placement's report")
	} else {
		t.Logf("placed 500 test digits: voted label agrees for %.4f", *sc.Agreement)
	}
}

// TestUniformTooFewRows: uniform affinities over more neighbours than the
// table has other rows are refused before any work, as a user fault.
func TestUniformTooFewRows(t *testing.T) {
	x, _ := blobs(50, 4, 5)
	s := DefaultSettings()
	s.Perplexity, s.UniformNeighbours = 5, 50
	_, err := Embed(context.Background(), FromMatrix(x, nil, nil), filepath.Join(t.TempDir(), "run"), s, DefaultRuntime(), nil)
	var few *TooFewRowsError
	if !errors.As(err, &few) || !IsUserFault(err) || few.Rows != 50 || few.Neighbours != 50 {
		t.Fatalf("Embed: %v, want a *TooFewRowsError for 50 neighbours among 50 rows", err)
	}
	t.Log(err)
}

// TestUniformSubsampleStart: the subsample start maps its sample with the
// run's own kind of affinities; with uniform ones over 12 neighbours, a
// start sample of 150 rows and 1 or 3 threads, the run ends with the same
// bits (the promise of the par package) and three separated groups keep
// their neighbours (10-NN label accuracy in the map ≥ 0.95: the groups are
// 8 standard deviations apart, so the input's accuracy is 1 — common
// practice for a sanity bound).
func TestUniformSubsampleStart(t *testing.T) {
	x, lab := blobs(900, 5, 7)
	s := DefaultSettings()
	s.UniformNeighbours, s.Start, s.StartRows = 12, "subsample", 150
	s.Iterations, s.EarlyIterations = 150, 50
	var maps [2][]float64
	for i, th := range []int{1, 3} {
		rt := DefaultRuntime()
		rt.Threads, rt.ScoreSample = th, 300
		res, err := Embed(context.Background(), FromMatrix(x, nil, lab), filepath.Join(t.TempDir(), "run"), s, rt, nil)
		if err != nil {
			t.Fatal(err)
		}
		maps[i] = res.Map
		if q := res.Report.Quality; q == nil || q.LabelAccuracyMap == nil || *q.LabelAccuracyMap < 0.95 {
			t.Fatalf("%d threads: quality %+v, want 10-NN label accuracy ≥ 0.95", th, q)
		}
	}
	for i := range maps[0] {
		if math.Float64bits(maps[0][i]) != math.Float64bits(maps[1][i]) {
			t.Fatalf("value %d: 1 thread %v, 3 threads %v", i, maps[0][i], maps[1][i])
		}
	}
}
