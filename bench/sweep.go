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

	Repeat   int     // 1-based repeat of this setting
	Order    int     // 1-based position in the sweep's order of runs
	Load     float64 // 1-minute load average when the run began (NaN: unknown)
	OtherCPU float64 // cores that other processes kept busy during the run, on average (NaN: unknown)
	// PKey names what the run's affinities P depend on: runs with equal
	// keys share P, so their KL divergences compare.
	PKey string
}

// Meta is the header of a sweep report: what ran where, and how.
type Meta struct {
	Dataset   string
	Rows      int
	K         int // neighbourhood size of the scores
	Cores     int
	GoVersion string
	Date      string
	Command   string
	Repeats   int    // runs of each setting
	Order     string // "interleaved" or "shuffled"
	Warmup    int    // untimed runs before the timed ones
	// LoadStart and LoadEnd are the 1-minute load averages before the
	// first run and after the last (NaN: unknown).
	LoadStart, LoadEnd float64
	Notes              []string // warnings and remarks printed under the tables
}

// Summary is one setting of a sweep over its repeats: medians of every
// measure of the runs that finished, and the spread of the wall time and
// the peak memory.
type Summary struct {
	Result                         // medians; Name, Values and Rows of the setting; Err of the first failed run
	Runs, Failed           int     // runs that finished and that failed
	SecondsMin, SecondsMax float64 // fastest and slowest wall time
	MemMin, MemMax         int64   // smallest and largest peak memory
	// PGroup is a letter shared by the settings with the same P; ShowKL
	// is set where a KL divergence has another of its own P to compare
	// with, or where every setting shares one P.
	PGroup string
	ShowKL bool
}

// Summarise groups runs by setting name, in the order the names first
// appear, takes medians over each setting's finished runs and gives each
// setting the letter of its P. A setting whose runs all failed has NaN
// medians and the first error.
func Summarise(rs []Result) []Summary {
	var order []string
	by := map[string][]Result{}
	for _, r := range rs {
		if _, ok := by[r.Name]; !ok {
			order = append(order, r.Name)
		}
		by[r.Name] = append(by[r.Name], r)
	}
	var sums []Summary
	for _, name := range order {
		sums = append(sums, summarise(by[name]))
	}
	groupP(sums)
	return sums
}

func summarise(runs []Result) Summary {
	s := Summary{Result: runs[0]}
	var ok []Result
	for _, r := range runs {
		if r.Err != "" {
			s.Failed++
			if s.Err == "" {
				s.Err = r.Err
			}
			continue
		}
		ok = append(ok, r)
	}
	s.Runs = len(ok)
	if len(ok) > 0 {
		s.Err = ""
		if s.Failed > 0 {
			s.Err = fmt.Sprintf("%d of %d runs failed", s.Failed, len(runs))
		}
	}
	med := func(f func(Result) float64) float64 {
		vs := make([]float64, len(ok))
		for i, r := range ok {
			vs[i] = f(r)
		}
		return Median(vs)
	}
	m := &s.Result
	m.Seconds = med(func(r Result) float64 { return r.Seconds })
	m.KNNSecs, m.OptSecs, m.AffSecs = med(func(r Result) float64 { return r.KNNSecs }), med(func(r Result) float64 { return r.OptSecs }), med(func(r Result) float64 { return r.AffSecs })
	m.IterSecs = med(func(r Result) float64 { return r.IterSecs })
	m.Recall, m.Trust, m.Cont = med(func(r Result) float64 { return r.Recall }), med(func(r Result) float64 { return r.Trust }), med(func(r Result) float64 { return r.Cont })
	m.Preserve, m.LabelAcc, m.InputAcc = med(func(r Result) float64 { return r.Preserve }), med(func(r Result) float64 { return r.LabelAcc }), med(func(r Result) float64 { return r.InputAcc })
	m.KL, m.Centroid = med(func(r Result) float64 { return r.KL }), med(func(r Result) float64 { return r.Centroid })
	m.Load = med(func(r Result) float64 { return r.Load })
	mem := med(func(r Result) float64 { return float64(r.PeakMem) })
	m.PeakMem = int64(mem)
	s.SecondsMin, s.SecondsMax = math.NaN(), math.NaN()
	if len(ok) > 0 {
		s.SecondsMin, s.SecondsMax = Spread(seconds(ok))
		s.MemMin, s.MemMax = ok[0].PeakMem, ok[0].PeakMem
		m.OtherCPU = math.Inf(-1)
		for _, r := range ok {
			s.MemMin, s.MemMax = min(s.MemMin, r.PeakMem), max(s.MemMax, r.PeakMem)
			if !math.IsNaN(r.OtherCPU) {
				m.OtherCPU = math.Max(m.OtherCPU, r.OtherCPU)
			}
		}
		if math.IsInf(m.OtherCPU, -1) {
			m.OtherCPU = math.NaN()
		}
	}
	return s
}

