package nightjar

import (
	"encoding/json"
	"fmt"
	"math"
	"reflect"
	"slices"
	"strings"

	"nightjar/checkpoint"
	"nightjar/gradient"
	"nightjar/knn"
)

// Settings is everything that shapes a run's result, and the schema of the
// "params" object of a run directory's manifest: a resumed run uses exactly
// the settings it started with. DefaultSettings holds the defaults, in this
// one place.
//
// Each field's `flag` tag is the name the command line and the benchmark
// sweeps use for it, and its `help` tag the one-line description; Options
// lists them and Set and Get read and write a field by that name, so the
// command line cannot drift from this type.
type Settings struct {
	Input       string   `json:"input" flag:"input" help:"feature table: a Parquet, Arrow IPC or CSV file (CSV with a header row; also .csv.gz, .tsv.gz, .csv.zst), a directory of such parts, or a glob pattern; several: repeat --input" topic:"input"`
	Inputs      []string `json:"inputs,omitempty" flag:"-"` // every input in reading order when there are several (Input is the first); nil for one
	ID          string   `json:"id,omitempty" flag:"id" help:"column carried through to the outputs to join on" topic:"input"`
	Label       string   `json:"label,omitempty" flag:"label" help:"column that colours the map and is scored for label accuracy" topic:"input"`
	Features    []string `json:"features,omitempty" flag:"features" help:"feature columns: names and glob patterns, comma-separated (default: every numeric column but the id and the label)" topic:"input"`
	SkipInvalid bool     `json:"skip_invalid" flag:"skip-invalid" help:"drop rows with NaN, Inf or empty features instead of stopping, and report how many" topic:"input"`
	Reduce      int      `json:"reduce" flag:"reduce" help:"project the features onto their first N principal components while reading, in streamed passes (randomised above 500 features); -1 = automatic: 50 components for a table of more than 100 features, none for a narrower one; 0 = keep every feature" topic:"input"`

	Dims       int     `json:"dims" flag:"dims" help:"dimensions of the map: 2 or 3" topic:"map"`
	Perplexity float64 `json:"perplexity" flag:"perplexity" help:"effective number of neighbours each row keeps (needs at least 3·perplexity+1 rows)" topic:"neighbours"`
	// UniformNeighbours is absent from manifests written before it
	// existed, and from those of runs that leave it at 0.
	UniformNeighbours int     `json:"uniform_neighbours,omitempty" flag:"uniform-neighbours" help:"0 = affinities calibrated by --perplexity; N > 0 = the same weight for each of a row's N nearest neighbours instead, symmetrised (Böhm, Berens & Kobak 2022): 15 keeps a sixth of the graph and affinities of perplexity 30, for tables that would not fit in memory otherwise" topic:"neighbours"`
	Neighbours        string  `json:"neighbours" flag:"neighbours" help:"neighbour search: exact; descent (NN-descent started from random projection trees, repeatable bit for bit); hnsw (an HNSW index on a sample of rows gives starting candidates, refined by NN-descent; not bit-repeatable); auto = exact up to 50,000 rows, else descent" topic:"neighbours"`
	Metric            string  `json:"metric" flag:"metric" help:"distance between rows: euclidean or cosine" topic:"neighbours"`
	CheckRecall       int     `json:"check_recall" flag:"check-recall" help:"rows sampled to measure the recall of approximate neighbours (0 = off)" topic:"neighbours"`
	RecallGoal        float64 `json:"recall_goal" flag:"recall-goal" help:"approximate neighbours: refine until the recall estimated on 300 sampled rows reaches this, or six passes (1 = until a pass changes almost nothing)" topic:"neighbours"`

	Iterations      int     `json:"iterations" flag:"steps" help:"optimiser steps in all, the early phase included" topic:"optimiser"`
	EarlyIterations int     `json:"early_iterations" flag:"early-steps" help:"steps of the early phase (early exaggeration and early momentum)" topic:"optimiser"`
	Exaggeration    float64 `json:"exaggeration" flag:"early-exaggeration" help:"exaggeration factor of the early phase" topic:"optimiser"`
	// MainExaggeration and the start are absent from manifests written
	// before they existed; 0 and "" then mean 1 and "pca".
	MainExaggeration float64 `json:"main_exaggeration" flag:"main-exaggeration" help:"exaggeration after the early phase; above 1 keeps clusters tighter and more of the global layout on very large tables (Kobak & Berens 2019)" topic:"optimiser"`
	Start            string  `json:"start" flag:"start-map" help:"starting map: pca (first principal components) or subsample (map --start-sample random rows first, place the others among their neighbours; Kobak & Berens 2019)" topic:"optimiser"`
	StartRows        int     `json:"start_rows" flag:"start-sample" help:"rows mapped first by --start-map subsample" topic:"optimiser"`
	LearningRate     float64 `json:"learning_rate" flag:"learning-rate" help:"step size; 0 = automatic (rows / exaggeration, with a floor)" topic:"optimiser"`
	MomentumEarly    float64 `json:"momentum_early" flag:"early-momentum" help:"momentum during the early phase" topic:"optimiser"`
	MomentumLate     float64 `json:"momentum_late" flag:"momentum" help:"momentum after the early phase" topic:"optimiser"`
	Dof              float64 `json:"degrees_of_freedom" flag:"degrees-of-freedom" help:"degrees of freedom of the map's heavy-tailed kernel (1 = Cauchy; lower separates clusters more)" topic:"map"`
	Theta            float64 `json:"theta" flag:"theta" help:"Barnes–Hut accuracy: 0 is exact, larger is faster and rougher" topic:"optimiser"`
	Repulsion        string  `json:"repulsion" flag:"repulsion" help:"repulsive forces: auto, exact, tree (Barnes–Hut) or grid (FFT-interpolated, 2-D)" topic:"optimiser"`
	Seed             uint64  `json:"seed" flag:"seed" help:"random seed; the same seed, input and settings give the same map bits" topic:"map"`
}

