package nightjar

import (
	"fmt"
	"math"
	"path/filepath"
	"strings"
	"testing"

	"nightjar/bench"
	"nightjar/ingest"
)

func TestResolveForAndLaws(t *testing.T) {
	cases := []struct {
		rows               int
		neighbours, repuls string
		nbLaw, optLaw      bench.Law
	}{
		{1_000_000, "descent", "grid", bench.NLogN, bench.Linear},
		{20_000, "exact", "grid", bench.Quadratic, bench.Linear},
		{5_000, "exact", "tree", bench.Quadratic, bench.NLogN},
		{800, "exact", "exact", bench.Quadratic, bench.Quadratic},
	}
	for _, c := range cases {
		s, err := ResolveFor(DefaultSettings(), c.rows, 2)
		if err != nil {
			t.Fatal(err)
		}
		if s.Neighbours != c.neighbours || s.Repulsion != c.repuls {
			t.Errorf("%d rows: %s, %s; want %s, %s", c.rows, s.Neighbours, s.Repulsion, c.neighbours, c.repuls)
		}
		laws, err := PhaseLaws(s)
		if err != nil {
			t.Fatal(err)
		}
		got := map[string]bench.Law{}
		for _, l := range laws {
			got[l.Name] = l.Law
		}
		if got[PhaseNeighbours] != c.nbLaw || got[PhaseOptimiser] != c.optLaw || got[PhaseAffinities] != bench.Linear {
			t.Errorf("%d rows: laws %v", c.rows, got)
		}
	}
	if _, err := PhaseLaws(DefaultSettings()); err == nil {
		t.Error("unresolved settings should be refused")
	}
}

func TestAffinityKey(t *testing.T) {
	base := DefaultSettings()
	base.Input = "t.parquet"
	key := AffinityKey(base, 5000)
	same := base
	same.Theta, same.Iterations, same.Seed = 1, 300, 9 // exact neighbours: the seed does not touch P
	if AffinityKey(same, 5000) != key {
		t.Error("θ, iterations and the seed do not change an exact P")
	}
	for name, change := range map[string]func(*Settings){
		"perplexity": func(s *Settings) { s.Perplexity = 10 },
		"uniform":    func(s *Settings) { s.UniformNeighbours = 15 },
		"metric":     func(s *Settings) { s.Metric = "cosine" },
		"neighbours": func(s *Settings) { s.Neighbours = "descent" },
		"input":      func(s *Settings) { s.Input = "other.parquet" },
	} {
		s := base
		change(&s)
		if AffinityKey(s, 5000) == key {
			t.Errorf("changing %s kept the key", name)
		}
	}
	if AffinityKey(base, 6000) == key {
		t.Error("other rows kept the key")
	}
	// Approximate neighbours depend on the seed.
	a, b := base, base
	a.Neighbours, b.Neighbours, b.Seed = "descent", "descent", 2
	if AffinityKey(a, 5000) == AffinityKey(b, 5000) {
		t.Error("NN-descent with another seed kept the key")
	}
}

func TestSubsamplesNested(t *testing.T) {
	dir := t.TempDir()
	full, err := PrepareDataset("demo", 2000, DefaultSettings(), 2, dir, nil)
	if err != nil {
		t.Fatal(err)
	}
	subs, err := Subsamples(full, []int{100, 300, 900}, DefaultSettings(), 7, 2, dir)
	if err != nil {
		t.Fatal(err)
	}
	var ids []map[int64]bool
	for i, sub := range subs {
		tab, err := ingest.Read(sub.Path, ingest.Options{ID: full.ID, Label: full.Label})
		if err != nil {
			t.Fatal(err)
		}
		if tab.N != []int{100, 300, 900}[i] || sub.Rows != tab.N || filepath.Dir(sub.Path) != dir || tab.Label == nil {
			t.Fatalf("subsample %d: %d rows at %s", i, tab.N, sub.Path)
		}
		set := map[int64]bool{}
		for j, id := range tab.ID.Ints {
			if j > 0 && id <= tab.ID.Ints[j-1] {
				t.Fatalf("subsample %d is not in table order", i)
			}
			set[id] = true
		}
		ids = append(ids, set)
	}
	for id := range ids[0] {
		if !ids[1][id] || !ids[2][id] {
			t.Fatalf("row %d of the smallest subsample is missing from a larger one", id)
		}
	}
	again, err := Subsamples(full, []int{100}, DefaultSettings(), 7, 2, t.TempDir())
	if err != nil {
		t.Fatal(err)
	}
	tab, _ := ingest.Read(again[0].Path, ingest.Options{ID: full.ID})
	for _, id := range tab.ID.Ints {
		if !ids[0][id] {
			t.Fatal("the same seed gave other rows")
		}
	}
}