func seconds(rs []Result) []float64 {
	out := make([]float64, len(rs))
	for i, r := range rs {
		out[i] = r.Seconds
	}
	return out
}

// groupP gives the settings letters by their P keys, in order of first
// appearance, and decides where KL is shown.
func groupP(sums []Summary) {
	letter := map[string]string{}
	count := map[string]int{}
	for _, s := range sums {
		if _, ok := letter[s.PKey]; !ok {
			letter[s.PKey] = pLetter(len(letter))
		}
		count[s.PKey]++
	}
	for i := range sums {
		sums[i].PGroup = letter[sums[i].PKey]
		sums[i].ShowKL = len(letter) == 1 || count[sums[i].PKey] > 1
	}
}

// pLetter is A … Z, then P27, P28, …
func pLetter(i int) string {
	if i < 26 {
		return string(rune('A' + i))
	}
	return "P" + strconv.Itoa(i+1)
}

// KLNote says which KL divergences a report leaves out and why, or "" when
// every setting's is shown.
func KLNote(sums []Summary) string {
	var hidden []string
	groups := map[string]bool{}
	for _, s := range sums {
		groups[s.PGroup] = true
		if !s.ShowKL {
			hidden = append(hidden, s.Name)
		}
	}
	switch {
	case len(groups) == 1:
		return ""
	case len(hidden) == 0:
		return "KL divergences compare only within a P group (column P): settings with different perplexity, neighbours, metric or rows fit different targets."
	}
	return fmt.Sprintf("KL is left out for %s: no other setting shares its P (column P; perplexity, neighbours, metric and rows decide P), and a KL divergence of another P measures the fit to another target. Compare trustworthiness, continuity and label accuracy instead.", strings.Join(hidden, "; "))
}

// f formats v with prec decimals, or "" for NaN.
func f(v float64, prec int) string {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return ""
	}
	return strconv.FormatFloat(v, 'f', prec, 64)
}

func mib(b int64) float64 { return float64(b) / (1 << 20) }

var summaryCols = []string{"runs", "seconds_median", "seconds_min", "seconds_max", "seconds_spread_pct",
	"neighbour_seconds", "affinity_seconds", "optimiser_seconds", "seconds_per_iteration",
	"peak_memory_mib_median", "peak_memory_mib_min", "peak_memory_mib_max",
	"recall", "trustworthiness", "continuity", "preservation", "label_accuracy_map", "label_accuracy_input",
	"centroid_rank", "p_group", "kl", "other_cpu_max", "error"}

func (s Summary) fields() []string {
	kl := math.NaN()
	if s.ShowKL {
		kl = s.KL
	}
	spread := math.NaN()
	if s.Seconds > 0 {
		spread = 100 * (s.SecondsMax - s.SecondsMin) / s.Seconds
	}
	memLo, memHi := math.NaN(), math.NaN()
	if s.Runs > 0 {
		memLo, memHi = mib(s.MemMin), mib(s.MemMax)
	}
	return []string{strconv.Itoa(s.Runs), f(s.Seconds, 2), f(s.SecondsMin, 2), f(s.SecondsMax, 2), f(spread, 1),
		f(s.KNNSecs, 2), f(s.AffSecs, 2), f(s.OptSecs, 2), f(s.IterSecs, 3),
		f(mib(s.PeakMem), 0), f(memLo, 0), f(memHi, 0),
		f(s.Recall, 4), f(s.Trust, 4), f(s.Cont, 4), f(s.Preserve, 4), f(s.LabelAcc, 4), f(s.InputAcc, 4),
		f(s.Centroid, 4), s.PGroup, f(kl, 4), f(s.OtherCPU, 2), s.Err}
}

// header is the comment line that opens the CSV files.
func (m Meta) header() string {
	return fmt.Sprintf("# dataset %s, %d rows; %d cores; %s; %s; %d run(s) per setting, %s, %d warm-up; load average %s at the start, %s at the end\n",
		m.Dataset, m.Rows, m.Cores, m.GoVersion, m.Date, m.Repeats, m.Order, m.Warmup, f(m.LoadStart, 2), f(m.LoadEnd, 2))
}