// DefaultSettings returns the defaults: perplexity 30 and early
// exaggeration 12 for 250 iterations with momentum 0.5 then 0.8, 750
// iterations after it, θ = 0.5 and the Cauchy kernel (degrees of freedom
// 1), the published practice of van der Maaten & Hinton (JMLR 9, 2008) and
// van der Maaten (JMLR 15, 2014); a start from the principal components
// (Kobak & Berens, Nat. Commun. 10:5416, 2019); wide tables reduced to their
// first 50 principal components (ReduceAuto, the common practice of both).
// Input is empty: the caller names the table.
func DefaultSettings() Settings {
	return Settings{
		Dims: 2, Perplexity: 30, Neighbours: "auto", Metric: "euclidean", CheckRecall: 1000,
		RecallGoal: 0.99,
		Iterations: 1000, EarlyIterations: 250, Exaggeration: 12, MainExaggeration: 1,
		Start: "pca", StartRows: 25000,
		MomentumEarly: 0.5, MomentumLate: 0.8, Dof: 1, Theta: 0.5,
		Repulsion: "auto", Seed: 1, Reduce: ReduceAuto,
	}
}

// Validate checks the settings that no phase checks by itself; each error
// is a *SettingError naming the option.
func (s *Settings) Validate() error {
	bad := func(name, format string, args ...any) error {
		return &SettingError{Name: name, Msg: fmt.Sprintf(format, args...)}
	}
	if s.Dims != 2 && s.Dims != 3 {
		return bad("dims", "must be 2 or 3, got %d", s.Dims)
	}
	if !(s.Perplexity > 1) || math.IsInf(s.Perplexity, 0) {
		return bad("perplexity", "must be above 1, got %g", s.Perplexity)
	}
	if s.UniformNeighbours < 0 {
		return bad("uniform-neighbours", "must be 0 (off) or a number of neighbours, got %d", s.UniformNeighbours)
	}
	if s.Neighbours != "auto" {
		if _, err := knn.ParseMethod(s.Neighbours); err != nil {
			return bad("neighbours", "must be auto, exact, descent or hnsw, got %q", s.Neighbours)
		}
	}
	if _, err := knn.ParseMetric(s.Metric); err != nil {
		return bad("metric", "%v", err)
	}
	if _, err := gradient.ParseMethod(s.Repulsion); err != nil {
		return bad("repulsion", "%v", err)
	}
	if s.Reduce < ReduceAuto || (s.Reduce > 0 && s.Reduce < s.Dims) {
		return bad("reduce", "must be -1 (automatic), 0 (off) or at least --dims (%d), got %d", s.Dims, s.Reduce)
	}
	if !(s.RecallGoal > 0 && s.RecallGoal <= 1) {
		return bad("recall-goal", "must be in (0, 1], got %g", s.RecallGoal)
	}
	if s.CheckRecall < 0 {
		return bad("check-recall", "must be 0 or more, got %d", s.CheckRecall)
	}
	switch s.Start {
	case "pca", "subsample":
	default:
		return bad("start-map", "must be pca or subsample, got %q", s.Start)
	}
	if s.Start == "subsample" && s.StartRows < 100 {
		return bad("start-sample", "must be at least 100, got %d", s.StartRows)
	}
	if !(s.MainExaggeration > 0 && s.MainExaggeration <= 1e4) {
		return bad("main-exaggeration", "must be in (0, 10000], got %g", s.MainExaggeration)
	}
	if s.Iterations < 1 || s.EarlyIterations < 0 || s.EarlyIterations > s.Iterations {
		return bad("steps", "(%d) must be at least 1 and at least --early-steps (%d)", s.Iterations, s.EarlyIterations)
	}
	return nil
}

