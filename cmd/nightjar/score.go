package main

import (
	"encoding/json"
	"fmt"
	"io"
	"math"
	"os"
	"time"

	"nightjar/bench"
	"nightjar/checkpoint"
	"nightjar/gradient"
	"nightjar/ingest"
)

// quality is the "quality" object of report.json.
type quality struct {
	K                  int      `json:"k"`
	Sample             int      `json:"sample"`
	Trustworthiness    float64  `json:"trustworthiness"`
	Continuity         float64  `json:"continuity"`
	Preservation       float64  `json:"neighbourhood_preservation"`
	LabelAccuracyMap   *float64 `json:"label_accuracy_map,omitempty"`
	LabelAccuracyInput *float64 `json:"label_accuracy_input,omitempty"`
	LabelK             int      `json:"label_k,omitempty"`
	// CentroidRank is bench.CentroidRank: how well the map keeps the order
	// of distances between the labelled groups' centroids.
	CentroidRank *float64 `json:"centroid_rank,omitempty"`
	KL           float64  `json:"kl"`
	KLMethod     string   `json:"kl_method"`
	Seconds      float64  `json:"seconds"`
}

// scoreK is the neighbourhood size of the scores (trustworthiness@10 is the
// usual figure in published comparisons — common practice).
const scoreK = 10

// scoreMap computes the quality scores of map y (N×dims) of x on a seeded sample.
// k is capped below N/2, where trustworthiness is defined (Venna & Kaski 2001).
func scoreMap(x ingest.Matrix, y []float64, dims int, labels []string, k, sample int, seed uint64, threads int) quality {
	t0 := time.Now()
	if k > x.N/2-1 {
		k = max(1, x.N/2-1)
	}
	rows := bench.Sample(x.N, sample, seed+2)
	q := quality{K: k, Sample: len(rows)}
	nb := bench.Neighbourhood(x, y, dims, k, rows, threads)
	q.Trustworthiness, q.Continuity, q.Preservation = nb.Trustworthiness, nb.Continuity, nb.Preservation
	if labels != nil {
		mapAcc := bench.LabelAccuracy(bench.MapSpace(y, dims), labels, 10, rows, threads)
		inAcc := bench.LabelAccuracy(bench.InputSpace(x), labels, 10, rows, threads)
		q.LabelAccuracyMap, q.LabelAccuracyInput, q.LabelK = &mapAcc, &inAcc, 10
		if c := bench.CentroidRank(x, y, dims, labels); !math.IsNaN(c) {
			q.CentroidRank = &c
		}
	}
	q.Seconds = time.Since(t0).Seconds()
	return q
}

func runScore(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("score", "(re)compute the quality scores of a finished run and update its report.json",
		"nightjar score --run runs/cells --sample 5000", stderr)
	dir := fs.String("run", "", "finished run directory (required)")
	sample := fs.Int("sample", 2000, "rows sampled for the scores")
	k := fs.Int("k", scoreK, "neighbourhood size of trustworthiness, continuity and preservation")
	threads := fs.Int("threads", defaultThreads(), "worker threads")
	if _, err := parseFlags(fs, args, 0); err != nil {
		return err
	}
	if *dir == "" {
		return usagef("score: --run DIR is required")
	}
	if *sample < 1 || *k < 1 || *threads < 1 {
		return usagef("score: --sample, --k and --threads must be at least 1")
	}
	run, err := checkpoint.Open(*dir)
	if err != nil {
		return &usageError{err.Error()}
	}
	m := run.Manifest()
	if m.Status != checkpoint.StatusFinished {
		return usagef("score: %s is not finished (status %s); run 'nightjar resume %s' first", run.Dir, m.Status, run.Dir)
	}
	s := defaultSettings()
	if err := json.Unmarshal(m.Params, &s); err != nil {
		return fmt.Errorf("%s: manifest parameters unreadable: %w", run.Dir, err)
	}
	x, _, err := readTable(s, nil)
	if err != nil {
		return err
	}
	if same, why := m.Input.Same(checkpointFingerprint(s.Input, x.Hash)); !same {
		return &usageError{fmt.Sprintf("score: input %s changed since the run (%s)", s.Input, why)}
	}
	mapCols := []string{"map_1", "map_2", "map_3"}[:s.Dims]
	emb, err := ingest.Read(run.Path(fileEmbedding), ingest.Options{Features: mapCols})
	if err != nil {
		return err
	}
	if emb.N != x.N {
		return fmt.Errorf("%s has %d rows, the input %d", run.Path(fileEmbedding), emb.N, x.N)
	}
	y := make([]float64, len(emb.Data))
	for i, v := range emb.Data {
		y[i] = float64(v)
	}
	q := scoreMap(x.Matrix, y, s.Dims, labelStrings(x.Label), *k, *sample, s.Seed, *threads)
	t0 := time.Now()
	q.KL, q.KLMethod = m.KL, "optimiser, last iteration"
	if x.N <= gradient.ExactLimit {
		if secs, err := run.LoadArtifact(fileP, "affinity"); err == nil {
			if P, err := csrFromSections(secs, x.N); err == nil {
				q.KL, q.KLMethod = finalKL(toAffinities(P), y, s, m.KL)
			}
		}
	}
	q.Seconds += time.Since(t0).Seconds()
	var rep report
	if b, err := os.ReadFile(run.Path(fileReport)); err == nil {
		_ = json.Unmarshal(b, &rep)
	} else {
		rep = newReport(s, runtimeOpts{Threads: *threads})
	}
	rep.Quality = &q
	if err := writeReport(run.Path(fileReport), &rep); err != nil {
		return err
	}
	enc := json.NewEncoder(stdout)
	enc.SetIndent("", "  ")
	return enc.Encode(q)
}

func checkpointFingerprint(path, hash string) checkpoint.Fingerprint {
	fp, err := checkpoint.FingerprintFile(path)
	if err != nil {
		return checkpoint.Fingerprint{Path: path}
	}
	fp.ValuesHash = hash
	return fp
}

// labelStrings returns the label column as text, or nil without labels.
func labelStrings(c *ingest.Column) []string {
	if c == nil {
		return nil
	}
	out := make([]string, c.Len())
	for i := range out {
		out[i] = c.String(i)
	}
	return out
}

// finalKL returns KL(P‖Q) of map y: exact when N is small enough for the O(N²)
// sum, else the optimiser's value from its last iteration (Z from the
// repulsion approximation).
func finalKL(P gradient.Affinities, y []float64, s settings, optKL float64) (float64, string) {
	if P.N > 0 && P.N <= gradient.ExactLimit { // the pipeline keeps P only that small
		return gradient.KLExact(P, y, s.Dims, s.Dof), "exact"
	}
	return optKL, "optimiser, last iteration (Z from the approximate repulsion)"
}