// fakeReport is the report of a run at n rows whose phases follow known
// laws (synthetic, for the plumbing of PredictSetting).
func fakeReport(n int, passes int) *Report {
	fn := float64(n)
	rep := &Report{Rows: n, Phases: map[string]float64{"read": 1e-6 * fn, "scores": 0.5 + 2e-5*fn, "outputs": 0.1 + 1e-6*fn}}
	rep.Neighbours.K = 90
	rep.Neighbours.Seconds = 3e-7 * fn * math.Log(fn) * float64(passes+1)
	for p := 1; p <= passes; p++ {
		rep.Phases[fmt.Sprintf("neighbours_refine_%d", p)] = 3e-7 * fn * math.Log(fn)
	}
	before := 1 - 0.05*math.Log10(fn/1000)
	rep.Neighbours.PassRecall = []float64{before, 1 - (1-before)*1e-3}
	rep.Affinities.Seconds = 1e-5 * fn
	rep.Optimiser.Seconds = 60 + 2e-4*fn
	rep.PeakMemoryBytes = int64(100<<20 + 2000*fn)
	trust := 0.99 + 0.001*math.Log10(fn/1000)
	rep.Quality = &Quality{Trustworthiness: trust, Continuity: 0.98}
	return rep
}

func TestPredictSetting(t *testing.T) {
	var runs []LadderRun
	for _, n := range []int{10_000, 30_000, 100_000} {
		rep := fakeReport(n, 1)
		wall := rep.Neighbours.Seconds + rep.Affinities.Seconds + rep.Optimiser.Seconds + 1e-6*float64(n) + 0.6 + 2.1e-5*float64(n) + 0.5
		runs = append(runs, LadderRun{Report: rep, Seconds: wall}, LadderRun{}) // a failed run is skipped
	}
	s := DefaultSettings()
	sp, err := PredictSetting("defaults", s, 1_000_000, 2, runs)
	if err != nil {
		t.Fatal(err)
	}
	if sp.Neighbours != "descent" || sp.Repulsion != "grid" || sp.Seconds.Refused != "" {
		t.Fatalf("prediction %+v", sp)
	}
	// The truth at 10⁶ rows with one pass (the recalls stay high): the laws above.
	n := 1e6
	truth := 2*3e-7*n*math.Log(n) + 1e-5*n + 60 + 2e-4*n + 1e-6*n + 0.6 + 2.1e-5*n + 0.5
	if math.Abs(sp.Seconds.Value/truth-1) > 0.1 || truth < sp.Seconds.Low || truth > sp.Seconds.High {
		t.Errorf("predicted %+v, true %.0f", sp.Seconds, truth)
	}
	if m := 100<<20 + 2000*n; math.Abs(sp.PeakMemoryBytes.Value/m-1) > 0.05 {
		t.Errorf("memory %+v, true %.0f", sp.PeakMemoryBytes, m)
	}
	names := map[string]bool{}
	for _, p := range sp.Phases {
		names[p.Name] = true
	}
	if !names[PhaseNeighbourStart] || !names[PhaseNeighbourPasses] || names[PhaseNeighbours] || !names[bench.OtherPhase] {
		t.Errorf("phases %v", names)
	}
	if len(sp.Quality) != 3 || sp.Quality[0].Rows != 10_000 || sp.TrustTrend == nil || math.Abs(*sp.TrustTrend-0.001) > 1e-6 {
		t.Errorf("quality %+v, trend %v", sp.Quality, sp.TrustTrend)
	}
	if len(sp.Notes) != 1 || !strings.Contains(sp.Notes[0], "1 pass predicted") {
		t.Errorf("notes %q", sp.Notes)
	}
	if est := EstimateRun(s, 1_000_000, 2, runs[:2], 30_000); !(est > runs[2].Seconds*0.8) {
		t.Errorf("estimate for 30,000 rows from 10,000: %g, measured %g", est, runs[2].Seconds)
	}
}