// neighbourCount returns the number of neighbours each of n rows keeps:
// UniformNeighbours when set, else ⌊3·perplexity⌋ (knn.Neighbours); at most
// n−1, and 0 for n < 2.
func (s Settings) neighbourCount(n int) int {
	if s.UniformNeighbours > 0 {
		return max(min(s.UniformNeighbours, n-1), 0)
	}
	return knn.Neighbours(s.Perplexity, n)
}

// checkRows refuses a table of n rows too small for the affinities: a
// *knn.PerplexityError (3·perplexity > n−1) or, with uniform affinities, a
// *knn.TooFewRowsError.
func (s Settings) checkRows(n int) error {
	if s.UniformNeighbours > 0 {
		return knn.CheckNeighbours(s.UniformNeighbours, n)
	}
	return knn.CheckPerplexity(s.Perplexity, n)
}

// LeastRows is the fewest rows a table needs for the affinities: 3·perplexity
// + 1 rounded up, or UniformNeighbours + 1.
func (s Settings) LeastRows() int {
	if s.UniformNeighbours > 0 {
		return s.UniformNeighbours + 1
	}
	return int(math.Ceil(3*s.Perplexity)) + 1
}

// consumeAffinity turns g into P as the settings say (knn.AffinityConsume
// or knn.UniformAffinityConsume), leaving g empty.
func (s Settings) consumeAffinity(g *Graph, threads int) (*CSR, error) {
	if s.UniformNeighbours > 0 {
		return knn.UniformAffinityConsume(g, threads)
	}
	return knn.AffinityConsume(g, s.Perplexity, threads)
}

// calibration returns how a row's conditional probabilities p_{j|i} over
// its neighbours come from their squared distances d2: knn.Calibrate with
// the perplexity, or knn.UniformRow.
func (s Settings) calibration() func(p []float64, d2 []float32) {
	if s.UniformNeighbours > 0 {
		return knn.UniformRow
	}
	perp := s.Perplexity
	return func(p []float64, d2 []float32) { knn.Calibrate(p, d2, perp) }
}

// AffinityNote names the affinities in a few words, as the log and the
// bench's messages give them: "perplexity 30" or "uniform over 15
// neighbours".
func (s Settings) AffinityNote() string {
	if s.UniformNeighbours > 0 {
		return fmt.Sprintf("uniform over %d neighbours", s.UniformNeighbours)
	}
	return fmt.Sprintf("perplexity %g", s.Perplexity)
}

// fillLegacy gives fields absent from an older manifest their meaning.
func (s *Settings) fillLegacy() {
	if s.MainExaggeration == 0 {
		s.MainExaggeration = 1
	}
	if s.Start == "" {
		s.Start = "pca"
	}
}

