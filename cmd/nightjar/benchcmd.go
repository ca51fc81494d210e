package main

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"slices"
	"strconv"
	"strings"
	"time"

	"nightjar"
	"nightjar/bench"
)

const benchExample = "nightjar bench --data mnist --rows 20000 --vary theta=0.25,0.5,1 --out bench-theta"

type varyFlag []struct {
	key  string
	vals []string
}

func (v *varyFlag) String() string { return "" }
func (v *varyFlag) Set(s string) error {
	key, list, ok := strings.Cut(s, "=")
	if !ok || list == "" {
		return fmt.Errorf("want KEY=V1,V2,…, got %q", s)
	}
	if keys := varyKeys(); !slices.Contains(keys, key) {
		return fmt.Errorf("cannot vary %q; choose from %s", key, strings.Join(keys, ", "))
	}
	*v = append(*v, struct {
		key  string
		vals []string
	}{key, strings.Split(list, ",")})
	return nil
}

func runBench(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	s := nightjar.DefaultSettings()
	r := defaultRuntime()
	var quiet bool
	var vary varyFlag
	fs := newFlags("bench", "run a sweep of settings over a dataset and record wall time, peak memory and quality scores (bench.csv, bench.md, bench.png)", benchExample, stderr)
	data := fs.String("data", "demo", "dataset: demo (the invented survey), mnist (70,000 digits from the GoMNIST module) or a table file")
	rows := fs.Int("rows", 0, "rows to use (0 = 20,000 for demo, all for mnist and files)")
	scale := fs.String("scale", "", "comma-separated row counts: run the same settings at each size (demo or mnist)")
	out := fs.String("out", "", "folder for the runs and the reports (default: a new ./nightjar-bench…)")
	fs.Var(&vary, "vary", "`KEY=V1,V2,…`: a setting to sweep (repeatable; runs every combination); keys: "+strings.Join(varyKeys(), ", "))
	addSettings(fs, &s, "input", "skip-invalid", "reduce")
	addRuntime(fs, &r, &quiet)
	if _, err := parseFlags(fs, args, 0); err != nil {
		return err
	}
	s.Input = "-"
	if err := s.Validate(); err != nil {
		return err
	}
	sizes := []int{*rows}
	if *scale != "" {
		sizes = nil
		for _, f := range strings.Split(*scale, ",") {
			n, err := strconv.Atoi(strings.TrimSpace(f))
			if err != nil || n < 10 {
				return usagef("bench: --scale takes row counts of at least 10, got %q", f)
			}
			sizes = append(sizes, n)
		}
	}
	if *out == "" {
		*out = freeDir("nightjar-bench")
	}
	if err := os.MkdirAll(*out, 0o755); err != nil {
		return fmt.Errorf("creating %s: %w", *out, err)
	}
	self, err := os.Executable()
	if err != nil {
		return fmt.Errorf("finding the nightjar binary: %w", err)
	}
	u := newUI(stderr, quiet)
	keys, combos := sweepCombos(vary, len(sizes) > 1)
	meta := bench.Meta{Dataset: *data, Cores: runtime.NumCPU(), GoVersion: runtime.Version(), K: nightjar.ScoreK,
		Date: time.Now().UTC().Format("2006-01-02"), Command: "nightjar bench " + strings.Join(args, " ")}
	results, err := sweep(ctx, self, *data, *out, sizes, keys, combos, s, r, u, &meta)
	if err != nil {
		return err
	}
	for _, res := range results {
		if res.Err != "" {
			u.Warn(fmt.Sprintf("bench %s failed: %s", res.Name, res.Err))
		} else {
			u.Note(fmt.Sprintf("bench %s: %.1fs, peak %.0f MiB, trustworthiness %.4f, KL %.4f", res.Name, res.Seconds, float64(res.PeakMem)/(1<<20), res.Trust, res.KL))
		}
	}
	if len(sizes) > 1 {
		meta.Rows = 0
	}
	chart, err := nightjar.WriteSweepReports(*out, meta, keys, results)
	if err != nil {
		return err
	}
	files := "bench.csv, bench.md, bench.png"
	if !chart {
		files = "bench.csv, bench.md; no bench.png: no run has a trustworthiness score (--score-sample 0?)"
	}
	fmt.Fprintf(stdout, "bench: %d runs; reports in %s (%s)\n", len(results), *out, files)
	return nil
}

// sweep runs every combination at every size, each as a child process, and
// returns their results in order.
func sweep(ctx context.Context, self, data, out string, sizes []int, keys []string, combos [][]string,
	s nightjar.Settings, r nightjar.Runtime, u *ui, meta *bench.Meta) ([]bench.Result, error) {
	var results []bench.Result
	total := len(combos) * len(sizes)
	step := 0
	for _, n := range sizes {
		ds, err := nightjar.PrepareDataset(data, n, s, r.Threads, out, u)
		if err != nil {
			return nil, err
		}
		s.Input, s.ID, s.Label = ds.Path, ds.ID, ds.Label
		if data == "demo" || data == "mnist" {
			s.Features = nil
		}
		meta.Rows = ds.Rows
		u.Phase("bench", int64(total))
		for _, c := range combos {
			if ctx.Err() != nil {
				u.Done()
				return nil, usagef("bench: interrupted after %d of %d runs", step, total)
			}
			name := comboName(keys, n, len(sizes) > 1, c)
			u.Progress(int64(step), int64(total))
			u.Detail(fmt.Sprintf("bench: %s (%d rows)", name, ds.Rows))
			res := benchRun(self, filepath.Join(out, "runs", strings.NewReplacer(" ", "_", "=", "-").Replace(name)), s, r, keys, n, len(sizes) > 1, c)
			res.Name = name
			results = append(results, res)
			step++
			u.Progress(int64(step), int64(total))
		}
		u.Done()
	}
	return results, nil
}

