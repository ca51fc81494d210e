package nightjar

import (
	"fmt"
	"math"
	"path/filepath"
	"reflect"
	"strings"

	"nightjar/gradient"
)

// PlaceSettings shape a placement of new rows into a finished map (Place).
// They are recorded in the placement's directory, so that a placement
// stopped half-way continues with exactly the settings it began with.
// DefaultPlaceSettings holds the defaults. Each field's `flag` tag is the
// name the command line gives it (PlaceOptions lists them).
//
// The optimiser settings were chosen by measurement on held-out rows (see
// DefaultPlaceSettings); the perplexity, metric, kernel and map dimensions
// are the reference run's own.
type PlaceSettings struct {
	// Reference is the finished run directory whose map the rows go into
	// (set by Place from its argument).
	Reference string `json:"reference"`
	Input     string `json:"input" flag:"input" help:"table of new rows: Parquet, Arrow IPC or CSV with the reference's feature columns (by name)" topic:"input"`
	ID        string `json:"id,omitempty" flag:"id" help:"column of the new table carried through to placed.parquet to join on (default: the reference's id column, when the new table has it)" topic:"input"`
	Label     string `json:"label,omitempty" flag:"label" help:"column of the new table holding known labels, compared with the labels voted by the reference (default: the reference's label column, when the new table has it)" topic:"input"`
	// Features selects the new table's feature columns; empty means the
	// reference run's own selection. The selected names must be the
	// reference's feature names.
	Features    []string `json:"features,omitempty" flag:"features" help:"feature columns of the new table: names and glob patterns (default: the reference run's selection); they must be the reference's features" topic:"input"`
	SkipInvalid bool     `json:"skip_invalid" flag:"skip-invalid" help:"drop new rows with NaN, Inf or empty features instead of stopping, and report how many" topic:"input"`

	Neighbours string `json:"neighbours" flag:"neighbours" help:"neighbours of new rows among the reference rows: exact, index (the saved neighbour index of 'nightjar place --prepare'), or auto = exact up to 20,000 reference rows, else index" topic:"neighbours"`
	// CheckRecall is the number of new rows sampled to measure the recall of
	// the index against the exact search (0 = none).
	CheckRecall int `json:"check_recall" flag:"check-recall" help:"new rows sampled to measure the recall of the neighbour index against the exact search (0 = off)" topic:"neighbours"`

	Steps             int     `json:"steps" flag:"steps" help:"gradient steps per new row after its start at the median map position of its 10 nearest reference neighbours (0 = keep the start)" topic:"optimiser"`
	LearningRate      float64 `json:"learning_rate" flag:"learning-rate" help:"step size of the gradient steps (a row's gradient is bounded, so this is in map units)" topic:"optimiser"`
	Momentum          float64 `json:"momentum" flag:"momentum" help:"momentum of the gradient steps" topic:"optimiser"`
	Exaggeration      float64 `json:"early_exaggeration" flag:"early-exaggeration" help:"factor on the attraction to the reference neighbours during the first --early-steps steps" topic:"optimiser"`
	ExaggerationSteps int     `json:"early_steps" flag:"early-steps" help:"steps with --early-exaggeration" topic:"optimiser"`
	Theta             float64 `json:"theta" flag:"theta" help:"Barnes–Hut accuracy of the reference's repulsion: 0 is exact, larger is faster and rougher" topic:"optimiser"`
	Repulsion         string  `json:"repulsion" flag:"repulsion" help:"the reference's repulsion: auto, exact, tree (Barnes–Hut walk per row) or grid (values at grid nodes computed once, interpolated; 2-D)" topic:"optimiser"`

	// Shard and Shards place only rows [Shard·n/Shards, (Shard+1)·n/Shards)
	// of the n new rows, writing a part for 'nightjar merge'.
	Shard  int `json:"shard" flag:"shard" help:"place only the rows of shard number N (0-based) of --shards contiguous row ranges, into DIR/parts (merge the parts with nightjar merge DIR)" topic:"running"`
	Shards int `json:"shards" flag:"shards" help:"number of shards (1 = the whole table into DIR)" topic:"running"`
	// Seed draws the rows of the recall check.
	Seed uint64 `json:"seed" flag:"seed" help:"seed of the rows sampled for the recall check and the scores" topic:"running"`
}

// DefaultPlaceSettings returns the defaults of a placement: the start at
// the median of the 10 nearest reference neighbours, then 100 steps of size
// 1 with momentum 0.5 and the delta-bar-delta gains, the attraction
// multiplied by 4 for the first 25. They were chosen by measurement on
// held-out rows, one setting varied at a time (bench/RESULTS.md, "Placing
// new rows": MNIST test digits 2,001–4,000 into a map of 10,000 training
// digits, and 5,000 held-out rows of the demo survey into a map of 20,000):
// 100 steps lower the mean KL term of a row from 2.49 at the start to 2.244
// (200 steps: 2.236; 50: 2.254), a step size of 0.5 or 2 and momentum 0.8
// change it by less than 0.005, the early exaggeration of 4 lowers it by
// 0.026 against none (12: by a further 0.012, with 0.6 % of rows ending
// above their start instead of 0.2 %), and the gains by 0.015. The recall
// check samples 1,000 rows, as the embedding run's does.
func DefaultPlaceSettings() PlaceSettings {
	return PlaceSettings{
		Neighbours: "auto", CheckRecall: 1000,
		Steps: 100, LearningRate: 1, Momentum: 0.5, Exaggeration: 4, ExaggerationSteps: 25,
		Theta: 0.5, Repulsion: "auto", Shards: 1, Seed: 1,
	}
}

