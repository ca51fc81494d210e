package nightjar

import (
	"context"
	"math"
	"os"
	"path/filepath"
	"time"

	"nightjar/checkpoint"
	"nightjar/gradient"
	"nightjar/ingest"
	"nightjar/internal/score"
)

// Quality is the "quality" object of report.json: scores of the map
// measured on a seeded sample of rows (see the score package's formulas).
type Quality struct {
	K                  int      `json:"k"`
	Sample             int      `json:"sample"`
	Trustworthiness    float64  `json:"trustworthiness"`
	Continuity         float64  `json:"continuity"`
	Preservation       float64  `json:"neighbourhood_preservation"`
	LabelAccuracyMap   *float64 `json:"label_accuracy_map,omitempty"`
	LabelAccuracyInput *float64 `json:"label_accuracy_input,omitempty"`
	LabelK             int      `json:"label_k,omitempty"`
	// CentroidRank is how well the map keeps the order of distances
	// between the labelled groups' centroids (a rank correlation).
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
func scoreMap(x Matrix, y []float64, dims int, labels []string, k, sample int, seed uint64, threads int) Quality {
	t0 := time.Now()
	if k > x.N/2-1 {
		k = max(1, x.N/2-1)
	}
	rows := score.Sample(x.N, sample, seed+2)
	q := Quality{K: k, Sample: len(rows)}
	nb := score.Neighbourhood(score.InputSpace(x), score.MapSpace(y, dims), k, rows, threads)
	q.Trustworthiness, q.Continuity, q.Preservation = nb.Trustworthiness, nb.Continuity, nb.Preservation
	if labels != nil {
		mapAcc := score.LabelAccuracy(score.MapSpace(y, dims), labels, 10, rows, threads)
		inAcc := score.LabelAccuracy(score.InputSpace(x), labels, 10, rows, threads)
		q.LabelAccuracyMap, q.LabelAccuracyInput, q.LabelK = &mapAcc, &inAcc, 10
		if c := score.CentroidRank(x, y, dims, labels); !math.IsNaN(c) {
			q.CentroidRank = &c
		}
	}
	q.Seconds = time.Since(t0).Seconds()
	return q
}

// finalKL returns KL(P‖Q) of map y: exact when N is small enough for the O(N²)
// sum, else the optimiser's value from its last iteration (Z from the
// repulsion approximation).
func finalKL(P CSR, y []float64, s Settings, optKL float64) (float64, string) {
	if P.N > 0 && P.N <= exactKLRows {
		return gradient.KLExact(P, y, s.Dims, s.Dof), "exact"
	}
	return optKL, "optimiser, last iteration (Z from the approximate repulsion)"
}

// ScoreOptions are the choices of Score.
type ScoreOptions struct {
	Sample  int // rows sampled, ≥ 1
	K       int // neighbourhood size of trustworthiness, continuity and preservation, ≥ 1
	Threads int // worker goroutines, ≥ 1; the scores do not depend on it
}

// Score recomputes the quality scores of the finished run in dir on a new
// sample, writes them into its report.json and returns them. The input must
// be the one the run was made from (its fingerprint is checked).
func Score(ctx context.Context, dir string, opt ScoreOptions) (*Quality, error) {
	if opt.Sample < 1 || opt.K < 1 || opt.Threads < 1 {
		return nil, &SettingError{Msg: "score: the sample, k and threads must be at least 1"}
	}
	if _, err := os.Stat(filepath.Join(dir, checkpoint.ManifestName)); err != nil {
		return nil, &RunDirError{Dir: dir, Msg: "is not a run directory (no " + checkpoint.ManifestName + ")"}
	}
	// Score rewrites report.json: it takes the writer lock, so it never
	// touches a live run.
	lock, err := checkpoint.AcquireLock(dir)
	if err != nil {
		return nil, err
	}
	defer lock.Release()
	run, err := checkpoint.Open(dir)
	if err != nil {
		return nil, &RunDirError{Dir: dir, Msg: errorText(err)}
	}
	m := run.Manifest()
	if m.Status != checkpoint.StatusFinished {
		return nil, &RunDirError{Dir: run.Dir, Msg: "is not finished (status " + m.Status + "); run 'nightjar resume " + run.Dir + "' first"}
	}
	s, err := settingsOf(run)
	if err != nil {
		return nil, err
	}
	x, _, err := readTable(s, opt.Threads, nil)
	if err != nil {
		return nil, err
	}
	if same, why := m.Input.Same(fingerprint(s.Input, x.Hash)); !same {
		return nil, &RunDirError{Dir: run.Dir, Msg: "input " + s.Input + " changed since the run (" + why + ")"}
	}
	y, err := readMap(run.Path(FileEmbedding), s.Dims, x.N)
	if err != nil {
		return nil, err
	}
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	q := scoreMap(x.Matrix, y, s.Dims, labelStrings(x.Label), opt.K, opt.Sample, s.Seed, opt.Threads)
	t0 := time.Now()
	q.KL, q.KLMethod = m.KL, "optimiser, last iteration"
	if x.N <= exactKLRows {
		if secs, err := run.LoadArtifact(fileP, "affinity"); err == nil {
			if P, err := csrFromSections(secs, x.N); err == nil {
				q.KL, q.KLMethod = finalKL(*P, y, s, m.KL)
			}
		}
	}
	q.Seconds += time.Since(t0).Seconds()
	rep, err := ReadReport(run.Path(FileReport))
	if err != nil {
		r := newReport(s, Runtime{Threads: opt.Threads})
		rep = &r
	}
	rep.Quality = &q
	if err := writeReport(run.Path(FileReport), rep); err != nil {
		return nil, err
	}
	return &q, nil
}

// readMap reads the map columns of an embedding.parquet of n rows.
func readMap(path string, dims, n int) ([]float64, error) {
	emb, err := ingest.Read(path, ingest.Options{Features: []string{"map_1", "map_2", "map_3"}[:dims], Threads: 1})
	if err != nil {
		return nil, err
	}
	if emb.N != n {
		return nil, &RunDirError{Dir: path, Msg: "has " + itoa(emb.N) + " rows, the input " + itoa(n)}
	}
	y := make([]float64, len(emb.Data))
	for i, v := range emb.Data {
		y[i] = float64(v)
	}
	return y, nil
}

// fingerprint is the fingerprint of the file at path with the values' hash;
// just the path when the file cannot be read.
func fingerprint(path, hash string) checkpoint.Fingerprint {
	fp, err := checkpoint.FingerprintFile(path)
	if err != nil {
		return checkpoint.Fingerprint{Path: path}
	}
	fp.ValuesHash = hash
	return fp
}
