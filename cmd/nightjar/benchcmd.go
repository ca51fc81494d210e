package main

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strconv"
	"strings"
	"time"

	"nightjar/bench"
	"nightjar/bench/figure"
	"nightjar/checkpoint"
	"nightjar/ingest"
)

const benchExample = "nightjar bench --data mnist --rows 20000 --vary theta=0.25,0.5,1 --out bench-theta"

// varyKeys are the settings a sweep may vary: the embed options of the same names.
var varyKeys = []string{"theta", "perplexity", "neighbours", "metric", "recall-goal", "iterations", "early-iterations",
	"exaggeration", "late-exaggeration", "start", "start-rows", "learning-rate", "degrees-of-freedom", "repulsion", "dims", "threads", "seed"}

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
	known := false
	for _, k := range varyKeys {
		known = known || k == key
	}
	if !known {
		return fmt.Errorf("cannot vary %q; choose from %s", key, strings.Join(varyKeys, ", "))
	}
	*v = append(*v, struct {
		key  string
		vals []string
	}{key, strings.Split(list, ",")})
	return nil
}

func runBench(args []string, stdout, stderr io.Writer) error {
	s := defaultSettings()
	var r runtimeOpts
	var vary varyFlag
	fs := newFlags("bench", "run a sweep of settings over a dataset and record wall time, peak memory and quality scores (bench.csv, bench.md, bench.png)", benchExample, stderr)
	data := fs.String("data", "demo", "dataset: demo (the invented survey), mnist (70,000 digits from the GoMNIST module) or a table file")
	rows := fs.Int("rows", 0, "rows to use (0 = 20,000 for demo, all for mnist and files)")
	scale := fs.String("scale", "", "comma-separated row counts: run the same settings at each size (demo or mnist)")
	out := fs.String("out", "", "folder for the runs and the reports (default: a new ./nightjar-bench…)")
	fs.Var(&vary, "vary", "`KEY=V1,V2,…`: a setting to sweep (repeatable; runs every combination); keys: "+strings.Join(varyKeys, ", "))
	var features listFlag
	fs.StringVar(&s.ID, "id", "", "id column of a table file")
	fs.StringVar(&s.Label, "label", "", "label column of a table file")
	fs.Var(&features, "features", "feature columns of a table file: a `LIST` of names and glob patterns")
	addSettingsFlags(fs, &s)
	addRuntimeFlags(fs, &r)
	if _, err := parseFlags(fs, args, 0); err != nil {
		return err
	}
	s.Features = features
	if err := s.check(); err != nil {
		return err
	}
	if err := r.check(); err != nil {
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
	u := &ui{w: stderr, quiet: r.Quiet}

	// The sweep: every combination of the varied settings, at every size.
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
	if len(sizes) > 1 {
		keys = append([]string{"rows"}, keys...)
	}
	var results []bench.Result
	meta := bench.Meta{Dataset: *data, Cores: runtime.NumCPU(), GoVersion: runtime.Version(), K: scoreK,
		Date: time.Now().UTC().Format("2006-01-02"), Command: "nightjar bench " + strings.Join(args, " ")}
	total := len(combos) * len(sizes)
	step := 0
	for _, n := range sizes {
		input, tab, err := benchData(*data, n, *out, &s, u)
		if err != nil {
			return err
		}
		meta.Rows = tab
		bar := u.phase("bench", int64(total))
		for _, c := range combos {
			name := comboName(keys, n, len(sizes) > 1, c)
			bar(int64(step), int64(total))
			u.describe(fmt.Sprintf("bench: %s (%d rows)", name, tab))
			res := benchRun(self, input, filepath.Join(*out, "runs", strings.NewReplacer(" ", "_", "=", "-").Replace(name)), s, r, keys, n, len(sizes) > 1, c)
			res.Name = name
			results = append(results, res)
			step++
			bar(int64(step), int64(total))
		}
		u.done()
	}
	for _, res := range results {
		if res.Err != "" {
			u.warn("bench %s failed: %s", res.Name, res.Err)
		} else {
			u.note("bench %s: %.1fs, peak %.0f MiB, trustworthiness %.4f, KL %.4f", res.Name, res.Seconds, float64(res.PeakMem)/(1<<20), res.Trust, res.KL)
		}
	}
	if len(sizes) > 1 {
		meta.Rows = 0
	}
	chart, err := writeBenchReports(*out, meta, keys, results)
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

// benchData writes the dataset of n rows to a Parquet file in out (demo,
// mnist) or returns the table file itself, with its row count.
func benchData(data string, n int, out string, s *settings, u *ui) (string, int, error) {
	var t *ingest.Table
	var err error
	switch data {
	case "demo":
		if n <= 0 {
			n = 20000
		}
		t = bench.Demo(n, s.Seed)
	case "mnist":
		dir, err := bench.MNISTDir()
		if err != nil {
			return "", 0, err
		}
		if t, err = bench.MNIST(dir, n); err != nil {
			return "", 0, err
		}
	default:
		abs, err := filepath.Abs(data)
		if err != nil {
			return "", 0, err
		}
		s.Input = abs
		probe, _, err := readTable(*s, nil)
		if err != nil {
			return "", 0, err
		}
		return abs, probe.N, nil
	}
	path := filepath.Join(out, fmt.Sprintf("data-%s-%d.parquet", data, t.N))
	if _, err = os.Stat(path); err != nil {
		u.note("bench: writing %d rows of %s to %s", t.N, data, path)
		if err := checkpoint.AtomicWrite(path, func(w io.Writer) error { return ingest.WriteTable(w, t) }); err != nil {
			return "", 0, fmt.Errorf("writing %s: %w", path, err)
		}
	}
	s.ID, s.Label, s.Features = t.ID.Name, "", nil
	if t.Label != nil {
		s.Label = t.Label.Name
	}
	return path, t.N, nil
}

// benchRun runs one setting as a child process (so its peak memory is its
// own) and reads its report.
func benchRun(self, input, runDir string, s settings, r runtimeOpts, keys []string, n int, withRows bool, vals []string) bench.Result {
	nan := math.NaN()
	res := bench.Result{Values: append([]string{}, vals...), Recall: nan, Trust: nan, Cont: nan, Preserve: nan, LabelAcc: nan, InputAcc: nan, KL: nan, IterSecs: nan, AffSecs: nan, Centroid: nan}
	if withRows {
		res.Values = append([]string{strconv.Itoa(n)}, res.Values...)
	}
	_ = os.RemoveAll(runDir)
	args := []string{"embed", "--input", input, "--run", runDir, "--quiet",
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
	b, err := os.ReadFile(filepath.Join(runDir, fileReport))
	var rep report
	if err == nil {
		err = json.Unmarshal(b, &rep)
	}
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

// settingsArgs turns settings back into embed options.
func settingsArgs(s settings) []string {
	f := func(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }
	a := []string{"--dims", strconv.Itoa(s.Dims), "--perplexity", f(s.Perplexity), "--neighbours", s.Neighbours,
		"--metric", s.Metric, "--check-recall", strconv.Itoa(s.CheckRecall), "--recall-goal", f(s.RecallGoal), "--iterations", strconv.Itoa(s.Iterations),
		"--early-iterations", strconv.Itoa(s.EarlyIterations), "--exaggeration", f(s.Exaggeration),
		"--late-exaggeration", f(s.LateExaggeration), "--start", s.Start, "--start-rows", strconv.Itoa(s.StartRows),
		"--learning-rate", f(s.LearningRate), "--momentum-early", f(s.MomentumEarly), "--momentum", f(s.MomentumLate),
		"--degrees-of-freedom", f(s.Dof), "--theta", f(s.Theta), "--repulsion", s.Repulsion, "--seed", strconv.FormatUint(s.Seed, 10)}
	if s.ID != "" {
		a = append(a, "--id", s.ID)
	}
	if s.Label != "" {
		a = append(a, "--label", s.Label)
	}
	if len(s.Features) > 0 {
		a = append(a, "--features", strings.Join(s.Features, ","))
	}
	if s.SkipInvalid {
		a = append(a, "--skip-invalid")
	}
	if s.Reduce > 0 {
		a = append(a, "--reduce", strconv.Itoa(s.Reduce))
	}
	return a
}

// writeBenchReports writes bench.csv, bench.md and bench.png into out, and
// reports whether it drew bench.png: it does not when no run has both a time
// and a trustworthiness score (runs with --score-sample 0, or all failed), and
// then removes any bench.png left by an earlier sweep in out.
func writeBenchReports(out string, meta bench.Meta, keys []string, rs []bench.Result) (bool, error) {
	if err := checkpoint.AtomicWrite(filepath.Join(out, "bench.csv"), func(w io.Writer) error { return bench.WriteCSV(w, meta, keys, rs) }); err != nil {
		return false, fmt.Errorf("writing bench.csv: %w", err)
	}
	if err := checkpoint.AtomicWrite(filepath.Join(out, "bench.md"), func(w io.Writer) error { return bench.WriteMarkdown(w, meta, keys, rs) }); err != nil {
		return false, fmt.Errorf("writing bench.md: %w", err)
	}
	var pts []figure.TradeoffPoint
	drawable := false
	for _, r := range rs {
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
