package main

import (
	"context"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"slices"
	"strconv"
	"strings"
	"time"

	"nightjar"
	"nightjar/bench"
)

const benchExample = "nightjar bench --data mnist --rows 20000 --vary theta=0.25,0.5,1 --repeat 3 --out bench-theta\n" +
	"  nightjar bench --data big.parquet --predict --vary perplexity=30,50 --budget 20m --out before-the-night"

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

// benchOptions are the options of a sweep beyond the settings.
type benchOptions struct {
	data, out    string
	rows         int
	scale        string
	repeat       int
	warmup       int
	order        string
	orderSeed    uint64
	predict      bool
	ladder       string
	budget       time.Duration
	sampleSeed   uint64
	self         string // the nightjar binary the runs use
	s            nightjar.Settings
	r            nightjar.Runtime
	u            *ui
	keys         []string
	combos       []combo
	start        time.Time
	loadStart    float64
	argsAsString string
}

// combo is one setting of a sweep: its name, the varied values, and the
// settings and runtime options they make.
type combo struct {
	name   string
	values []string
	s      nightjar.Settings
	r      nightjar.Runtime
}

func runBench(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	o := benchOptions{s: nightjar.DefaultSettings(), r: defaultRuntime()}
	var quiet bool
	var vary varyFlag
	fs := newFlags("bench", "run a sweep of settings over a dataset and record wall time, peak memory and quality scores (bench.csv, bench.md, bench.png), or predict a run on the whole table from runs on subsamples (--predict)", benchExample, stderr)
	fs.StringVar(&o.data, "data", "demo", "dataset: demo (the invented survey), mnist (70,000 digits from the GoMNIST module) or a table file")
	fs.IntVar(&o.rows, "rows", 0, "rows to use (0 = 20,000 for demo, all for mnist and files); with --predict, the size of the table predicted for")
	fs.StringVar(&o.scale, "scale", "", "comma-separated row counts: run the same settings at each size (demo or mnist)")
	fs.StringVar(&o.out, "out", "", "folder for the runs and the reports (default: a new ./nightjar-bench…)")
	fs.Var(&vary, "vary", "`KEY=V1,V2,…`: a setting to sweep (repeatable; runs every combination); keys: "+strings.Join(varyKeys(), ", "))
	fs.IntVar(&o.repeat, "repeat", 1, "runs of each setting; the reports give medians and the fastest and slowest run")
	fs.IntVar(&o.warmup, "warmup", 1, "untimed short runs (10 iterations, no scores) of the first setting before the timed ones (0 = none), so that no setting pays for cold caches")
	fs.StringVar(&o.order, "order", "interleaved", "order of the runs: interleaved (A B C A B C …) or shuffled (each round in a random order drawn from --order-seed)")
	fs.Uint64Var(&o.orderSeed, "order-seed", 1, "seed of the shuffled order")
	fs.BoolVar(&o.predict, "predict", false, "predict the wall time and peak memory of each setting on the whole table from runs on random subsamples (--ladder), with the quality on each")
	fs.StringVar(&o.ladder, "ladder", "1,3,10", "with --predict: the subsamples, in percent of the table's rows")
	fs.DurationVar(&o.budget, "budget", 0, "with --predict: stop climbing the ladder before a size whose runs would take the bench past this time (e.g. 30m; 0 = no limit)")
	fs.Uint64Var(&o.sampleSeed, "sample-seed", 1, "with --predict: seed of the random subsamples")
	addSettings(fs, &o.s, "input", "skip-invalid", "reduce")
	addRuntime(fs, &o.r, &quiet)
	if _, err := parseFlags(fs, args, 0); err != nil {
		return err
	}
	if err := o.check(); err != nil {
		return err
	}
	o.s.Input = "-"
	if err := o.s.Validate(); err != nil {
		return err
	}
	var err error
	if o.keys, o.combos, err = makeCombos(vary, o.s, o.r); err != nil {
		return err
	}
	if o.out == "" {
		o.out = freeDir("nightjar-bench")
	}
	if err := os.MkdirAll(o.out, 0o755); err != nil {
		return fmt.Errorf("creating %s: %w", o.out, err)
	}
	if o.self, err = os.Executable(); err != nil {
		return fmt.Errorf("finding the nightjar binary: %w", err)
	}
	o.u = newUI(stderr, quiet)
	o.argsAsString = "nightjar bench " + strings.Join(args, " ")
	o.start = time.Now()
	o.loadStart = loadNow()
	if o.predict {
		return runPredict(ctx, &o, stdout)
	}
	return runSweep(ctx, &o, stdout)
}