// PlaceOptions lists the options of PlaceSettings, in field order.
func PlaceOptions() []Option { return optionsOf(reflect.TypeFor[PlaceSettings](), true) }

// Set sets the option called name (a PlaceOptions name) from text.
func (s *PlaceSettings) Set(name, value string) error { return set(s, name, value) }

// Get returns the option called name as text.
func (s *PlaceSettings) Get(name string) (string, error) { return get(s, name) }

// Validate checks the settings; errors are *SettingError naming the option.
func (s *PlaceSettings) Validate() error {
	bad := func(name, format string, args ...any) error {
		return &SettingError{Name: name, Msg: fmt.Sprintf(format, args...)}
	}
	switch s.Neighbours {
	case "auto", "exact", "index":
	default:
		return bad("neighbours", "must be auto, exact or index, got %q", s.Neighbours)
	}
	if _, err := gradient.ParseMethod(s.Repulsion); err != nil {
		return bad("repulsion", "%v", err)
	}
	switch {
	case s.CheckRecall < 0:
		return bad("check-recall", "must be 0 or more, got %d", s.CheckRecall)
	case s.Steps < 0 || s.Steps > 100000:
		return bad("steps", "must be in [0, 100000], got %d", s.Steps)
	case !(s.LearningRate > 0) || math.IsInf(s.LearningRate, 0):
		return bad("learning-rate", "must be above 0, got %g", s.LearningRate)
	case !(s.Momentum >= 0 && s.Momentum < 1):
		return bad("momentum", "must be in [0, 1), got %g", s.Momentum)
	case !(s.Exaggeration > 0 && s.Exaggeration <= 1e4):
		return bad("early-exaggeration", "must be in (0, 10000], got %g", s.Exaggeration)
	case s.ExaggerationSteps < 0:
		return bad("early-steps", "must be 0 or more, got %d", s.ExaggerationSteps)
	case !(s.Theta >= 0 && s.Theta <= 2):
		return bad("theta", "must be in [0, 2], got %g", s.Theta)
	case s.Shards < 1 || s.Shards > 99999:
		return bad("shards", "must be in [1, 99999], got %d", s.Shards)
	case s.Shard < 0 || s.Shard >= s.Shards:
		return bad("shard", "must be in [0, %d) for --shards %d, got %d", s.Shards, s.Shards, s.Shard)
	}
	return nil
}

// Names of the files a placement writes.
const (
	FilePlaced   = "placed.parquet"
	FileStateDir = "placement.json" // a placement's own record of its settings and progress
	dirParts     = "parts"
	dirShards    = "shards"
	dirChunks    = "chunks"
)

// PartName is the file name of shard i of n in the parts directory.
func PartName(i, n int) string { return fmt.Sprintf("part-%05d-of-%05d.parquet", i, n) }

// shardName names the working directory of shard i of n.
func shardName(i, n int) string { return fmt.Sprintf("%05d-of-%05d", i, n) }

// placeDirs returns the directory a placement keeps its state in and the
// path of its table of placed rows: out itself and out/placed.parquet for
// a whole placement, out/shards/IIIII-of-NNNNN and out/parts/part-… for a
// shard.
func placeDirs(out string, s PlaceSettings) (state, table string) {
	if s.Shards <= 1 {
		return out, filepath.Join(out, FilePlaced)
	}
	return filepath.Join(out, dirShards, shardName(s.Shard, s.Shards)), filepath.Join(out, dirParts, PartName(s.Shard, s.Shards))
}

// PlaceResult is what a finished placement produced.
type PlaceResult struct {
	Dir      string // the placement's directory (a shard's working directory for a shard)
	Placed   string // placed.parquet, or the shard's part
	MapImage string // map.png ("" for a shard: the merge draws it)
	MapPage  string // map.html ("" for a shard)
	Report   *PlaceReport
	// AlreadyFinished is set when the directory held the finished placement.
	AlreadyFinished bool
}

// differs tells how two placements' settings differ ("" when they do
// not), comparing what shapes the result.
func (s PlaceSettings) differs(o PlaceSettings) string {
	var diffs []string
	for _, opt := range append(PlaceOptions(), Option{Name: "reference"}) {
		var a, b string
		if opt.Name == "reference" {
			a, b = s.Reference, o.Reference
		} else {
			a, _ = s.Get(opt.Name)
			b, _ = o.Get(opt.Name)
		}
		if a != b {
			diffs = append(diffs, fmt.Sprintf("%s %q, now %q", opt.Name, a, b))
		}
	}
	return strings.Join(diffs, "; ")
}