// sweepCombos returns the keys of a sweep ("rows" first when it runs at
// several sizes) and every combination of the varied values.
func sweepCombos(vary varyFlag, sized bool) ([]string, [][]string) {
	keys := []string{}
	combos := [][]string{{}}
	for _, v := range vary {
		keys = append(keys, v.key)
		var next [][]string
		for _, c := range combos {
			for _, val := range v.vals {
				next = append(next, append(append([]string{}, c...), strings.TrimSpace(val)))
			}
		}
		combos = next
	}
	if sized {
		keys = append([]string{"rows"}, keys...)
	}
	return keys, combos
}

// comboName names one setting of a sweep.
func comboName(keys []string, n int, withRows bool, vals []string) string {
	var parts []string
	i := 0
	for _, k := range keys {
		if k == "rows" && withRows {
			parts = append(parts, "rows="+strconv.Itoa(n))
			continue
		}
		parts = append(parts, k+"="+vals[i])
		i++
	}
	if len(parts) == 0 {
		return "defaults"
	}
	return strings.Join(parts, " ")
}

// benchRun runs one setting as a child process (so its peak memory is its
// own) and reads its report.
func benchRun(self, runDir string, s nightjar.Settings, r nightjar.Runtime, keys []string, n int, withRows bool, vals []string) bench.Result {
	nan := math.NaN()
	res := bench.Result{Values: append([]string{}, vals...), Recall: nan, Trust: nan, Cont: nan, Preserve: nan, LabelAcc: nan, InputAcc: nan, KL: nan, IterSecs: nan, AffSecs: nan, Centroid: nan}
	if withRows {
		res.Values = append([]string{strconv.Itoa(n)}, res.Values...)
	}
	_ = os.RemoveAll(runDir)
	args := []string{"embed", "--input", s.Input, "--run", runDir, "--quiet",
		"--threads", strconv.Itoa(r.Threads), "--score-sample", strconv.Itoa(r.ScoreSample)}
	args = append(args, settingsArgs(s)...)
	i := 0
	for _, k := range keys {
		if k == "rows" && withRows {
			continue
		}
		args = append(args, "--"+k, vals[i])
		i++
	}
	cmd := exec.Command(self, args...)
	var errb bytes.Buffer
	cmd.Stderr = &errb
	start := time.Now()
	err := cmd.Run()
	res.Seconds = time.Since(start).Seconds()
	if err != nil {
		res.Err = strings.TrimSpace(strings.ReplaceAll(errb.String(), "\n", " "))
		if res.Err == "" {
			res.Err = err.Error()
		}
		return res
	}
	rep, err := nightjar.ReadReport(filepath.Join(runDir, nightjar.FileReport))
	if err != nil {
		res.Err = "reading the run's report: " + err.Error()
		return res
	}
	res.Rows, res.KNNSecs, res.OptSecs, res.PeakMem, res.KL = rep.Rows, rep.Neighbours.Seconds, rep.Optimiser.Seconds, rep.PeakMemoryBytes, rep.Optimiser.KL
	res.AffSecs = rep.Affinities.Seconds
	if rep.Optimiser.Iterations > 0 {
		res.IterSecs = rep.Optimiser.Seconds / float64(rep.Optimiser.Iterations)
	}
	if rep.Neighbours.Recall != nil {
		res.Recall = *rep.Neighbours.Recall
	}
	if q := rep.Quality; q != nil {
		res.Trust, res.Cont, res.Preserve, res.KL = q.Trustworthiness, q.Continuity, q.Preservation, q.KL
		if q.LabelAccuracyMap != nil {
			res.LabelAcc, res.InputAcc = *q.LabelAccuracyMap, *q.LabelAccuracyInput
		}
		if q.CentroidRank != nil {
			res.Centroid = *q.CentroidRank
		}
	}
	return res
}

// settingsArgs turns settings back into embed options: every option of
// Settings but the input, as the library names it.
func settingsArgs(s nightjar.Settings) []string {
	var a []string
	for _, o := range nightjar.SettingOptions() {
		if o.Name == "input" {
			continue
		}
		v, _ := s.Get(o.Name)
		if v == "" || (o.Kind == "bool" && v == "false") {
			continue
		}
		if o.Kind == "bool" {
			a = append(a, "--"+o.Name)
			continue
		}
		a = append(a, "--"+o.Name, v)
	}
	return a
}

// varyKeys are the settings a sweep may vary: every option of Settings but
// the ones that choose the table, and the thread count.
func varyKeys() []string {
	var keys []string
	for _, o := range nightjar.SettingOptions() {
		if o.Topic != "input" {
			keys = append(keys, o.Name)
		}
	}
	return append(keys, "threads")
}
