package nightjar

import (
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"strings"

	"nightjar/bench"
)

// FilePrediction is the name of the prediction file nightjar bench
// --predict writes; give it to embed or demo (Runtime.Prediction) and the
// run's report.json records it beside what the run measured.
const FilePrediction = "prediction.json"

// PredictionFile is prediction.json: for each setting compared, the
// predicted wall time and peak memory of a run on the whole table, from
// runs on random subsamples of it.
type PredictionFile struct {
	Tool    string `json:"tool"`
	Version string `json:"version"`
	Made    string `json:"made"` // RFC 3339 time
	Command string `json:"command,omitempty"`
	Table   string `json:"table"` // the full table
	Rows    int    `json:"rows"`  // its rows
	// Ladder holds the rows of the subsamples run, smallest first.
	Ladder   []int               `json:"ladder"`
	Cores    int                 `json:"cores"`
	Threads  int                 `json:"threads"`
	Seconds  float64             `json:"seconds"` // what making the prediction took
	Load     [2]float64          `json:"load_average"`
	Settings []SettingPrediction `json:"settings"`
}

// Range is a predicted value with its range; Refused, when not empty,
// says why there is no prediction (the numbers are then 0).
type Range struct {
	Value   float64 `json:"predicted,omitempty"`
	Low     float64 `json:"low,omitempty"`
	High    float64 `json:"high,omitempty"`
	Refused string  `json:"refused,omitempty"`
}

// rangeOf converts an estimate; values are rounded to rounding.
func rangeOf(e bench.Estimate, rounding float64) Range {
	if e.Refused != "" {
		return Range{Refused: e.Refused}
	}
	r := func(v float64) float64 { return math.Round(v/rounding) * rounding }
	return Range{Value: r(e.Value), Low: r(e.Low), High: r(e.High)}
}

// SettingPrediction is one setting of a prediction file.
type SettingPrediction struct {
	Name string `json:"name"`
	// Settings are the full run's settings as given (auto kept);
	// Neighbours and Repulsion name the methods auto resolves to.
	Settings   Settings `json:"settings"`
	Neighbours string   `json:"neighbours_method"`
	Repulsion  string   `json:"repulsion_method"`
	Seconds    Range    `json:"seconds"`
	// PeakMemoryBytes is the peak resident memory of the run's process.
	PeakMemoryBytes Range `json:"peak_memory_bytes"`
	// Phases holds each phase's predicted seconds and the law fitted.
	Phases []PhasePrediction `json:"phases"`
	// Quality holds the scores measured on each subsample (medians of the
	// repeats), smallest first, and TrustTrend the change of
	// trustworthiness per tenfold rows.
	Quality    []RungQuality `json:"quality"`
	TrustTrend *float64      `json:"trustworthiness_per_tenfold_rows,omitempty"`
	// LadderSeconds is the wall time of this setting's runs on the
	// subsamples: what its prediction cost.
	LadderSeconds float64  `json:"ladder_seconds"`
	Notes         []string `json:"notes,omitempty"`
}

// PhasePrediction is the prediction of one phase.
type PhasePrediction struct {
	Name    string  `json:"name"`
	Law     string  `json:"law"`
	Seconds Range   `json:"seconds"`
	Chi2    float64 `json:"chi2_per_dof,omitempty"`
}

// RungQuality is what a setting scored on one subsample.
type RungQuality struct {
	Rows            int      `json:"rows"`
	Runs            int      `json:"runs"`
	Seconds         float64  `json:"seconds"`
	PeakMemoryBytes int64    `json:"peak_memory_bytes"`
	Trustworthiness *float64 `json:"trustworthiness,omitempty"`
	Continuity      *float64 `json:"continuity,omitempty"`
	LabelAccuracy   *float64 `json:"label_accuracy_map,omitempty"`
	// Phases holds the medians of the phases' seconds as the prediction
	// fitted them (PhaseNeighbourPasses per pass).
	Phases map[string]float64 `json:"phase_seconds"`
}

// WritePredictionFile writes p as indented JSON to path, atomically.
func WritePredictionFile(path string, p *PredictionFile) error { return writeJSONFile(path, p) }

