package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"runtime"
	"strings"

	"nightjar/gradient"
	"nightjar/knn"
)

// errHelp reports that --help was asked for and printed.
var errHelp = errors.New("help shown")

// settings is everything that shapes a run's result. It is stored in the
// manifest, so a resumed run uses exactly the settings it started with.
// Threads, quiet and checkpoint cadence do not change the result and are kept
// apart (see runtimeOpts).
type settings struct {
	Input       string   `json:"input"`
	ID          string   `json:"id,omitempty"`
	Label       string   `json:"label,omitempty"`
	Features    []string `json:"features,omitempty"`
	SkipInvalid bool     `json:"skip_invalid"`
	Reduce      int      `json:"reduce,omitempty"`

	Dims        int     `json:"dims"`
	Perplexity  float64 `json:"perplexity"`
	Neighbours  string  `json:"neighbours"`
	Metric      string  `json:"metric"`
	CheckRecall int     `json:"check_recall"`
	RecallGoal  float64 `json:"recall_goal"`

	Iterations      int     `json:"iterations"`
	EarlyIterations int     `json:"early_iterations"`
	Exaggeration    float64 `json:"exaggeration"`
	// LateExaggeration and the start: absent from manifests written before
	// they existed; 0 and "" then mean 1 and "pca".
	LateExaggeration float64 `json:"late_exaggeration"`
	Start            string  `json:"start"`
	StartRows        int     `json:"start_rows"`
	LearningRate     float64 `json:"learning_rate"`
	MomentumEarly    float64 `json:"momentum_early"`
	MomentumLate     float64 `json:"momentum_late"`
	Dof              float64 `json:"degrees_of_freedom"`
	Theta            float64 `json:"theta"`
	Repulsion        string  `json:"repulsion"`
	Seed             uint64  `json:"seed"`
}

// runtimeOpts do not change the result.
type runtimeOpts struct {
	Threads           int
	Quiet             bool
	CheckpointEvery   int
	CheckpointMinutes float64
	ScoreSample       int
	force             bool // resume only: accept a changed input
}

func defaultSettings() settings {
	// Defaults are the published practice listed in DESIGN.md: perplexity 30 and
	// early exaggeration 12 for 250 iterations with momentum 0.5 then 0.8
	// (van der Maaten & Hinton 2008; van der Maaten 2014), 750 iterations after it,
	// θ = 0.5 (van der Maaten 2014), Cauchy kernel (degrees of freedom 1).
	return settings{
		Dims: 2, Perplexity: 30, Neighbours: "auto", Metric: "euclidean", CheckRecall: 1000,
		RecallGoal: 0.99,
		Iterations: 1000, EarlyIterations: 250, Exaggeration: 12, LateExaggeration: 1,
		Start: "pca", StartRows: 25000,
		MomentumEarly: 0.5, MomentumLate: 0.8, Dof: 1, Theta: 0.5,
		Repulsion: "auto", Seed: 1,
	}
}

// listFlag collects comma-separated values, repeatable.
type listFlag []string

func (l *listFlag) String() string { return strings.Join(*l, ",") }
func (l *listFlag) Set(v string) error {
	for _, s := range strings.Split(v, ",") {
		if s = strings.TrimSpace(s); s != "" {
			*l = append(*l, s)
		}
	}
	return nil
}

// newFlags makes a flag set whose --help prints a summary, an example and the options.
func newFlags(name, summary, example string, stderr io.Writer) *flag.FlagSet {
	fs := flag.NewFlagSet(name, flag.ContinueOnError)
	fs.SetOutput(stderr)
	fs.Usage = func() {
		out := fs.Output()
		fmt.Fprintf(out, "nightjar %s: %s\n\nExample:\n  %s\n\nOptions:\n", name, summary, example)
		fs.VisitAll(func(f *flag.Flag) {
			kind, usage := flag.UnquoteUsage(f)
			line := "  --" + f.Name
			if kind != "" {
				line += " " + kind
			}
			fmt.Fprintf(out, "%s\n      %s", line, usage)
			if f.DefValue != "" && f.DefValue != "false" && f.DefValue != "0" && f.DefValue != "[]" {
				fmt.Fprintf(out, " (default %s)", f.DefValue)
			}
			fmt.Fprintln(out)
		})
	}
	return fs
}