// check refuses options that do not go together.
func (o *benchOptions) check() error {
	switch {
	case o.repeat < 1:
		return usagef("bench: --repeat must be at least 1, got %d", o.repeat)
	case o.warmup < 0:
		return usagef("bench: --warmup must be 0 or more, got %d", o.warmup)
	case o.order != "interleaved" && o.order != "shuffled":
		return usagef("bench: --order must be interleaved or shuffled, got %q", o.order)
	case o.r.Prediction != "":
		return usagef("bench: --prediction is an option of embed and demo (it names the prediction a run is checked against); bench --predict makes one")
	case o.predict && o.scale != "":
		return usagef("bench: --predict runs its own sizes (--ladder); leave out --scale")
	case !o.predict && (o.budget != 0 || o.ladder != "1,3,10"):
		return usagef("bench: --ladder and --budget go with --predict")
	case o.budget < 0:
		return usagef("bench: --budget must be 0 or more, got %v", o.budget)
	}
	return nil
}

// runSweep runs every setting at every size and writes bench.csv,
// bench-runs.csv, bench.md and bench.png.
func runSweep(ctx context.Context, o *benchOptions, stdout io.Writer) error {
	sizes := []int{o.rows}
	if o.scale != "" {
		sizes = nil
		for _, f := range strings.Split(o.scale, ",") {
			n, err := strconv.Atoi(strings.TrimSpace(f))
			if err != nil || n < 10 {
				return usagef("bench: --scale takes row counts of at least 10, got %q", f)
			}
			sizes = append(sizes, n)
		}
	}
	meta := o.meta()
	if len(sizes) > 1 {
		o.keys = append([]string{"rows"}, o.keys...)
	}
	results, err := sweep(ctx, o, sizes, &meta)
	if err != nil {
		return err
	}
	for _, res := range bench.Summarise(results) {
		if res.Runs == 0 {
			o.u.Warn(fmt.Sprintf("bench %s failed: %s", res.Name, res.Err))
			continue
		}
		o.u.Note(fmt.Sprintf("bench %s: %.1fs (median of %d; %.1f–%.1f), peak %.0f MiB, trustworthiness %.4f", res.Name, res.Seconds, res.Runs,
			res.SecondsMin, res.SecondsMax, float64(res.PeakMem)/(1<<20), res.Trust))
	}
	if len(sizes) > 1 {
		meta.Rows = 0
	}
	meta.LoadEnd = loadNow()
	meta.Notes = append(meta.Notes, bench.LoadNotes(meta.LoadStart, meta.LoadEnd, o.r.Threads, maxOther(results))...)
	for _, n := range meta.Notes {
		if strings.HasPrefix(n, "Warning: ") {
			o.u.Warn(strings.TrimPrefix(n, "Warning: "))
		}
	}
	chart, err := nightjar.WriteSweepReports(o.out, meta, o.keys, results)
	if err != nil {
		return err
	}
	files := "bench.csv, bench-runs.csv, bench.md, bench.png"
	if !chart {
		files = "bench.csv, bench-runs.csv, bench.md; no bench.png: no run has a trustworthiness score (--score-sample 0?)"
	}
	fmt.Fprintf(stdout, "bench: %d runs; reports in %s (%s)\n", len(results), o.out, files)
	return nil
}

// meta is the header of the reports.
func (o *benchOptions) meta() bench.Meta {
	return bench.Meta{Dataset: o.data, Cores: runtime.NumCPU(), GoVersion: runtime.Version(), K: nightjar.ScoreK,
		Date: time.Now().UTC().Format("2006-01-02"), Command: o.argsAsString, Repeats: o.repeat, Order: o.order,
		Warmup: o.warmup, LoadStart: o.loadStart, LoadEnd: math.NaN()}
}

