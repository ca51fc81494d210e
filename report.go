package nightjar

import (
	"encoding/json"
	"fmt"
	"io"
	"os"
	"runtime"
	"syscall"

	"nightjar/checkpoint"
)

// Caution is printed after every run and written into every report and map.
const Caution = "A t-SNE map keeps local neighbourhoods, not global geometry: the sizes of clusters " +
	"and the distances between clusters carry little meaning, and apparent gaps or sub-groups can be artefacts " +
	"of perplexity and run length. Confirm any finding with the original data."

// Version is the tool version written into manifests and reports.
const Version = "0.1.0"

// Report is report.json: what was run, how long it took, how good the map is.
type Report struct {
	Tool     string `json:"tool"`
	Version  string `json:"version"`
	Input    string `json:"input"`
	Format   string `json:"format"`
	Rows     int    `json:"rows"`
	Features int    `json:"features"`
	Skipped  int64  `json:"skipped_rows"`
	// SkippedRowsFile names the file of the run directory that lists the
	// skipped rows (FileSkippedRows), when there are any.
	SkippedRowsFile string `json:"skipped_rows_file,omitempty"`
	// Parts lists the files read, in order, when the input has several.
	Parts []string `json:"parts,omitempty"`
	// FeatureColumns are the input columns the features came from, vectors
	// with their width.
	FeatureColumns []FeatureColumn `json:"feature_columns,omitempty"`
	// DuplicateIDs counts the ids that occur more than once.
	DuplicateIDs *DuplicateIDs `json:"duplicate_ids,omitempty"`
	// Warnings repeats the warnings printed about the input.
	Warnings   []string `json:"warnings,omitempty"`
	Reduced    *Reduced `json:"reduced,omitempty"`
	Parameters Settings `json:"parameters"`
	Threads    int      `json:"threads"`
	Cores      int      `json:"cores"`
	GoVersion  string   `json:"go_version"`
	Resumed    bool     `json:"resumed"`
	Neighbours struct {
		Method       string   `json:"method"`
		K            int      `json:"k"`
		Seconds      float64  `json:"seconds"`
		Recall       *float64 `json:"recall,omitempty"`
		RecallSample int      `json:"recall_sample,omitempty"`
		// Passes and PassRecall: NN-descent passes run, and the recall
		// estimated on the stopping sample before the first and after each.
		Passes     *int      `json:"passes,omitempty"`
		PassRecall []float64 `json:"pass_recall,omitempty"`
		// Trees is the number of random projection trees NN-descent
		// started from (more than the default 8 when the start's recall
		// was low).
		Trees int `json:"trees,omitempty"`
	} `json:"neighbours"`
	Affinities struct {
		Seconds float64 `json:"seconds"`
		Entries int64   `json:"entries"`
	} `json:"affinities"`
	Optimiser struct {
		Iterations   int     `json:"iterations"`
		KL           float64 `json:"kl"`
		Seconds      float64 `json:"seconds"`
		Repulsion    string  `json:"repulsion"`
		LearningRate float64 `json:"learning_rate"`
	} `json:"optimiser"`
	Quality         *Quality           `json:"quality,omitempty"`
	Phases          map[string]float64 `json:"phase_seconds"`
	PeakMemoryBytes int64              `json:"peak_memory_bytes"`
	// PhaseMemory is the process's peak resident memory at the end of each
	// phase run by this process: a running maximum, so the first phase whose
	// figure reaches PeakMemoryBytes is the one that set the peak.
	PhaseMemory map[string]int64 `json:"peak_memory_bytes_after"`
	// MemoryEstimate is EstimateMemory's figure for the run, set beside
	// the measured peaks: made when the table was read, and again with
	// the counted affinity entries.
	MemoryEstimate *EstimatedMemory `json:"memory_estimate,omitempty"`
	SecondsTotal   float64          `json:"seconds_total"`
	// Prediction names the prediction the run was given
	// (Runtime.Prediction) and, once finished, how it compares with it.
	Prediction *PredictionCheck `json:"prediction,omitempty"`
	Caution    string           `json:"caution"`
}

// EstimatedMemory is a MemoryEstimate as the report keeps it.
type EstimatedMemory struct {
	PeakBytes      int64            `json:"peak_bytes"`
	PeakPhase      string           `json:"peak_phase"`
	PhaseBytes     map[string]int64 `json:"phase_bytes"`
	Entries        int64            `json:"affinity_entries"`
	EntriesCounted bool             `json:"affinity_entries_counted"`
}

// Reduced describes the streamed PCA of Settings.Reduce: the map and the
// quality scores then work in the space of the first To components.
type Reduced struct {
	From     int       `json:"from_features"`
	To       int       `json:"to_components"`
	Variance []float64 `json:"component_variances"`
	// ExplainedVariance is the share of the features' total variance that
	// the components keep.
	ExplainedVariance float64 `json:"explained_variance"`
	// Automatic is set when the table's width chose the reduction
	// (Settings.Reduce = ReduceAuto).
	Automatic bool `json:"automatic"`
	// Method is "exact covariance" or the randomised iteration and its
	// passes over the rows; AngleBound, for the latter, the largest bound on
	// the angle (radians) between a well separated component and the exact
	// one.
	Method     string  `json:"method"`
	AngleBound float64 `json:"angle_bound,omitempty"`
	// Normalised is set when the rows were scaled to unit length first (the
	// cosine metric): the components are then compared by the Euclidean
	// distance.
	Normalised bool    `json:"normalised_rows"`
	Seconds    float64 `json:"seconds"`
}

func newReport(s Settings, rt Runtime) Report {
	return Report{Tool: "nightjar", Version: Version, Input: s.Input, Parameters: s, Threads: rt.Threads,
		Cores: runtime.NumCPU(), GoVersion: runtime.Version(), Phases: map[string]float64{}, PhaseMemory: map[string]int64{}, Caution: Caution,
		Prediction: predictionFor(rt.Prediction, s)}
}

// ReadReport reads a report.json.
func ReadReport(path string) (*Report, error) { return readJSONFile[Report](path) }

// readJSONFile reads the JSON file at path into a new T.
func readJSONFile[T any](path string) (*T, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, err
	}
	v := new(T)
	if err := json.Unmarshal(b, v); err != nil {
		return nil, fmt.Errorf("reading %s: %w", path, err)
	}
	return v, nil
}

// writeReport writes rep as indented JSON, atomically.
func writeReport(path string, rep *Report) error {
	rep.Prediction.measure(rep)
	return writeJSONFile(path, rep)
}

// writeJSONFile writes v as indented JSON to path, atomically.
func writeJSONFile(path string, v any) error {
	b, err := json.MarshalIndent(v, "", "  ")
	if err != nil {
		return fmt.Errorf("encoding %s: %w", path, err)
	}
	b = append(b, '\n')
	if err := checkpoint.AtomicWrite(path, func(w io.Writer) error { _, err := w.Write(b); return err }); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	return nil
}

// peakMemory returns the process's peak resident set size in bytes (Linux
// reports ru_maxrss in KiB).
func peakMemory() int64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return ru.Maxrss * 1024
}
