package nightjar

import (
	"fmt"
	"math"
	"slices"

	"nightjar/bench"
	"nightjar/knn"
)

// The phases an approximate neighbour search is split into for a
// prediction: its start (trees or index, and the stopping probe) and its
// refinement passes, whose number can grow with the rows.
const (
	PhaseNeighbourStart  = "neighbours_start"
	PhaseNeighbourPasses = "neighbours_passes" // seconds per pass
)

// LadderRun is one run of a setting on a random subsample of the table.
type LadderRun struct {
	Report  *Report // its report.json; nil when the run failed
	Seconds float64 // wall time of its process
	Peak    int64   // peak resident memory of its process, bytes (≤ 0: the report's)
	// Busy is the share of the machine's cores (0 to 1) that other
	// processes kept busy while it ran; its times count as that much less
	// certain.
	Busy float64
}

// PredictSetting predicts the wall time and peak memory of a run of s on
// the whole table of rows rows from runs of the same settings on random
// subsamples (ResolveFor(s, rows) must be what those runs used): each
// phase is fitted with its growth law (PhaseLaws, bench.ForecastRun), and
// an approximate neighbour search is split into its start and its passes,
// whose number at the full size bench.PredictPasses predicts from the
// recalls the runs estimated. Quality holds the medians of the runs'
// scores at each subsample size, with the trend of trustworthiness.
func PredictSetting(name string, s Settings, rows, threads int, runs []LadderRun) (SettingPrediction, error) {
	rs, err := ResolveFor(s, rows, threads)
	if err != nil {
		return SettingPrediction{}, err
	}
	laws, err := PhaseLaws(rs)
	if err != nil {
		return SettingPrediction{}, err
	}
	sp := SettingPrediction{Name: name, Settings: s, Neighbours: rs.Neighbours, Repulsion: rs.Repulsion}
	var samples []bench.RunSample
	var passes []bench.PassRun
	for _, r := range runs {
		if r.Report == nil {
			continue
		}
		sm := RunSampleOf(r.Report, r.Seconds, r.Peak)
		sm.Busy = math.Min(1, math.Max(0, r.Busy))
		samples = append(samples, sm)
		passes = append(passes, passRunOf(r.Report))
	}
	scoresFrom(laws, runs)
	if rs.Neighbours != knn.ByExact.String() {
		laws, samples, sp.Notes = splitPasses(laws, samples, runs, passes, rows, rs.RecallGoal, rs.Neighbours == knn.ByDescent.String())
	}
	fc := bench.ForecastRun(laws, samples, rows, bench.DefaultLimits)
	sp.Seconds = rangeOf(fc.Seconds, 1)
	sp.PeakMemoryBytes = rangeOf(fc.Memory, 1<<20)
	for _, p := range fc.Phases {
		pp := PhasePrediction{Name: p.Name, Law: p.Law.String(), Seconds: rangeOf(p.Estimate, 0.1)}
		if !math.IsNaN(p.Fit.Chi2) {
			pp.Chi2 = math.Round(p.Fit.Chi2*100) / 100
		}
		sp.Phases = append(sp.Phases, pp)
	}
	sp.Quality, sp.TrustTrend = rungQuality(runs)
	for i := range sp.Quality {
		sp.Quality[i].Phases = phaseMedians(samples, sp.Quality[i].Rows)
	}
	for _, r := range runs {
		sp.LadderSeconds += r.Seconds
	}
	sp.LadderSeconds = math.Round(sp.LadderSeconds*10) / 10
	return sp, nil
}

// passRunOf reads the recalls an approximate search estimated before and
// after its first pass (NaN when it has none).
func passRunOf(rep *Report) bench.PassRun {
	pr := bench.PassRun{N: float64(rep.Rows), Before: math.NaN(), After1: math.NaN(), Samples: knn.DefaultRefine().StopRows * rep.Neighbours.K, Trees: rep.Neighbours.Trees}
	if pr2 := rep.Neighbours.PassRecall; len(pr2) >= 2 {
		pr.Before, pr.After1 = pr2[0], pr2[1]
	}
	return pr
}

// splitPasses replaces the neighbour phase by its start and its passes,
// the latter as seconds per pass times the passes predicted at rows. trees
// tells that the start is NN-descent's random projection trees, which grow
// on a large table (HNSW's start does not).
func splitPasses(laws []bench.PhaseLaw, samples []bench.RunSample, runs []LadderRun, passes []bench.PassRun,
	rows int, goal float64, trees bool) ([]bench.PhaseLaw, []bench.RunSample, []string) {
	d := knn.DefaultDescent(0)
	var tg bench.TreeGrowth
	if trees {
		tg = bench.TreeGrowth{Base: d.Trees, Step: knn.TreeStep, Max: d.MaxTrees, Goal: d.StartRecall, Factor: bench.DefaultTreeFactor}
	}
	pf := bench.PredictPasses(passes, float64(rows), goal, d.MaxPasses, tg)
	// The start's seconds are those of Base trees (each subsample's brought
	// back below), times the predicted trees over Base.
	start := bench.PhaseLaw{Name: PhaseNeighbourStart}
	if pf.Trees > 0 {
		start.Times, start.TimesHigh = float64(pf.Trees)/float64(tg.Base), float64(pf.TreesHigh)/float64(tg.Base)
	}
	var out []bench.PhaseLaw
	for _, l := range laws {
		if l.Name != PhaseNeighbours {
			out = append(out, l)
			continue
		}
		start.Law = l.Law
		out = append(out, start,
			bench.PhaseLaw{Name: PhaseNeighbourPasses, Law: l.Law, Times: float64(pf.Passes), TimesHigh: float64(pf.High)})
	}
	i := 0
	for _, r := range runs {
		if r.Report == nil {
			continue
		}
		n, secs := 0, 0.0
		for p := 1; ; p++ {
			v, ok := r.Report.Phases[fmt.Sprintf("neighbours_refine_%d", p)]
			if !ok {
				break
			}
			n, secs = p, secs+v
		}
		sm := &samples[i]
		i++
		sm.Phases[PhaseNeighbourStart] = math.Max(0, sm.Phases[PhaseNeighbours]-secs)
		if t := r.Report.Neighbours.Trees; t > tg.Base && tg.Base > 0 {
			sm.Phases[PhaseNeighbourStart] *= float64(tg.Base) / float64(t)
		}
		delete(sm.Phases, PhaseNeighbours)
		if n > 0 {
			sm.Phases[PhaseNeighbourPasses] = secs / float64(n)
			sm.Repeats = map[string]float64{PhaseNeighbourPasses: float64(n)}
		}
	}
	return out, samples, []string{pf.Note}
}