func TestPredictionCheck(t *testing.T) {
	dir := t.TempDir()
	s := DefaultSettings()
	s.Input, s.ID, s.Label = "/data/demo.parquet", "id", "population"
	pf := &PredictionFile{Tool: "nightjar", Made: "2026-12-02T10:00:00Z", Rows: 1000, Ladder: []int{10, 30, 100},
		Settings: []SettingPrediction{{Name: "theta=1", Settings: func() Settings { x := s; x.Theta = 1; return x }()},
			{Name: "defaults", Settings: s, Seconds: Range{Value: 100, Low: 80, High: 120}, PeakMemoryBytes: Range{Value: 1000, Low: 900, High: 1100}}}}
	path := filepath.Join(dir, FilePrediction)
	if err := WritePredictionFile(path, pf); err != nil {
		t.Fatal(err)
	}
	run := s
	run.Input = "/elsewhere/survey.parquet" // the input path does not matter
	c := predictionFor(path, run)
	if c.Setting != "defaults" || c.Note != "" {
		t.Fatalf("check %+v", c)
	}
	rep := &Report{Rows: 1000, SecondsTotal: 130, PeakMemoryBytes: 1000}
	c.measure(rep)
	if *c.SecondsRatio != 1.3 || *c.SecondsInRange || *c.MemoryRatio != 1 || !*c.MemoryInRange {
		t.Errorf("measured %v %v %v %v", *c.SecondsRatio, *c.SecondsInRange, *c.MemoryRatio, *c.MemoryInRange)
	}
	other := run
	other.Perplexity, other.Theta = 50, 1
	if c := predictionFor(path, other); c.Setting != "" || !strings.Contains(c.Note, "differs in perplexity") {
		t.Errorf("mismatch: %+v", c)
	}
	if c := predictionFor(filepath.Join(dir, "missing.json"), s); !strings.Contains(c.Note, "missing.json") {
		t.Errorf("missing file: %+v", c)
	}
	if predictionFor("", s) != nil {
		t.Error("no file, no check")
	}
	if _, err := ReadPredictionFile(filepath.Join(dir, "missing.json")); !IsUserFault(err) {
		t.Errorf("a missing prediction file should be the user's to fix: %v", err)
	}
}

func TestDurationAndBytes(t *testing.T) {
	for secs, want := range map[float64]string{42: "42 s", 820: "13 min 40 s", 4 * 3600: "4 h 00 min", math.NaN(): ""} {
		if got := Duration(secs); got != want {
			t.Errorf("Duration(%g) = %q, want %q", secs, got, want)
		}
	}
	if got := Bytes(2.5 * (1 << 30)); got != "2.50 GiB" {
		t.Errorf("Bytes = %q", got)
	}
	if got := Thousands(1234567); got != "1,234,567" {
		t.Errorf("Thousands = %q", got)
	}
}

// TestScoresFrom: the scores phase is fitted on the runs that scored the
// largest sample (a run of 700 rows with a sample of 2,000 scored all 700).
func TestScoresFrom(t *testing.T) {
	laws := []bench.PhaseLaw{{Name: PhaseOptimiser, Law: bench.Linear}, {Name: PhaseScores, Law: bench.Linear}}
	var runs []LadderRun
	for _, s := range []int{700, 2000, 2000} {
		runs = append(runs, LadderRun{Report: &Report{Quality: &Quality{Sample: s}}})
	}
	runs = append(runs, LadderRun{}) // a failed run
	scoresFrom(laws, runs)
	if laws[0].From != 0 || laws[1].From != 2000 {
		t.Errorf("From %d and %d, want 0 for the optimiser and 2000 for the scores", laws[0].From, laws[1].From)
	}
}

// TestPrepareDemoPerSeed: the demo dataset is written once per (rows, seed)
// and reused after; another seed gets a file of its own with other rows.
func TestPrepareDemoPerSeed(t *testing.T) {
	dir := t.TempDir()
	s := DefaultSettings()
	obs := &notes{}
	a, err := PrepareDataset("demo", 500, s, 2, dir, obs)
	if err != nil {
		t.Fatal(err)
	}
	again, err := PrepareDataset("demo", 500, s, 2, dir, obs)
	if err != nil || again != a || len(obs.note) != 1 {
		t.Fatalf("same seed again: %+v (error %v) after %+v, %d notes; want the same file, written once", again, err, a, len(obs.note))
	}
	s.Seed++
	b, err := PrepareDataset("demo", 500, s, 2, dir, obs)
	if err != nil {
		t.Fatal(err)
	}
	if b.Path == a.Path || len(obs.note) != 2 {
		t.Fatalf("another seed: %s after %s, %d notes; want a file of its own", b.Path, a.Path, len(obs.note))
	}
	ta, err := ingest.Read(a.Path, ingest.Options{ID: "id"})
	if err != nil {
		t.Fatal(err)
	}
	tb, err := ingest.Read(b.Path, ingest.Options{ID: "id"})
	if err != nil {
		t.Fatal(err)
	}
	if ta.Hash == tb.Hash {
		t.Error("two seeds gave the same rows")
	}
}