// parseFlags parses args, turning flag errors into usage errors (exit 2) and
// --help into errHelp (exit 0). Extra positional arguments are refused unless
// positional > 0.
func parseFlags(fs *flag.FlagSet, args []string, positional int) ([]string, error) {
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return nil, errHelp
		}
		return nil, &usageError{err.Error()}
	}
	rest := fs.Args()
	// Allow options after the positional argument(s): nightjar resume DIR --force.
	var pos []string
	for len(rest) > 0 {
		pos = append(pos, rest[0])
		if err := fs.Parse(rest[1:]); err != nil {
			if errors.Is(err, flag.ErrHelp) {
				return nil, errHelp
			}
			return nil, &usageError{err.Error()}
		}
		rest = fs.Args()
	}
	if len(pos) > positional {
		return nil, usagef("%s: unexpected argument %q", fs.Name(), pos[positional])
	}
	return pos, nil
}

// addRuntimeFlags registers the options that do not change the result.
func addRuntimeFlags(fs *flag.FlagSet, r *runtimeOpts) {
	fs.IntVar(&r.Threads, "threads", defaultThreads(), "worker threads (the result is the same bits for any value)")
	fs.BoolVar(&r.Quiet, "quiet", false, "no progress bars (for batch jobs); errors and the final summary still print")
	fs.IntVar(&r.CheckpointEvery, "checkpoint-every", 50, "write the optimiser state every this many iterations")
	fs.Float64Var(&r.CheckpointMinutes, "checkpoint-minutes", 10, "and at least every this many minutes")
	fs.IntVar(&r.ScoreSample, "score-sample", 2000, "rows sampled for the quality scores in the report (0 = none)")
}

// addSettingsFlags registers the options that shape the map.
func addSettingsFlags(fs *flag.FlagSet, s *settings) {
	fs.IntVar(&s.Dims, "dims", s.Dims, "dimensions of the map: 2 or 3")
	fs.Float64Var(&s.Perplexity, "perplexity", s.Perplexity, "effective number of neighbours each row keeps (needs at least 3·perplexity+1 rows)")
	fs.IntVar(&s.Reduce, "reduce", s.Reduce, "project the features onto their first N principal components while reading, in two streamed passes (for wide tables; 0 = off)")
	fs.StringVar(&s.Neighbours, "neighbours", s.Neighbours, "neighbour search: exact; descent (NN-descent started from random projection trees, repeatable bit for bit); hnsw (an HNSW index on a sample of rows gives starting candidates, refined by NN-descent; not bit-repeatable); auto = exact up to 50,000 rows, else descent")
	fs.StringVar(&s.Metric, "metric", s.Metric, "distance between rows: euclidean or cosine")
	fs.IntVar(&s.CheckRecall, "check-recall", s.CheckRecall, "rows sampled to measure the recall of approximate neighbours (0 = off)")
	fs.Float64Var(&s.RecallGoal, "recall-goal", s.RecallGoal, "approximate neighbours: refine until the recall estimated on 300 sampled rows reaches this, or six passes (1 = until a pass changes almost nothing)")
	fs.IntVar(&s.Iterations, "iterations", s.Iterations, "optimiser iterations in all, early exaggeration included")
	fs.IntVar(&s.EarlyIterations, "early-iterations", s.EarlyIterations, "iterations with early exaggeration")
	fs.Float64Var(&s.Exaggeration, "exaggeration", s.Exaggeration, "early exaggeration factor")
	fs.Float64Var(&s.LateExaggeration, "late-exaggeration", s.LateExaggeration, "exaggeration after the early phase; above 1 keeps clusters tighter and more of the global layout on very large tables (Kobak & Berens 2019)")
	fs.StringVar(&s.Start, "start", s.Start, "starting map: pca (first principal components) or subsample (map --start-rows random rows first, place the others among their neighbours; Kobak & Berens 2019)")
	fs.IntVar(&s.StartRows, "start-rows", s.StartRows, "rows mapped first by --start subsample")
	fs.Float64Var(&s.LearningRate, "learning-rate", s.LearningRate, "step size; 0 = automatic (rows / exaggeration, with a floor)")
	fs.Float64Var(&s.MomentumEarly, "momentum-early", s.MomentumEarly, "momentum during early exaggeration")
	fs.Float64Var(&s.MomentumLate, "momentum", s.MomentumLate, "momentum after early exaggeration")
	fs.Float64Var(&s.Dof, "degrees-of-freedom", s.Dof, "degrees of freedom of the map's heavy-tailed kernel (1 = Cauchy; lower separates clusters more)")
	fs.Float64Var(&s.Theta, "theta", s.Theta, "Barnes–Hut accuracy: 0 is exact, larger is faster and rougher")
	fs.StringVar(&s.Repulsion, "repulsion", s.Repulsion, "repulsive forces: auto, exact, tree (Barnes–Hut) or grid (FFT-interpolated, 2-D)")
	fs.Uint64Var(&s.Seed, "seed", s.Seed, "random seed; the same seed, input and settings give the same map bits")
}