// WriteCSV writes one row per setting (Summarise): a comment line with the
// header (machine, dataset, repeats, load), then the varied keys, the rows,
// and the medians and spreads of the measures.
func WriteCSV(w io.Writer, meta Meta, keys []string, sums []Summary) error {
	if _, err := io.WriteString(w, meta.header()); err != nil {
		return err
	}
	cw := csv.NewWriter(w)
	if err := cw.Write(append(append([]string{"name"}, keys...), append([]string{"rows"}, summaryCols...)...)); err != nil {
		return err
	}
	for _, s := range sums {
		row := append(append([]string{s.Name}, s.Values...), strconv.Itoa(s.Rows))
		if err := cw.Write(append(row, s.fields()...)); err != nil {
			return err
		}
	}
	cw.Flush()
	return cw.Error()
}

var runCols = []string{"repeat", "order", "rows", "seconds", "neighbour_seconds", "affinity_seconds", "optimiser_seconds",
	"peak_memory_mib", "trustworthiness", "kl", "load_1min", "other_cpu", "error"}

// WriteRunsCSV writes every run, in the order they ran: the raw figures
// behind the medians, with the load average at each run's start and the
// cores other processes used during it.
func WriteRunsCSV(w io.Writer, meta Meta, keys []string, rs []Result) error {
	if _, err := io.WriteString(w, meta.header()); err != nil {
		return err
	}
	cw := csv.NewWriter(w)
	if err := cw.Write(append(append([]string{"name"}, keys...), runCols...)); err != nil {
		return err
	}
	for _, r := range rs {
		row := append(append([]string{r.Name}, r.Values...), strconv.Itoa(r.Repeat), strconv.Itoa(r.Order), strconv.Itoa(r.Rows),
			f(r.Seconds, 2), f(r.KNNSecs, 2), f(r.AffSecs, 2), f(r.OptSecs, 2), f(mib(r.PeakMem), 0), f(r.Trust, 4), f(r.KL, 4),
			f(r.Load, 2), f(r.OtherCPU, 2), r.Err)
		if err := cw.Write(row); err != nil {
			return err
		}
	}
	cw.Flush()
	return cw.Error()
}

// WriteMarkdown writes the settings as a Markdown table under a header
// that names the dataset, the machine, the repeats and the load, with the
// notes (KL left out, load warnings) below.
func WriteMarkdown(w io.Writer, meta Meta, keys []string, sums []Summary) error {
	var b strings.Builder
	fmt.Fprintf(&b, "Dataset: %s, %d rows. Machine: %d cores, %s. Date: %s.\n", meta.Dataset, meta.Rows, meta.Cores, meta.GoVersion, meta.Date)
	if meta.Command != "" {
		fmt.Fprintf(&b, "Command: `%s`\n", meta.Command)
	}
	fmt.Fprintf(&b, "Runs: %d per setting, %s, after %d untimed warm-up run(s); times are medians, the spread is the fastest and slowest run. Load average (1 min): %s at the start, %s at the end.\n",
		meta.Repeats, meta.Order, meta.Warmup, f(meta.LoadStart, 2), f(meta.LoadEnd, 2))
	fmt.Fprintf(&b, "Scores on a sample of rows, k = %d for trustworthiness, continuity and preservation; label accuracy is leave-one-out 10-NN. Settings with the same letter under P share their affinities P.\n\n", meta.K)
	head := append(append([]string{}, keys...), "wall s (median)", "fastest–slowest s", "neighbours s", "affinities s", "optimiser s", "s per iteration",
		"peak MiB", "recall", "trust", "contin.", "preserv.", "label acc map", "label acc input", "centroid τ", "P", "KL", "other CPU", "error")
	b.WriteString("| " + strings.Join(head, " | ") + " |\n|")
	for range head {
		b.WriteString(" --- |")
	}
	b.WriteString("\n")
	for _, s := range sums {
		c := s.fields()
		row := append(append([]string{}, s.Values...), c[1], spreadText(c[2], c[3]), c[5], c[6], c[7], c[8], c[9])
		row = append(row, c[12:]...)
		b.WriteString("| " + strings.Join(row, " | ") + " |\n")
	}
	for _, n := range meta.Notes {
		fmt.Fprintf(&b, "\n%s\n", n)
	}
	_, err := io.WriteString(w, b.String())
	return err
}

func spreadText(lo, hi string) string {
	if lo == "" {
		return ""
	}
	return lo + "–" + hi
}
