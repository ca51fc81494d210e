package main

import (
	"context"
	"fmt"
	"io"
	"math"
	"path/filepath"
	"runtime"
	"slices"
	"strconv"
	"strings"
	"time"

	"nightjar"
	"nightjar/bench"
)

// runPredict runs every setting on a ladder of random subsamples of the
// table and predicts each one's run on the whole table.
func runPredict(ctx context.Context, o *benchOptions, stdout io.Writer) error {
	ps, err := ladderPercents(o.ladder)
	if err != nil {
		return err
	}
	if o.data == "demo" && o.rows > 0 {
		if _, err := ladderSizes(ps, o.rows, o.s); err != nil {
			return err // before the table is written
		}
	}
	full, err := nightjar.PrepareDataset(o.data, o.rows, o.s, o.r.Threads, o.out, o.u)
	if err != nil {
		return err
	}
	sizes, err := ladderSizes(ps, full.Rows, o.s)
	if err != nil {
		return err
	}
	subs, err := nightjar.Subsamples(full, sizes, o.s, o.sampleSeed, o.r.Threads, o.out)
	if err != nil {
		return err
	}
	combos := o.onTable(full)
	// Runs on subsamples use the methods that "auto" picks for the whole table.
	resolved := make([]combo, len(combos))
	for i, c := range combos {
		if resolved[i].s, err = nightjar.ResolveFor(c.s, full.Rows, c.r.Threads); err != nil {
			return fmt.Errorf("bench: setting %s: %w", c.name, err)
		}
		resolved[i].name, resolved[i].values, resolved[i].r = c.name, c.values, c.r
	}
	meta := o.meta()
	meta.Rows = full.Rows
	if w := shedMemory(); w != "" {
		meta.Notes = append(meta.Notes, w)
		o.u.Warn(strings.TrimPrefix(w, "Warning: "))
	}
	o.warm(onSubsample(resolved[0], subs[0]), subs[0].Rows)
	ladder := make([][]nightjar.LadderRun, len(combos))
	var results []bench.Result
	var ran []int
	for i, sub := range subs {
		if note := o.overBudget(combos, ladder, full.Rows, sub.Rows); note != "" {
			meta.Notes = append(meta.Notes, note)
			o.u.Warn(note)
			break
		}
		rs, err := o.rung(ctx, resolved, sub, i, len(subs), ladder)
		results = append(results, rs...)
		if err != nil {
			return err
		}
		ran = append(ran, sub.Rows)
	}
	pf := &nightjar.PredictionFile{Tool: "nightjar", Version: nightjar.Version, Made: time.Now().UTC().Format(time.RFC3339), Command: o.argsAsString,
		Table: full.Path, Rows: full.Rows, Ladder: ran, Cores: runtime.NumCPU(), Threads: o.r.Threads}
	var values [][]string
	for i, c := range combos {
		sp, err := nightjar.PredictSetting(c.name, c.s, full.Rows, c.r.Threads, ladder[i])
		if err != nil {
			return err
		}
		pf.Settings = append(pf.Settings, sp)
		values = append(values, c.values)
	}
	meta.LoadEnd = loadNow()
	meta.Notes = append(meta.Notes, bench.LoadNotes(meta.LoadStart, meta.LoadEnd, o.r.Threads, maxOther(results))...)
	pf.Seconds = math.Round(time.Since(o.start).Seconds()*10) / 10
	pf.Load = [2]float64{zeroNaN(meta.LoadStart), zeroNaN(meta.LoadEnd)}
	return o.reportPrediction(stdout, pf, meta, values, results)
}

// ladderPercents parses --ladder: percentages above 0 and below 100, at
// least as many as a checked fit needs.
func ladderPercents(spec string) ([]float64, error) {
	var ps []float64
	for _, f := range strings.Split(spec, ",") {
		p, err := strconv.ParseFloat(strings.TrimSpace(f), 64)
		if err != nil || !(p > 0 && p < 100) {
			return nil, usagef("bench: --ladder takes percentages above 0 and below 100, got %q", f)
		}
		ps = append(ps, p)
	}
	if len(ps) < bench.DefaultLimits.MinSizes {
		return nil, usagef("bench: --ladder needs %d sizes or more (a law with two parameters needs a third size to be checked), got %d", bench.DefaultLimits.MinSizes, len(ps))
	}
	return ps, nil
}

