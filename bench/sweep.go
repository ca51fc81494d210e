package bench

import (
	"encoding/csv"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
)

// Result is one run of a sweep: the settings that varied, what the run cost,
// and how good its map is. Scores that were not measured are NaN.
type Result struct {
	Name     string   // short name of the setting, e.g. "theta=0.5 perplexity=30"
	Values   []string // the varied settings' values, in the order of the sweep's keys
	Rows     int
	Seconds  float64 // wall time of the whole run
	KNNSecs  float64 // neighbour phase
	OptSecs  float64 // optimiser phase
	PeakMem  int64   // peak resident memory of the run, bytes
	Recall   float64 // neighbour recall of an approximate graph
	Trust    float64 // trustworthiness@K
	Cont     float64 // continuity@K
	Preserve float64 // neighbourhood preservation@K
	LabelAcc float64 // leave-one-out 10-NN label accuracy in the map
	InputAcc float64 // the same in the input space
	KL       float64
	IterSecs float64 // optimiser seconds per iteration
	AffSecs  float64 // affinity phase
	Centroid float64 // score.CentroidRank of the map (labelled data)
	Err      string  // non-empty when the run failed
}

// Meta is the header of a sweep report: what ran where.
type Meta struct {
	Dataset   string
	Rows      int
	K         int // neighbourhood size of the scores
	Cores     int
	GoVersion string
	Date      string
	Command   string
}

var resultCols = []string{"seconds", "neighbour_seconds", "optimiser_seconds", "peak_memory_mib",
	"recall", "trustworthiness", "continuity", "preservation", "label_accuracy_map", "label_accuracy_input", "kl",
	"seconds_per_iteration", "affinity_seconds", "centroid_rank", "error"}

func (r Result) fields() []string {
	f := func(v float64, prec int) string {
		if math.IsNaN(v) {
			return ""
		}
		return strconv.FormatFloat(v, 'f', prec, 64)
	}
	return []string{f(r.Seconds, 2), f(r.KNNSecs, 2), f(r.OptSecs, 2), f(float64(r.PeakMem)/(1<<20), 0),
		f(r.Recall, 4), f(r.Trust, 4), f(r.Cont, 4), f(r.Preserve, 4), f(r.LabelAcc, 4), f(r.InputAcc, 4), f(r.KL, 4),
		f(r.IterSecs, 3), f(r.AffSecs, 2), f(r.Centroid, 4), r.Err}
}

// WriteCSV writes the results as CSV: comment lines with the header (machine,
// dataset), then one row per run with the varied keys first.
func WriteCSV(w io.Writer, meta Meta, keys []string, rs []Result) error {
	if _, err := fmt.Fprintf(w, "# dataset %s, %d rows; %d cores; %s; %s\n", meta.Dataset, meta.Rows, meta.Cores, meta.GoVersion, meta.Date); err != nil {
		return err
	}
	cw := csv.NewWriter(w)
	if err := cw.Write(append(append([]string{"name"}, keys...), append([]string{"rows"}, resultCols...)...)); err != nil {
		return err
	}
	for _, r := range rs {
		row := append([]string{r.Name}, r.Values...)
		row = append(row, strconv.Itoa(r.Rows))
		if err := cw.Write(append(row, r.fields()...)); err != nil {
			return err
		}
	}
	cw.Flush()
	return cw.Error()
}

// WriteMarkdown writes the results as a Markdown table under a header that
// names the dataset, the machine's core count and the Go version.
func WriteMarkdown(w io.Writer, meta Meta, keys []string, rs []Result) error {
	var b strings.Builder
	fmt.Fprintf(&b, "Dataset: %s, %d rows. Machine: %d cores, %s. Date: %s.\n", meta.Dataset, meta.Rows, meta.Cores, meta.GoVersion, meta.Date)
	if meta.Command != "" {
		fmt.Fprintf(&b, "Command: `%s`\n", meta.Command)
	}
	fmt.Fprintf(&b, "Scores on a sample of rows, k = %d for trustworthiness, continuity and preservation; label accuracy is leave-one-out 10-NN.\n\n", meta.K)
	head := append(append([]string{}, keys...), "wall s", "neighbours s", "optimiser s", "peak MiB", "recall", "trust", "contin.", "preserv.", "label acc map", "label acc input", "KL",
		"s per iteration", "affinities s", "centroid τ", "error")
	b.WriteString("| " + strings.Join(head, " | ") + " |\n|")
	for range head {
		b.WriteString(" --- |")
	}
	b.WriteString("\n")
	for _, r := range rs {
		b.WriteString("| " + strings.Join(append(append([]string{}, r.Values...), r.fields()...), " | ") + " |\n")
	}
	_, err := io.WriteString(w, b.String())
	return err
}