// ReadPredictionFile reads a prediction file. Errors are *SettingError
// naming the option "prediction", so that the command line reports them as
// the user's to fix.
func ReadPredictionFile(path string) (*PredictionFile, error) {
	bad := func(format string, args ...any) error {
		return &SettingError{Name: "prediction", Msg: fmt.Sprintf(format, args...)}
	}
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, bad("%s: %s", path, errorText(err))
	}
	var p PredictionFile
	if err := json.Unmarshal(b, &p); err != nil {
		return nil, bad("%s is not a prediction file: %v", path, err)
	}
	if p.Tool != "nightjar" || len(p.Settings) == 0 {
		return nil, bad("%s is not a prediction file of nightjar bench --predict", path)
	}
	return &p, nil
}

// PredictionCheck is the "prediction" object of report.json: the
// prediction a run was given (Runtime.Prediction), the setting of it that
// matches the run's, and, once the run has finished, how the measured
// wall time and peak memory compare with it.
type PredictionCheck struct {
	File    string `json:"file"`
	Made    string `json:"made,omitempty"`
	Setting string `json:"setting,omitempty"` // the matching setting's name
	Rows    int    `json:"rows,omitempty"`    // rows the prediction was made for
	Ladder  []int  `json:"ladder,omitempty"`
	Seconds Range  `json:"seconds"`
	Memory  Range  `json:"peak_memory_bytes"`
	// SecondsRatio and MemoryRatio are measured / predicted (report's
	// seconds_total and peak_memory_bytes); InRange says whether each fell
	// within the predicted range.
	SecondsRatio   *float64 `json:"measured_over_predicted_seconds,omitempty"`
	MemoryRatio    *float64 `json:"measured_over_predicted_memory,omitempty"`
	SecondsInRange *bool    `json:"seconds_in_range,omitempty"`
	MemoryInRange  *bool    `json:"memory_in_range,omitempty"`
	Note           string   `json:"note,omitempty"`
}

// predictionFor reads the prediction file at path (none when path is "")
// and picks the setting that equals s but for the input file.
func predictionFor(path string, s Settings) *PredictionCheck {
	if path == "" {
		return nil
	}
	abs, err := filepath.Abs(path)
	if err == nil {
		path = abs
	}
	c := &PredictionCheck{File: path}
	p, err := ReadPredictionFile(path)
	if err != nil {
		c.Note = err.Error()
		return c
	}
	c.Made, c.Rows, c.Ladder = p.Made, p.Rows, p.Ladder
	var names, differ []string
	for _, sp := range p.Settings {
		d := settingsDiffer(sp.Settings, s)
		if len(d) == 0 {
			c.Setting, c.Seconds, c.Memory = sp.Name, sp.Seconds, sp.PeakMemoryBytes
			return c
		}
		names = append(names, sp.Name)
		if differ == nil || len(d) < len(differ) {
			differ = d
		}
	}
	c.Note = fmt.Sprintf("no setting of the prediction (%s) has this run's settings; the nearest differs in %s", strings.Join(names, "; "), strings.Join(differ, ", "))
	return c
}

// settingsDiffer lists the options in which a and b differ, the input file
// aside.
func settingsDiffer(a, b Settings) []string {
	var out []string
	for _, o := range SettingOptions() {
		if o.Name == "input" {
			continue
		}
		va, _ := a.Get(o.Name)
		vb, _ := b.Get(o.Name)
		if va != vb && !(o.Kind == "list" && reflect.DeepEqual(trimList(va), trimList(vb))) {
			out = append(out, o.Name)
		}
	}
	return out
}

// measure compares the finished run of rep with the prediction.
func (c *PredictionCheck) measure(rep *Report) {
	if c == nil || c.Setting == "" || rep.SecondsTotal <= 0 {
		return
	}
	compare := func(r Range, got float64) (*float64, *bool) {
		if r.Refused != "" || r.Value <= 0 {
			return nil, nil
		}
		ratio := math.Round(got/r.Value*1000) / 1000
		in := got >= r.Low && got <= r.High
		return &ratio, &in
	}
	c.SecondsRatio, c.SecondsInRange = compare(c.Seconds, rep.SecondsTotal)
	c.MemoryRatio, c.MemoryInRange = compare(c.Memory, float64(rep.PeakMemoryBytes))
	switch {
	case rep.Resumed:
		c.Note = "the run was resumed: its seconds_total covers the last invocation only"
	case c.Rows > 0 && rep.Rows != c.Rows:
		c.Note = fmt.Sprintf("the prediction was made for %d rows; this run has %d", c.Rows, rep.Rows)
	}
}
