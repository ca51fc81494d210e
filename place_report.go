package nightjar

import (
	"math"
	"runtime"
	"slices"

	"nightjar/internal/par"
)

// PlaceCaution is written into every placement report and map: the caution
// of every map, and what placement adds to it.
const PlaceCaution = Caution + " A placed row lands among its nearest reference rows: a population absent " +
	"from the reference has no place of its own in this map, so read the vote shares and the distances to " +
	"the nearest reference row before trusting a position or a voted label."

// PlaceReport is a placement's report.json (and, for a shard, the shard's
// report, which 'nightjar merge' combines).
type PlaceReport struct {
	Tool          string        `json:"tool"`
	Version       string        `json:"version"`
	Reference     string        `json:"reference"`
	ReferenceRows int           `json:"reference_rows"`
	Input         string        `json:"input"`
	Format        string        `json:"format"`
	Rows          int           `json:"rows"`       // rows placed in this output
	TableRows     int           `json:"table_rows"` // rows of the new table (after skipping)
	Skipped       int64         `json:"skipped_rows"`
	Shards        int           `json:"shards"`
	Shard         *int          `json:"shard,omitempty"`
	Features      int           `json:"features"`
	Reduced       bool          `json:"reduced"`
	Parameters    PlaceSettings `json:"parameters"`
	Threads       int           `json:"threads"`
	Cores         int           `json:"cores"`
	GoVersion     string        `json:"go_version"`
	Resumed       bool          `json:"resumed"`
	Neighbours    struct {
		Method  string  `json:"method"`
		K       int     `json:"k"`
		Seconds float64 `json:"seconds"`
		// Recall is recall@k against the exact search on RecallSample
		// sampled new rows (RecallHits of RecallSample·k neighbours found).
		Recall       *float64 `json:"recall,omitempty"`
		RecallSample int      `json:"recall_sample,omitempty"`
		RecallHits   int64    `json:"recall_hits,omitempty"`
	} `json:"neighbours"`
	Optimiser struct {
		Repulsion string  `json:"repulsion"`
		Steps     int     `json:"steps"`
		Seconds   float64 `json:"seconds"`
		// CostStart and CostEnd are the mean of each row's own KL term at
		// its median start and at its end; Lowered the share of rows whose
		// term went down.
		CostStart float64 `json:"cost_start"`
		CostEnd   float64 `json:"cost_end"`
		Lowered   float64 `json:"lowered"`
	} `json:"optimiser"`
	Scores          *PlaceScores       `json:"scores,omitempty"`
	Phases          map[string]float64 `json:"phase_seconds"`
	PeakMemoryBytes int64              `json:"peak_memory_bytes"`
	SecondsTotal    float64            `json:"seconds_total"`
	Caution         string             `json:"caution"`
}

// PlaceScores are the label scores of a placement.
type PlaceScores struct {
	// VoteShareMean and VoteShareMedian summarise the share of each row's
	// vote won by its voted label; LowShare is the fraction of rows below
	// one half: rows that fit no reference population well.
	VoteShareMean   float64 `json:"vote_share_mean"`
	VoteShareMedian float64 `json:"vote_share_median"`
	LowShare        float64 `json:"low_share"`
	// Agreement is the fraction of rows whose voted label is their own
	// label (with a label column in the new table).
	Agreement *float64 `json:"agreement,omitempty"`
	// MapAccuracy is the fraction of sampled rows (MapSample) whose own
	// label is the majority label of their MapK nearest reference rows in
	// the map.
	MapAccuracy *float64 `json:"map_accuracy,omitempty"`
	MapK        int      `json:"map_k,omitempty"`
	MapSample   int      `json:"map_sample,omitempty"`
}

func newPlaceReport(s PlaceSettings, ref *reference, threads int) PlaceReport {
	r := PlaceReport{Tool: "nightjar", Version: Version, Reference: s.Reference, ReferenceRows: ref.feat.X.N, Input: s.Input,
		Shards: s.Shards, Features: ref.feat.X.D, Reduced: ref.feat.PCA != nil, Parameters: s, Threads: threads,
		Cores: runtime.NumCPU(), GoVersion: runtime.Version(), Phases: map[string]float64{}, Caution: PlaceCaution}
	if s.Shards > 1 {
		shard := s.Shard
		r.Shard = &shard
	}
	return r
}