// ladderSizes turns the --ladder percentages into row counts, smallest
// first, each large enough for the affinities (Settings.LeastRows).
func ladderSizes(ps []float64, rows int, s nightjar.Settings) ([]int, error) {
	least := max(s.LeastRows()+1, 100)
	var sizes []int
	for _, p := range ps {
		n := int(math.Round(p / 100 * float64(rows)))
		if n < least {
			return nil, usagef("bench: --ladder %g%% of %d rows is %d rows; %s needs at least %d (use %.2g%% or more)", p, rows, n, s.AffinityNote(), least, 100*float64(least)/float64(rows))
		}
		if slices.Contains(sizes, n) {
			return nil, usagef("bench: --ladder has two sizes of %d rows", n)
		}
		sizes = append(sizes, n)
	}
	slices.Sort(sizes)
	return sizes, nil
}

// onSubsample returns c with the subsample sub as its input.
func onSubsample(c combo, sub nightjar.Dataset) combo {
	c.s.Input = sub.Path
	return c
}

// overBudget says why the ladder stops before the subsample of n rows, or
// "": with a budget, when the runs at n (estimated from the runs so far)
// would take the bench past it.
func (o *benchOptions) overBudget(combos []combo, ladder [][]nightjar.LadderRun, rows, n int) string {
	if o.budget <= 0 {
		return ""
	}
	var need float64
	for i, c := range combos {
		est := nightjar.EstimateRun(c.s, rows, c.r.Threads, ladder[i], n)
		if math.IsNaN(est) {
			return "" // nothing to estimate from yet
		}
		need += est * float64(o.repeat)
	}
	left := o.budget.Seconds() - time.Since(o.start).Seconds()
	if need <= left {
		return ""
	}
	return fmt.Sprintf("Warning: the ladder stopped before %s rows: its runs would take about %s and the budget (--budget %v) leaves %s.",
		nightjar.Thousands(n), nightjar.Duration(need), o.budget, nightjar.Duration(math.Max(left, 0)))
}

// rung runs every setting on one subsample, in rounds, and appends each
// run to its setting's ladder.
func (o *benchOptions) rung(ctx context.Context, combos []combo, sub nightjar.Dataset, i, of int, ladder [][]nightjar.LadderRun) ([]bench.Result, error) {
	slots := bench.RunOrder(len(combos), o.repeat, o.order == "shuffled", o.orderSeed+uint64(i))
	o.u.Phase(fmt.Sprintf("bench: %s rows (%d of %d)", nightjar.Thousands(sub.Rows), i+1, of), int64(len(slots)))
	defer o.u.Done()
	var out []bench.Result
	for k, sl := range slots {
		if ctx.Err() != nil {
			return out, usagef("bench: interrupted on the subsample of %d rows", sub.Rows)
		}
		c := onSubsample(combos[sl.Setting], sub)
		o.u.Detail(fmt.Sprintf("bench: %s on %s rows (run %d of %d)", c.name, nightjar.Thousands(sub.Rows), sl.Repeat, o.repeat))
		res, rep := benchRun(o.self, o.runDir(fmt.Sprintf("%s rows-%d", c.name, sub.Rows), sl.Repeat), c)
		res.Name, res.Repeat, res.Order = c.name, sl.Repeat, k+1
		res.Values = append([]string{strconv.Itoa(sub.Rows)}, res.Values...)
		if res.Err != "" {
			o.u.Warn(fmt.Sprintf("bench %s on %d rows failed: %s", c.name, sub.Rows, res.Err))
		}
		lr := nightjar.LadderRun{Report: rep, Seconds: res.Seconds, Peak: res.PeakMem}
		if !math.IsNaN(res.OtherCPU) {
			lr.Busy = res.OtherCPU / float64(runtime.NumCPU())
		}
		ladder[sl.Setting] = append(ladder[sl.Setting], lr)
		out = append(out, res)
		o.u.Progress(int64(k+1), int64(len(slots)))
	}
	return out, nil
}