// check validates settings that are not checked by the phases themselves.
func (s *settings) check() error {
	if s.Dims != 2 && s.Dims != 3 {
		return usagef("--dims must be 2 or 3, got %d", s.Dims)
	}
	if !(s.Perplexity > 1) {
		return usagef("--perplexity must be above 1, got %g", s.Perplexity)
	}
	switch s.Neighbours {
	case "auto", "exact", "descent", "hnsw":
	default:
		return usagef("--neighbours must be auto, exact, descent or hnsw, got %q", s.Neighbours)
	}
	if _, err := knn.ParseMetric(s.Metric); err != nil {
		return usagef("--metric: %v", err)
	}
	if _, err := gradient.ParseMethod(s.Repulsion); err != nil {
		return usagef("--repulsion: %v", err)
	}
	if s.Reduce < 0 || (s.Reduce > 0 && s.Reduce < s.Dims) {
		return usagef("--reduce must be 0 (off) or at least --dims (%d), got %d", s.Dims, s.Reduce)
	}
	if !(s.RecallGoal > 0 && s.RecallGoal <= 1) {
		return usagef("--recall-goal must be in (0, 1], got %g", s.RecallGoal)
	}
	if s.CheckRecall < 0 {
		return usagef("--check-recall must be 0 or more, got %d", s.CheckRecall)
	}
	switch s.Start {
	case "pca", "subsample":
	default:
		return usagef("--start must be pca or subsample, got %q", s.Start)
	}
	if s.Start == "subsample" && s.StartRows < 100 {
		return usagef("--start-rows must be at least 100, got %d", s.StartRows)
	}
	if !(s.LateExaggeration > 0 && s.LateExaggeration <= 1e4) {
		return usagef("--late-exaggeration must be in (0, 10000], got %g", s.LateExaggeration)
	}
	if s.Iterations < 1 || s.EarlyIterations < 0 || s.EarlyIterations > s.Iterations {
		return usagef("--iterations (%d) must be at least 1 and at least --early-iterations (%d)", s.Iterations, s.EarlyIterations)
	}
	return nil
}

func (r *runtimeOpts) check() error {
	if r.Threads < 1 {
		return usagef("--threads must be at least 1, got %d", r.Threads)
	}
	if r.CheckpointEvery < 1 {
		return usagef("--checkpoint-every must be at least 1, got %d", r.CheckpointEvery)
	}
	if !(r.CheckpointMinutes > 0) {
		return usagef("--checkpoint-minutes must be above 0, got %g", r.CheckpointMinutes)
	}
	if r.ScoreSample < 0 {
		return usagef("--score-sample must be 0 or more, got %d", r.ScoreSample)
	}
	return nil
}

// gradientParams turns settings into the optimiser's parameters for n rows.
func (s *settings) gradientParams(n, threads int) (gradient.Params, error) {
	p := gradient.DefaultParams(n)
	method, err := gradient.ParseMethod(s.Repulsion)
	if err != nil {
		return p, usagef("--repulsion: %v", err)
	}
	p.Dims, p.Dof, p.Theta = s.Dims, s.Dof, s.Theta
	p.Exaggeration, p.EarlyIterations, p.Iterations = s.Exaggeration, s.EarlyIterations, s.Iterations
	p.LateExaggeration = s.LateExaggeration
	p.LearningRate, p.MomentumEarly, p.MomentumLate = s.LearningRate, s.MomentumEarly, s.MomentumLate
	p.Method, p.Threads = method, threads
	if err := p.Validate(n); err != nil {
		return p, &usageError{err.Error()}
	}
	return p, nil
}

// defaultThreads is the number of cores the process may use.
func defaultThreads() int { return runtime.GOMAXPROCS(0) }