// ReadPlaceReport reads a placement's report.json.
func ReadPlaceReport(path string) (*PlaceReport, error) { return readJSONFile[PlaceReport](path) }

func writePlaceReport(path string, rep *PlaceReport) error { return writeJSONFile(path, rep) }

// mapK is the neighbourhood of the map accuracy (10-NN, as the run's label
// accuracy — common practice).
const mapK = 10

// placeScores computes the label scores of placed rows: their voted labels
// (indices into ref.classes, −1 for none), shares and own labels (nil when
// the new table has none), and their map positions y.
func placeScores(ref *reference, y []float64, voted []int32, share []float64, own []string, sample int, seed uint64, threads int) *PlaceScores {
	n := len(share)
	if ref.classes == nil || n == 0 {
		return nil
	}
	sc := &PlaceScores{}
	var sum float64
	low := 0
	for _, v := range share {
		sum += v
		if v < 0.5 {
			low++
		}
	}
	sc.VoteShareMean, sc.LowShare = sum/float64(n), float64(low)/float64(n)
	sorted := slices.Clone(share)
	slices.Sort(sorted)
	sc.VoteShareMedian = placeMedian(sorted)
	if own == nil {
		return sc
	}
	agree := 0
	for i, v := range voted {
		if v >= 0 && ref.classes[v] == own[i] {
			agree++
		}
	}
	a := float64(agree) / float64(n)
	sc.Agreement = &a
	if sample > 0 && len(ref.class) > mapK {
		rows := par.Sample(n, sample, seed, 0x91ace)
		acc := mapAccuracy(ref, y, own, rows, threads)
		sc.MapAccuracy, sc.MapK, sc.MapSample = &acc, mapK, len(rows)
	}
	return sc
}

// median returns the median of sorted values (the mean of the middle two
// for an even count).
func placeMedian(sorted []float64) float64 {
	n := len(sorted)
	if n == 0 {
		return math.NaN()
	}
	if n%2 == 1 {
		return sorted[n/2]
	}
	return (sorted[n/2-1] + sorted[n/2]) / 2
}

// mapAccuracy is the share of the listed placed rows whose label is the
// majority label of their mapK nearest reference rows in the map (k-NN
// classification, Cover & Hart 1967; a tie goes to the tied label with the
// nearest member, equal distances ordered by reference row).
func mapAccuracy(ref *reference, y []float64, own []string, rows []int32, threads int) float64 {
	d := ref.s.Dims
	parts := par.Map(len(rows), 64, threads, func() func(lo, hi int) int64 {
		h := make([]nbCandidate, 0, mapK)
		votes := make([]int, len(ref.classes))
		return func(lo, hi int) (right int64) {
			for _, i := range rows[lo:hi] {
				q := y[int(i)*d : int(i)*d+d]
				h = h[:0]
				for l := range len(ref.class) {
					var d2 float64
					for c := range d {
						t := q[c] - ref.y[l*d+c]
						d2 += t * t
					}
					c := nbCandidate{float32(d2), int32(l)}
					if len(h) < mapK {
						h = append(h, c)
						nbSiftUp(h, len(h)-1)
					} else if nbWorse(h[0], c) {
						h[0] = c
						nbSiftDown(h, 0)
					}
				}
				nbSort(h)
				clear(votes)
				for _, c := range h {
					votes[ref.class[c.i]]++
				}
				best, top := int32(-1), 0
				for _, c := range h {
					if v := votes[ref.class[c.i]]; v > top {
						best, top = ref.class[c.i], v
					}
				}
				if ref.classes[best] == own[i] {
					right++
				}
			}
			return right
		}
	})
	var right int64
	for _, p := range parts {
		right += p
	}
	return float64(right) / float64(len(rows))
}