// reportPrediction writes the reports and prints each setting's
// prediction.
func (o *benchOptions) reportPrediction(stdout io.Writer, pf *nightjar.PredictionFile, meta bench.Meta, values [][]string, results []bench.Result) error {
	for _, n := range meta.Notes {
		if strings.HasPrefix(n, "Warning: the load") || strings.HasPrefix(n, "Warning: the machine") || strings.HasPrefix(n, "Warning: other") {
			o.u.Warn(strings.TrimPrefix(n, "Warning: "))
		}
	}
	chart, err := nightjar.WritePredictionReports(o.out, pf, meta, o.keys, values)
	if err != nil {
		return err
	}
	if err := nightjar.WriteRunsCSV(filepath.Join(o.out, "bench-runs.csv"), meta, append([]string{"subsample_rows"}, o.keys...), results); err != nil {
		return err
	}
	fmt.Fprintf(stdout, "bench: prediction for %s rows of %s from subsamples of %s rows (made in %s):\n",
		nightjar.Thousands(pf.Rows), o.data, ladderText(pf.Ladder), nightjar.Duration(pf.Seconds))
	busy := maxOther(results)
	for _, sp := range pf.Settings {
		line := predictionLine(sp)
		if sp.Seconds.Refused != "" && busy > 0.25 {
			line += fmt.Sprintf(" (other processes used up to %.1f cores during the runs: rerun on a quieter machine, or with --repeat 3 so that the fit sees the noise)", busy)
		}
		fmt.Fprintf(stdout, "  %s: %s\n", sp.Name, line)
	}
	files := "predict.md, predict.csv, predict.png, prediction.json, bench-runs.csv"
	if !chart {
		files = "predict.md, predict.csv, prediction.json, bench-runs.csv; no predict.png: no setting has both a prediction and a trustworthiness score"
	}
	fmt.Fprintf(stdout, "bench: reports in %s (%s)\nbench: to check a prediction against the real run, add --prediction %s to embed or demo: its report.json will hold both\n",
		o.out, files, filepath.Join(o.out, nightjar.FilePrediction))
	return nil
}

// predictionLine is a setting's prediction in one line.
func predictionLine(sp nightjar.SettingPrediction) string {
	var b strings.Builder
	if r := sp.Seconds; r.Refused != "" {
		b.WriteString("no time predicted: " + r.Refused)
	} else {
		fmt.Fprintf(&b, "%s (%s – %s)", nightjar.Duration(r.Value), nightjar.Duration(r.Low), nightjar.Duration(r.High))
	}
	if r := sp.PeakMemoryBytes; r.Refused != "" {
		b.WriteString("; no memory predicted: " + r.Refused)
	} else {
		fmt.Fprintf(&b, ", peak memory %s (%s – %s)", nightjar.Bytes(r.Value), nightjar.Bytes(r.Low), nightjar.Bytes(r.High))
	}
	var ts []string
	for _, q := range sp.Quality {
		if q.Trustworthiness != nil {
			ts = append(ts, fmt.Sprintf("%.4f", *q.Trustworthiness))
		}
	}
	if len(ts) > 0 {
		fmt.Fprintf(&b, "; trustworthiness on the subsamples %s", strings.Join(ts, ", "))
		if sp.TrustTrend != nil {
			fmt.Fprintf(&b, " (%+.4f per tenfold rows)", *sp.TrustTrend)
		}
	}
	return b.String()
}

func ladderText(ns []int) string {
	var parts []string
	for _, n := range ns {
		parts = append(parts, nightjar.Thousands(n))
	}
	return strings.Join(parts, ", ")
}

func zeroNaN(v float64) float64 {
	if math.IsNaN(v) {
		return 0
	}
	return v
}