// sweep runs every setting at every size, each as a child process: after
// the warm-up, in rounds that run every setting once (interleaved or
// shuffled), and returns the results in the order they ran.
func sweep(ctx context.Context, o *benchOptions, sizes []int, meta *bench.Meta) ([]bench.Result, error) {
	var results []bench.Result
	slots := bench.RunOrder(len(o.combos), o.repeat, o.order == "shuffled", o.orderSeed)
	total := len(slots) * len(sizes)
	for si, n := range sizes {
		ds, err := nightjar.PrepareDataset(o.data, n, o.s, o.r.Threads, o.out, o.u)
		if err != nil {
			return nil, err
		}
		meta.Rows = ds.Rows
		combos := o.onTable(ds)
		if w := shedMemory(); w != "" && !slices.Contains(meta.Notes, w) {
			meta.Notes = append(meta.Notes, w)
			o.u.Warn(strings.TrimPrefix(w, "Warning: "))
		}
		if si == 0 {
			o.warm(combos[0], ds.Rows)
		}
		o.u.Phase("bench", int64(total))
		for _, sl := range slots {
			if ctx.Err() != nil {
				o.u.Done()
				return nil, usagef("bench: interrupted after %d of %d runs", len(results), total)
			}
			c := combos[sl.Setting]
			name := c.name
			values := c.values
			if len(sizes) > 1 {
				name, values = fmt.Sprintf("rows=%d %s", n, name), append([]string{strconv.Itoa(n)}, values...)
				name = strings.TrimSuffix(name, " defaults")
			}
			o.u.Progress(int64(len(results)), int64(total))
			o.u.Detail(fmt.Sprintf("bench: %s (%d rows, run %d of %d)", name, ds.Rows, sl.Repeat, o.repeat))
			res, _ := benchRun(o.self, o.runDir(name, sl.Repeat), c)
			res.Name, res.Values, res.Repeat, res.Order = name, values, sl.Repeat, len(results)+1
			res.PKey = nightjar.AffinityKey(c.s, ds.Rows)
			results = append(results, res)
			o.u.Progress(int64(len(results)), int64(total))
		}
		o.u.Done()
	}
	return results, nil
}

// warm runs the warm-up: untimed short runs of c (10 iterations, no
// scores), whose results are dropped.
func (o *benchOptions) warm(c combo, rows int) {
	c.s.Iterations = min(c.s.Iterations, 10)
	c.s.EarlyIterations = min(c.s.EarlyIterations, c.s.Iterations)
	c.r.ScoreSample = 0
	for i := 1; i <= o.warmup; i++ {
		o.u.Note(fmt.Sprintf("bench: warm-up run %d of %d (%s, %d rows, not timed)", i, o.warmup, c.name, rows))
		res, _ := benchRun(o.self, filepath.Join(o.out, "runs", fmt.Sprintf("warm-up-%d", i)), c)
		if res.Err != "" {
			o.u.Warn("the warm-up run failed: " + res.Err)
		}
	}
}

// onTable returns the settings with the table ds as their input.
func (o *benchOptions) onTable(ds nightjar.Dataset) []combo {
	out := make([]combo, len(o.combos))
	for i, c := range o.combos {
		c.s.Input, c.s.ID, c.s.Label = ds.Path, ds.ID, ds.Label
		if o.data == "demo" || o.data == "mnist" {
			c.s.Features = nil
		}
		out[i] = c
	}
	return out
}

// runDir is the run directory of a setting's repeat.
func (o *benchOptions) runDir(name string, repeat int) string {
	base := strings.NewReplacer(" ", "_", "=", "-", "/", "-").Replace(name)
	if o.repeat > 1 {
		base += "-run" + strconv.Itoa(repeat)
	}
	return filepath.Join(o.out, "runs", base)
}

// makeCombos returns the varied keys and every combination of their
// values, each applied to s and r and checked.
func makeCombos(vary varyFlag, s nightjar.Settings, r nightjar.Runtime) ([]string, []combo, error) {
	keys := []string{}
	combos := []combo{{s: s, r: r}}
	for _, v := range vary {
		keys = append(keys, v.key)
		var next []combo
		for _, c := range combos {
			for _, val := range v.vals {
				val = strings.TrimSpace(val)
				n := c
				n.values = append(append([]string{}, c.values...), val)
				n.s.Features = slices.Clone(c.s.Features)
				var err error
				if v.key == "threads" {
					err = n.r.Set(v.key, val)
				} else {
					err = n.s.Set(v.key, val)
				}
				if err != nil {
					return nil, nil, usagef("bench: --vary %s=%s: %v", v.key, val, err)
				}
				next = append(next, n)
			}
		}
		combos = next
	}
	for i := range combos {
		c := &combos[i]
		var parts []string
		for j, k := range keys {
			parts = append(parts, k+"="+c.values[j])
		}
		c.name = strings.Join(parts, " ")
		if c.name == "" {
			c.name = "defaults"
		}
		if err := c.s.Validate(); err != nil {
			return nil, nil, fmt.Errorf("bench: setting %s: %w", c.name, err)
		}
	}
	return keys, combos, nil
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