// Runtime holds the options that do not change a run's result: they are
// not part of the manifest's settings. DefaultRuntime holds the defaults.
type Runtime struct {
	// Threads is the number of worker goroutines, ≥ 1. The result is the
	// same bits for any value (except with the hnsw neighbour search).
	Threads int `flag:"threads" help:"worker threads (the result is the same bits for any value)" topic:"running"`
	// CheckpointEvery and CheckpointMinutes set how often the optimiser
	// writes its state: every this many iterations, and at least every
	// this many minutes. The run keeps them for Resume, which uses them
	// where its own Runtime leaves them at 0.
	CheckpointEvery   int     `flag:"checkpoint-every" json:"checkpoint_every" help:"write the optimiser state every this many steps" topic:"running"`
	CheckpointMinutes float64 `flag:"checkpoint-minutes" json:"checkpoint_minutes" help:"and at least every this many minutes" topic:"running"`
	// ScoreSample is the number of rows sampled for the quality scores of
	// the report (0 = no scores).
	ScoreSample int `flag:"score-sample" help:"rows sampled for the quality scores in the report (0 = none)" topic:"running"`
	// Prediction is a prediction file written by nightjar bench --predict
	// ("" = none): the report names the prediction made for the run's
	// settings and compares the run with it.
	Prediction string `flag:"prediction" help:"a prediction.json of nightjar bench --predict: the report records the prediction for this run's settings beside the measured time and memory" topic:"running"`
	// MemoryCeiling, in GiB (2³⁰ bytes), refuses a run whose estimated peak
	// resident memory (EstimateMemory) is above it, with a *MemoryError:
	// checked once the table is read, before the neighbour search, and
	// again with the counted affinity entries before the optimiser. 0 means
	// no check.
	MemoryCeiling float64 `flag:"ram-ceiling" help:"refuse the run, before its neighbour search and again before its optimiser, when its estimated peak resident memory is above this many GiB (0 = no check; the estimate is in the log and the report either way)" topic:"running"`
	// Force lets Resume continue although the input changed since the run
	// began.
	Force bool `flag:"-"`
	// Input is, for Resume, the new location of an input that moved; its
	// values must be those the run began with.
	Input string `flag:"-"`
	// ReturnMemory lowers the garbage collector's target while the
	// neighbours are searched and hands freed memory back to the operating
	// system between phases. These are process-wide settings, so a library
	// leaves them off unless its program wants them; the command line turns
	// them on. Measured at 1,000,000 demo rows: the peak resident memory
	// went from 3.28 GB without to 2.81 GB with.
	ReturnMemory bool `flag:"-"`
	// FS is the file system the run directory is written through (nil: the
	// operating system's); tests give one that fails or stops at a chosen
	// write.
	FS checkpoint.FS `flag:"-"`
}

// DefaultRuntime returns one thread, a checkpoint every 50 iterations and at
// least every 10 minutes, and scores on 2,000 sampled rows.
func DefaultRuntime() Runtime {
	return Runtime{Threads: 1, CheckpointEvery: 50, CheckpointMinutes: 10, ScoreSample: 2000}
}

// keptRuntime is what a run directory keeps of the runtime options.
type keptRuntime struct {
	CheckpointEvery   int     `json:"checkpoint_every"`
	CheckpointMinutes float64 `json:"checkpoint_minutes"`
}

// kept returns the JSON of the options a run keeps for its resumes.
func (r *Runtime) kept() json.RawMessage {
	b, _ := json.Marshal(keptRuntime{r.CheckpointEvery, r.CheckpointMinutes})
	return b
}

// fill gives the checkpoint cadences left at 0 the values a run kept (or
// the defaults), then validates.
func (r *Runtime) fill(kept json.RawMessage) error {
	k := keptRuntime{CheckpointEvery: DefaultRuntime().CheckpointEvery, CheckpointMinutes: DefaultRuntime().CheckpointMinutes}
	if len(kept) > 0 {
		_ = json.Unmarshal(kept, &k)
	}
	if r.CheckpointEvery == 0 {
		r.CheckpointEvery = k.CheckpointEvery
	}
	if r.CheckpointMinutes == 0 {
		r.CheckpointMinutes = k.CheckpointMinutes
	}
	return r.Validate()
}

// Validate checks the runtime options; errors are *SettingError.
func (r *Runtime) Validate() error {
	bad := func(name, format string, args ...any) error {
		return &SettingError{Name: name, Msg: fmt.Sprintf(format, args...)}
	}
	if r.Threads < 1 {
		return bad("threads", "must be at least 1, got %d", r.Threads)
	}
	if r.CheckpointEvery < 1 {
		return bad("checkpoint-every", "must be at least 1, got %d", r.CheckpointEvery)
	}
	if !(r.CheckpointMinutes > 0) {
		return bad("checkpoint-minutes", "must be above 0, got %g", r.CheckpointMinutes)
	}
	if r.ScoreSample < 0 {
		return bad("score-sample", "must be 0 or more, got %d", r.ScoreSample)
	}
	if !(r.MemoryCeiling >= 0 && r.MemoryCeiling < 1<<30) {
		return bad("ram-ceiling", "must be 0 (no check) or a size in GiB, got %g", r.MemoryCeiling)
	}
	if r.Prediction != "" {
		if _, err := ReadPredictionFile(r.Prediction); err != nil {
			return err
		}
	}
	return nil
}

