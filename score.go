package nightjar

import (
	"context"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"time"

	"nightjar/checkpoint"
	"nightjar/gradient"
	"nightjar/ingest"
	"nightjar/internal/score"
	"nightjar/knn"
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
	// Space names the space the scores measure the input in: the features
	// under the run's metric, or the principal components of a reduced run.
	Space string `json:"space"`
	// Original scores a reduced run's map against the original features,
	// among the sampled rows.
	Original *SampleScores `json:"original_features,omitempty"`
}

// scoreSpace is how the scores see the table a run mapped.
type scoreSpace struct {
	cosine bool
	name   string
}

// tableSpace returns the space of the table mapped under the metric: the
// principal components (Euclidean) when red is not nil, else the features.
func tableSpace(metric string, red *Reduced) scoreSpace {
	if red != nil {
		return scoreSpace{name: reducedSpace(red)}
	}
	if m, _ := knn.ParseMetric(metric); m == knn.Cosine {
		return scoreSpace{cosine: true, name: "input features, cosine distance"}
	}
	return scoreSpace{name: "input features, Euclidean distance"}
}

// scoreRun scores the finished map y of the job's table, whose features
// are x: in the table's space, and for a reduced run also against the
// original features on the sample (one more pass over the input). It
// writes nothing and calls no observer, so that a stop can abandon it:
// what it has to say comes back as a note and a warning.
func (j *job) scoreRun(x Matrix, y []float64, labels []string) (q Quality, note, warning string) {
	t := *j.table // a copy, to hold the features read back without keeping them
	t.Matrix = x
	q = scoreMap(t.Matrix, y, j.s.Dims, labels, scoreK, j.rt.ScoreSample, j.s.Seed, j.rt.Threads, tableSpace(j.s.Metric, j.rep.Reduced))
	if j.rep.Reduced != nil {
		t0 := time.Now()
		rows := score.Sample(t.N, j.rt.ScoreSample, j.s.Seed+2)
		o, err := sampleScores(j.s, j.rt.Threads, &t, j.rep.Reduced, rows, y, q.K)
		if err != nil {
			warning = "no scores against the original features: " + err.Error()
		} else {
			q.Original = o
			note = fmt.Sprintf("trustworthiness@%d among the %d sampled rows: %.4f against the original features, %.4f against the components", o.K, o.Rows, o.Trustworthiness, o.TrustworthinessIn)
		}
		q.Seconds += time.Since(t0).Seconds()
	}
	return q, note, warning
}

// scoreK is the neighbourhood size of the scores (trustworthiness@10 is the
// usual figure in published comparisons — common practice), and labelK that
// of the label accuracy (a 10-nearest-neighbour vote, common practice).
const (
	scoreK = 10
	labelK = 10
)

// scoreMap computes the quality scores of map y (N×dims) of x on a seeded sample.
// k is capped below N/2, where trustworthiness is defined (Venna & Kaski 2001).
// The input is seen in the space sp: its features under the run's metric
// (score.CosineSpace for cosine), or a reduced run's components.
func scoreMap(x Matrix, y []float64, dims int, labels []string, k, sample int, seed uint64, threads int, sp scoreSpace) Quality {
	t0 := time.Now()
	if k > x.N/2-1 {
		k = max(1, x.N/2-1)
	}
	rows := score.Sample(x.N, sample, seed+2)
	q := Quality{K: k, Sample: len(rows), Space: sp.name}
	in := score.InputSpace(x)
	centroids := score.CentroidRank
	if sp.cosine {
		in, centroids = score.CosineSpace(x), score.CentroidRankUnit
	}
	// With labels and k = labelK, the label accuracies come from the same
	// neighbour lists as trustworthiness: one pass over the distances
	// instead of three (at 1,000,000 rows the distance rows of the sample
	// are most of the scores' time).
	var withLabels []string
	if labels != nil && k == labelK {
		withLabels = labels
	}
	nb := score.NeighbourhoodLabels(in, score.MapSpace(y, dims), k, rows, threads, withLabels)
	q.Trustworthiness, q.Continuity, q.Preservation = nb.Trustworthiness, nb.Continuity, nb.Preservation
	if labels != nil {
		mapAcc, inAcc := nb.LabelMap, nb.LabelInput
		if withLabels == nil {
			mapAcc = score.LabelAccuracy(score.MapSpace(y, dims), labels, labelK, rows, threads)
			inAcc = score.LabelAccuracy(in, labels, labelK, rows, threads)
		}
		q.LabelAccuracyMap, q.LabelAccuracyInput, q.LabelK = &mapAcc, &inAcc, labelK
		if c := centroids(x, y, dims, labels); !math.IsNaN(c) {
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
	x, pca, err := readTable(s, opt.Threads, nil)
	if err != nil {
		return nil, err
	}
	if same, why := m.Input.Same(settingsFingerprint(s, x.Hash)); !same {
		return nil, &RunDirError{Dir: run.Dir, Msg: "input " + s.inputName() + " changed since the run (" + why + ")"}
	}
	var red *Reduced
	if pca != nil {
		red = newReduced(pca, s.Reduce == ReduceAuto, 0)
	}
	y, err := readMap(run.Path(FileEmbedding), s.Dims, x.N)
	if err != nil {
		return nil, err
	}
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	q := scoreMap(x.Matrix, y, s.Dims, labelStrings(x.Label), opt.K, opt.Sample, s.Seed, opt.Threads, tableSpace(s.Metric, red))
	t0 := time.Now()
	if red != nil {
		rows := score.Sample(x.N, opt.Sample, s.Seed+2)
		if o, err := sampleScores(s, opt.Threads, x, red, rows, y, q.K); err == nil {
			q.Original = o
		}
	}
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

// fingerprint is the fingerprint of the input at path (a file, directory or
// glob) with the values' hash; just the path when it cannot be read.
func fingerprint(path, hash string) checkpoint.Fingerprint {
	return settingsFingerprint(Settings{Input: path}, hash)
}

// settingsFingerprint is the fingerprint of the settings' input (every part)
// with the values' hash; the name and the hash when it cannot be read.
func settingsFingerprint(s Settings, hash string) checkpoint.Fingerprint {
	fp, err := inputFingerprint(s)
	if err != nil {
		return checkpoint.Fingerprint{Path: s.inputName(), ValuesHash: hash}
	}
	fp.ValuesHash = hash
	return fp
}