// rungQuality returns the medians of the finished runs' scores at each
// size, smallest first, and the change of trustworthiness per tenfold rows.
func rungQuality(runs []LadderRun) ([]RungQuality, *float64) {
	by := map[int][]LadderRun{}
	var sizes []int
	for _, r := range runs {
		if r.Report == nil {
			continue
		}
		n := r.Report.Rows
		if _, ok := by[n]; !ok {
			sizes = append(sizes, n)
		}
		by[n] = append(by[n], r)
	}
	slices.Sort(sizes)
	var out []RungQuality
	var ns, trust []float64
	for _, n := range sizes {
		rs := by[n]
		med := func(f func(LadderRun) float64) float64 {
			vs := make([]float64, len(rs))
			for i, r := range rs {
				vs[i] = f(r)
			}
			return bench.Median(vs)
		}
		q := RungQuality{Rows: n, Runs: len(rs)}
		q.Seconds = math.Round(med(func(r LadderRun) float64 { return r.Seconds })*100) / 100
		q.PeakMemoryBytes = int64(med(func(r LadderRun) float64 {
			if r.Peak > 0 {
				return float64(r.Peak)
			}
			return float64(r.Report.PeakMemoryBytes)
		}))
		score := func(get func(*Quality) *float64) *float64 {
			v := med(func(r LadderRun) float64 {
				if r.Report.Quality == nil || get(r.Report.Quality) == nil {
					return math.NaN()
				}
				return *get(r.Report.Quality)
			})
			if math.IsNaN(v) {
				return nil
			}
			return &v
		}
		q.Trustworthiness = score(func(q *Quality) *float64 { return &q.Trustworthiness })
		q.Continuity = score(func(q *Quality) *float64 { return &q.Continuity })
		q.LabelAccuracy = score(func(q *Quality) *float64 { return q.LabelAccuracyMap })
		if q.Trustworthiness != nil {
			ns, trust = append(ns, float64(n)), append(trust, *q.Trustworthiness)
		}
		out = append(out, q)
	}
	if t := bench.Trend(ns, trust); !math.IsNaN(t) {
		t = math.Round(t*1e5) / 1e5
		return out, &t
	}
	return out, nil
}

// phaseMedians returns the median seconds of each phase over the samples
// at n rows, the rest of the wall time as bench.OtherPhase.
func phaseMedians(samples []bench.RunSample, n int) map[string]float64 {
	vals := map[string][]float64{}
	for _, s := range samples {
		if s.N != n {
			continue
		}
		rest := s.Seconds
		for name, v := range s.Phases {
			vals[name] = append(vals[name], v)
			reps := 1.0
			if r, ok := s.Repeats[name]; ok {
				reps = r
			}
			rest -= v * reps
		}
		vals[bench.OtherPhase] = append(vals[bench.OtherPhase], math.Max(rest, 0))
	}
	out := map[string]float64{}
	for name, vs := range vals {
		if m := bench.Median(vs); m != 0 {
			out[name] = math.Round(m*100) / 100
		}
	}
	return out
}

// EstimateRun estimates the wall time of a run of s at n rows from its
// runs on smaller subsamples so far (bench.RoughSeconds), for keeping a
// ladder within a time budget; NaN without finished runs.
func EstimateRun(s Settings, rows, threads int, runs []LadderRun, n int) float64 {
	rs, err := ResolveFor(s, rows, threads)
	if err != nil {
		return math.NaN()
	}
	laws, err := PhaseLaws(rs)
	if err != nil {
		return math.NaN()
	}
	var samples []bench.RunSample
	for _, r := range runs {
		if r.Report != nil {
			samples = append(samples, RunSampleOf(r.Report, r.Seconds, r.Peak))
		}
	}
	return bench.RoughSeconds(laws, samples, n)
}

// scoresFrom fits the scores phase only on the runs that scored the largest
// sample any run scored: scoring ranks each of S sampled rows against all
// N, so a run of fewer rows than the sample, which scores every row
// (S = N), grows as N², not as the a + b·N of the runs beyond it.
func scoresFrom(laws []bench.PhaseLaw, runs []LadderRun) {
	most := 0
	for _, r := range runs {
		if r.Report != nil && r.Report.Quality != nil {
			most = max(most, r.Report.Quality.Sample)
		}
	}
	for i := range laws {
		if laws[i].Name == PhaseScores {
			laws[i].From = most
		}
	}
}