// gradientParams turns settings into the optimiser's parameters for n rows.
func (s *Settings) gradientParams(n, threads int) (gradient.Params, error) {
	p := gradient.DefaultParams(n)
	method, err := gradient.ParseMethod(s.Repulsion)
	if err != nil {
		return p, &SettingError{Name: "repulsion", Msg: err.Error()}
	}
	p.Dims, p.Dof, p.Theta = s.Dims, s.Dof, s.Theta
	p.Exaggeration, p.EarlyIterations, p.Iterations = s.Exaggeration, s.EarlyIterations, s.Iterations
	p.MainExaggeration = s.MainExaggeration
	p.LearningRate, p.MomentumEarly, p.MomentumLate = s.LearningRate, s.MomentumEarly, s.MomentumLate
	p.Method, p.Threads = method, threads
	if err := p.Validate(n); err != nil {
		return p, &SettingError{Msg: err.Error()}
	}
	return p, nil
}

// neighbourMethod resolves "auto" for n rows.
func (s *Settings) neighbourMethod(n int) (knn.Method, error) {
	name := s.Neighbours
	if name == "auto" {
		name = "exact"
		if n > autoExactRows {
			name = "descent"
		}
	}
	m, err := knn.ParseMethod(name)
	if err != nil {
		return m, &SettingError{Name: "neighbours", Msg: err.Error()}
	}
	return m, nil
}

// autoExactRows is the largest table "auto" sends to the exact neighbour
// search; above it auto uses NN-descent started from random projection
// trees. Measured on 2 cores at k = 90 on the demo scenario: at 50,000 rows
// the exact search took 10.2 s and NN-descent 4.9 s (recall 0.9995), at
// 100,000 rows about 45 s and 12 s, at 1,000,000 rows an estimated 3,500 s
// (10,000 exact queries timed, scaled) and 281 s. Below 50,000 rows the
// exact search costs seconds, so auto keeps its exact answer there.
//
// Auto prefers NN-descent to an HNSW start + NN-descent because the HNSW
// start is slower to reach the same recall (1,000,000 demo rows: 591 s and
// four passes against 281 s and two; MNIST 70,000: 181 s against 112 s), and
// because its result is the same bits on every run; the HNSW library's index
// depends on Go's randomised map order, so "hnsw" runs do not repeat bit for
// bit.
const autoExactRows = 50000

// trimList splits comma-separated values, dropping empty ones.
func trimList(v string) []string {
	var out []string
	for _, s := range strings.Split(v, ",") {
		if s = strings.TrimSpace(s); s != "" {
			out = append(out, s)
		}
	}
	return out
}

// UnmarshalJSON reads settings, giving a manifest written before automatic
// reduction existed, which left "reduce" out when it was 0, its meaning: no
// reduction (absent fields otherwise keep the values already in s). A key
// that names no setting is an *UnknownSettingsError: dropping it would let a
// run continue without a setting it was made with.
func (s *Settings) UnmarshalJSON(b []byte) error {
	type plain Settings
	var keys map[string]json.RawMessage
	if err := json.Unmarshal(b, &keys); err != nil {
		return err
	}
	var unknown []string
	for k := range keys {
		if !settingKeys[k] {
			unknown = append(unknown, k)
		}
	}
	if len(unknown) > 0 {
		slices.Sort(unknown)
		return &UnknownSettingsError{Keys: unknown}
	}
	if err := json.Unmarshal(b, (*plain)(s)); err != nil {
		return err
	}
	if _, ok := keys["reduce"]; !ok {
		s.Reduce = 0
	}
	return nil
}

// UnknownSettingsError is the error of settings (a manifest's, a
// prediction's) that name settings this version does not have: written by
// another version of nightjar.
type UnknownSettingsError struct {
	Keys []string
}

func (e *UnknownSettingsError) Error() string {
	return "unknown settings " + strings.Join(e.Keys, ", ")
}

// settingKeys holds the JSON key of every field of Settings.
var settingKeys = func() map[string]bool {
	keys := map[string]bool{}
	t := reflect.TypeFor[Settings]()
	for i := range t.NumField() {
		name, _, _ := strings.Cut(t.Field(i).Tag.Get("json"), ",")
		if name != "" && name != "-" {
			keys[name] = true
		}
	}
	return keys
}()
