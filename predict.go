package nightjar

import (
	"fmt"
	"math/rand/v2"
	"path/filepath"
	"slices"

	"nightjar/bench"
	"nightjar/gradient"
	"nightjar/ingest"
	"nightjar/internal/par"
	"nightjar/knn"
)

// The phases of a run as a prediction fits them, with the report fields
// they come from (RunSampleOf).
const (
	PhaseRead        = "read"            // Report.Phases["read"]
	PhaseNeighbours  = "neighbours"      // Report.Neighbours.Seconds
	PhaseRecallCheck = "recall_check"    // Report.Phases["recall_check"]
	PhaseAffinities  = "affinities"      // Report.Affinities.Seconds
	PhaseStart       = "start_subsample" // Report.Phases["start_subsample"]
	PhaseOptimiser   = "optimiser"       // Report.Optimiser.Seconds
	PhaseOutputs     = "outputs"         // Report.Phases["outputs"]
	PhaseScores      = "scores"          // Report.Phases["scores"]
)

// ResolveFor returns s with the choices that "auto" makes by the number of
// rows spelled out for a run on n rows: the neighbour search and the
// repulsion. Runs on subsamples made with the result use the methods of
// the full run, so that their times extrapolate to it. Errors are
// *SettingError.
func ResolveFor(s Settings, n, threads int) (Settings, error) {
	m, err := s.neighbourMethod(n)
	if err != nil {
		return s, err
	}
	p, err := s.gradientParams(n, threads)
	if err != nil {
		return s, err
	}
	s.Neighbours, s.Repulsion = m.String(), p.Resolve(n).String()
	return s, nil
}

// PhaseLaws returns the growth law of each phase of a run of s (resolved
// for the full table by ResolveFor) against its rows N; the package doc of
// nightjar/bench states them with their sources.
func PhaseLaws(s Settings) ([]bench.PhaseLaw, error) {
	nb := bench.NLogN
	if m, err := knn.ParseMethod(s.Neighbours); err != nil {
		return nil, &SettingError{Name: "neighbours", Msg: fmt.Sprintf("%q is not resolved: %v", s.Neighbours, err)}
	} else if m == knn.ByExact {
		nb = bench.Quadratic
	}
	opt := bench.Linear
	switch m, err := gradient.ParseMethod(s.Repulsion); {
	case err != nil || m == gradient.Auto:
		return nil, &SettingError{Name: "repulsion", Msg: fmt.Sprintf("%q is not resolved", s.Repulsion)}
	case m == gradient.Exact:
		opt = bench.Quadratic
	case m == gradient.Tree:
		opt = bench.NLogN
	}
	return []bench.PhaseLaw{
		{Name: PhaseRead, Law: bench.Linear},
		{Name: PhaseNeighbours, Law: nb},
		{Name: PhaseRecallCheck, Law: bench.Linear},
		{Name: PhaseAffinities, Law: bench.Linear},
		{Name: PhaseStart, Law: bench.Linear},
		{Name: PhaseOptimiser, Law: opt},
		{Name: PhaseOutputs, Law: bench.Linear},
		{Name: PhaseScores, Law: bench.Linear},
	}, nil
}

// RunSampleOf turns the report of a finished run into a sample for
// bench.ForecastRun: its rows, the phases' seconds by the names above, the
// wall time and the peak memory (measured around the run's process by the
// caller; peak ≤ 0 takes the report's).
func RunSampleOf(rep *Report, wall float64, peak int64) bench.RunSample {
	if peak <= 0 {
		peak = rep.PeakMemoryBytes
	}
	return bench.RunSample{N: rep.Rows, Seconds: wall, Memory: float64(peak), Phases: map[string]float64{
		PhaseRead:        rep.Phases["read"],
		PhaseNeighbours:  rep.Neighbours.Seconds,
		PhaseRecallCheck: rep.Phases["recall_check"],
		PhaseAffinities:  rep.Affinities.Seconds,
		PhaseStart:       rep.Phases["start_subsample"],
		PhaseOptimiser:   rep.Optimiser.Seconds,
		PhaseOutputs:     rep.Phases["outputs"],
		PhaseScores:      rep.Phases["scores"],
	}}
}

// Subsamples writes random subsamples of the table ds into dir, one
// Parquet file per size in sizes (each at most ds.Rows), and returns them.
// The table is read once with s's column choices (features, id, label,
// skipped rows; not the reduction, which each run on a subsample makes
// itself). The subsamples are the first rows of one random order of the
// table's rows drawn from seed (a Fisher–Yates shuffle), so they are
// nested (the rows of a smaller one are among those of every larger one)
// and the same seed gives the same rows whatever the other sizes; each
// keeps the table's row order.
func Subsamples(ds Dataset, sizes []int, s Settings, seed uint64, threads int, dir string) ([]Dataset, error) {
	s.Input, s.ID, s.Label, s.Reduce = ds.Path, ds.ID, ds.Label, 0
	t, _, err := readTable(s, threads, nil)
	if err != nil {
		return nil, err
	}
	// The rows in a seeded random order: each subsample is a prefix of
	// it, back in table order.
	outer := par.Identity(t.N)
	rng := rand.New(rand.NewPCG(seed, subsampleStream))
	rng.Shuffle(len(outer), func(i, j int) { outer[i], outer[j] = outer[j], outer[i] })
	var out []Dataset
	for _, n := range sizes {
		n = min(n, t.N)
		rows := slices.Clone(outer[:n])
		slices.Sort(rows)
		sub := gatherRows(t, rows)
		path := filepath.Join(dir, fmt.Sprintf("%s-sample-%d.parquet", trimExt(filepath.Base(ds.Path)), n))
		if err := writeTable(path, sub); err != nil {
			return nil, err
		}
		out = append(out, Dataset{Path: path, Rows: n, ID: ds.ID, Label: ds.Label})
	}
	return out, nil
}

// subsampleStream keeps the subsamples' random stream apart from the
// streams a run draws from the same seed.
const subsampleStream = 0x5ab5

// gatherRows returns the table of t's rows listed in rows (increasing).
func gatherRows(t *ingest.Table, rows []int32) *ingest.Table {
	d := t.D
	sub := &ingest.Table{Features: t.Features, Format: t.Format}
	sub.N, sub.D = len(rows), d
	sub.Data = make([]float32, len(rows)*d)
	for i, r := range rows {
		copy(sub.Data[i*d:(i+1)*d], t.Data[int(r)*d:(int(r)+1)*d])
	}
	sub.ID, sub.Label = gatherColumn(t.ID, rows), gatherColumn(t.Label, rows)
	return sub
}

func gatherColumn(c *ingest.Column, rows []int32) *ingest.Column {
	if c == nil {
		return nil
	}
	out := &ingest.Column{Name: c.Name}
	if c.Ints != nil {
		out.Ints = make([]int64, len(rows))
		for i, r := range rows {
			out.Ints[i] = c.Ints[r]
		}
		return out
	}
	out.Strings = make([]string, len(rows))
	for i, r := range rows {
		out.Strings[i] = c.Strings[r]
	}
	return out
}

func trimExt(name string) string { return name[:len(name)-len(filepath.Ext(name))] }
