package nightjar

import (
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"os"
	"path/filepath"

	"nightjar/bench"
	"nightjar/checkpoint"
	"nightjar/ingest"
	"nightjar/internal/figure"
)

// Dataset is a table file prepared for a benchmark sweep.
type Dataset struct {
	Path      string
	Rows      int
	ID, Label string // column names, "" for none
}

// PrepareDataset returns the table a sweep runs on: "demo" (rows of the
// invented survey, 20,000 when rows is 0) or "mnist" (the first rows of the
// 70,000 MNIST digits from the GoMNIST module, all when rows is 0), written
// as Parquet into dir unless already there; any other name is a table file,
// read once with s's column choices to count its rows.
func PrepareDataset(name string, rows int, s Settings, threads int, dir string, obs Observer) (Dataset, error) {
	obs = observerOrQuiet(obs)
	switch name {
	case "demo":
		// Written part by part, never held whole; the file is the seed's.
		if rows <= 0 {
			rows = 20000
		}
		path := filepath.Join(dir, fmt.Sprintf("data-demo-%d-seed%d.parquet", rows, s.Seed))
		if err := writeOnce(path, rows, name, obs, func(w io.Writer) error { return bench.WriteDemo(w, rows, s.Seed, threads) }); err != nil {
			return Dataset{}, err
		}
		return Dataset{Path: path, Rows: rows, ID: "id", Label: "population"}, nil
	case "mnist":
		mdir, err := bench.MNISTDir()
		if err != nil {
			return Dataset{}, err
		}
		t, err := bench.MNIST(mdir, rows)
		if err != nil {
			return Dataset{}, err
		}
		path := filepath.Join(dir, fmt.Sprintf("data-%s-%d.parquet", name, t.N))
		if err := writeOnce(path, t.N, name, obs, func(w io.Writer) error { return ingest.WriteTable(w, t) }); err != nil {
			return Dataset{}, err
		}
		return Dataset{Path: path, Rows: t.N, ID: t.ID.Name, Label: t.Label.Name}, nil
	default:
		abs, err := filepath.Abs(name)
		if err != nil {
			return Dataset{}, err
		}
		s.Input = abs
		probe, _, err := readTable(s, threads, nil)
		if err != nil {
			return Dataset{}, err
		}
		return Dataset{Path: abs, Rows: probe.N, ID: s.ID, Label: s.Label}, nil
	}
}

// writeOnce writes a dataset's file with write unless it is already there.
func writeOnce(path string, rows int, name string, obs Observer, write func(io.Writer) error) error {
	if _, err := os.Stat(path); err == nil {
		return nil
	}
	obs.Note(fmt.Sprintf("bench: writing %d rows of %s to %s", rows, name, path))
	if err := checkpoint.AtomicWrite(path, write); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	return nil
}

// WriteSweepReports writes the reports of a sweep into out: bench.csv and
// bench.md (one row per setting: medians over its repeats and their
// spread, KL only where settings share P, the notes of meta and the KL
// note), bench-runs.csv (every run) and bench.png (trustworthiness against
// the median wall time). It reports whether it drew bench.png: it does not
// when no setting has both a time and a trustworthiness score (runs
// without scores, or all failed), and then removes any bench.png left by
// an earlier sweep in out.
func WriteSweepReports(out string, meta bench.Meta, keys []string, rs []bench.Result) (bool, error) {
	sums := bench.Summarise(rs)
	if note := bench.KLNote(sums); note != "" {
		meta.Notes = append(meta.Notes, note)
	}
	files := []struct {
		name  string
		write func(io.Writer) error
	}{
		{"bench.csv", func(w io.Writer) error { return bench.WriteCSV(w, meta, keys, sums) }},
		{"bench-runs.csv", func(w io.Writer) error { return bench.WriteRunsCSV(w, meta, keys, rs) }},
		{"bench.md", func(w io.Writer) error { return bench.WriteMarkdown(w, meta, keys, sums) }},
	}
	for _, f := range files {
		if err := checkpoint.AtomicWrite(filepath.Join(out, f.name), f.write); err != nil {
			return false, fmt.Errorf("writing %s: %w", f.name, err)
		}
	}
	var pts []figure.TradeoffPoint
	drawable := false
	for _, r := range sums {
		pts = append(pts, figure.TradeoffPoint{Name: r.Name, Seconds: r.Seconds, Quality: r.Trust})
		drawable = drawable || (!math.IsNaN(r.Seconds) && !math.IsNaN(r.Trust))
	}
	if !drawable {
		if err := os.Remove(filepath.Join(out, "bench.png")); err != nil && !errors.Is(err, fs.ErrNotExist) {
			return false, fmt.Errorf("removing the old bench.png: %w", err)
		}
		return false, nil
	}
	title := fmt.Sprintf("%s: trustworthiness@%d against wall time (%d cores, %s)", meta.Dataset, meta.K, meta.Cores, meta.GoVersion)
	if err := checkpoint.AtomicWrite(filepath.Join(out, "bench.png"), func(w io.Writer) error {
		return figure.DrawTradeoff(w, title, fmt.Sprintf("trustworthiness@%d", meta.K), pts)
	}); err != nil {
		return false, fmt.Errorf("writing bench.png: %w", err)
	}
	return true, nil
}

// WriteRunsCSV writes every run of a sweep (bench.WriteRunsCSV) to path,
// atomically.
func WriteRunsCSV(path string, meta bench.Meta, keys []string, rs []bench.Result) error {
	if err := checkpoint.AtomicWrite(path, func(w io.Writer) error { return bench.WriteRunsCSV(w, meta, keys, rs) }); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	return nil
}

// AffinityKey names what the affinities P of a run of s on rows rows
// depend on: the table and its columns, the rows, the perplexity (or the
// uniform neighbours), the metric and the neighbour search (resolved for
// rows), and for an approximate search the seed and the recall goal. Runs
// with equal keys share P (bit for bit, but for the hnsw search, whose
// start does not repeat), so their KL divergences measure the fit to the
// same target.
func AffinityKey(s Settings, rows int) string {
	method := s.Neighbours
	if m, err := s.neighbourMethod(rows); err == nil {
		method = m.String()
	}
	key := fmt.Sprintf("%s|%q|%v|%d|%d|%s|%s|%s", s.Input, s.Features, s.SkipInvalid, s.Reduce, rows, s.AffinityNote(), s.Metric, method)
	if method != "exact" {
		key += fmt.Sprintf("|%d|%g", s.Seed, s.RecallGoal)
	}
	return key
}

// ScoreK is the neighbourhood size of the report's trustworthiness,
// continuity and preservation.
const ScoreK = scoreK
