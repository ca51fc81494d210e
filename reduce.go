package nightjar

import (
	"fmt"

	"nightjar/ingest"
	"nightjar/internal/score"
	"nightjar/knn"
)

// ReduceAuto is the value of Settings.Reduce that lets the table decide: a
// table of more than autoReduceAbove features is projected onto its first
// autoReduceTo principal components, a narrower one is mapped as it is. Running
// t-SNE on the first 50 principal components of wide data is common practice
// (van der Maaten, JMLR 15, 2014, section 5; Kobak & Berens, Nat. Commun.
// 10:5416, 2019): the neighbour search then works in 50 dimensions.
const (
	ReduceAuto      = -1
	autoReduceAbove = 100
	autoReduceTo    = 50
)

// reduction is what Settings.Reduce asks ingest for: no reduction (0), a fixed
// number of components, or the automatic rule. Under the cosine metric the
// rows are scaled to unit length first, and compared by the Euclidean
// distance after the projection (the Euclidean distance between unit rows is
// √(2 − 2·cos), so the neighbours are the cosine ones up to the projection).
func (s *Settings) reduction() ingest.Reduction {
	m, _ := knn.ParseMetric(s.Metric)
	r := ingest.Reduction{Normalise: m == knn.Cosine}
	switch {
	case s.Reduce > 0:
		r.Components = s.Reduce
	case s.Reduce == ReduceAuto:
		r.Components, r.Above = autoReduceTo, autoReduceAbove
	}
	return r
}

// recordReduction notes the projection made while reading, and records it in
// the report; under the cosine metric, the rest of the run compares the
// projected rows by the Euclidean distance (j.s.Metric becomes "euclidean"
// for this invocation; the manifest and the report keep the setting).
func (j *job) recordReduction(pca *ingest.PCA, seconds float64) {
	r := newReduced(pca, j.s.Reduce == ReduceAuto, seconds)
	j.rep.Reduced = r
	share, method := r.ExplainedVariance, r.Method
	how := fmt.Sprintf("--reduce %d", pca.K)
	if j.s.Reduce == ReduceAuto {
		how = fmt.Sprintf("automatic for tables of more than %d features; --reduce 0 keeps every feature", autoReduceAbove)
	}
	norm := ""
	if pca.Normalised {
		norm = " of the rows scaled to unit length (cosine), compared by Euclidean distance from here on"
		j.s.Metric = knn.Euclidean.String()
	}
	j.obs.Note(fmt.Sprintf("reduced %d features to %d principal components%s (%s): %.1f%% of the variance; %s, %.1fs",
		pca.D, pca.K, norm, how, 100*share, method, seconds))
}

// newReduced describes a reduction for the report.
func newReduced(pca *ingest.PCA, auto bool, seconds float64) *Reduced {
	var kept float64
	for _, v := range pca.Variance {
		kept += v
	}
	share := 0.0
	if pca.TotalVariance > 0 {
		share = kept / pca.TotalVariance
	}
	method := "exact covariance"
	if pca.D > ingest.RandomizedAbove {
		method = fmt.Sprintf("randomised block Krylov iteration, %d passes", pca.Passes)
	}
	return &Reduced{From: pca.D, To: pca.K, Variance: pca.Variance, ExplainedVariance: share,
		Automatic: auto, Method: method, Normalised: pca.Normalised, AngleBound: pca.AngleBound, Seconds: seconds}
}

// SampleScores are report.json's scores of the map against the original
// features when the run was reduced, measured among the score sample only:
// both the original features and the components are ranked among the sampled
// rows, so that the two trustworthiness figures differ by what the
// projection cost and nothing else.
type SampleScores struct {
	Space             string  `json:"space"`
	Rows              int     `json:"rows"`
	K                 int     `json:"k"`
	Trustworthiness   float64 `json:"trustworthiness"`
	Continuity        float64 `json:"continuity"`
	ReducedSpace      string  `json:"reduced_space"`
	TrustworthinessIn float64 `json:"trustworthiness_reduced"`
	ContinuityIn      float64 `json:"continuity_reduced"`
}

// sampleScores reads the sampled rows' original features from the input of
// s (one more pass over it) and scores the map y of the reduced table t on
// them, ranking among the sample: the original features under the run's
// metric (cosine when the rows were normalised), and t's components.
func sampleScores(s Settings, threads int, t *ingest.Table, red *Reduced, rows []int32, y []float64, k int) (*SampleScores, error) {
	n := len(rows)
	if n < 4 {
		return nil, fmt.Errorf("too few sampled rows (%d)", n)
	}
	k = min(k, max(1, n/2-1))
	ds, err := openInput(s)
	if err != nil {
		return nil, err
	}
	opt := ingest.Options{Features: s.Features, ID: s.ID, Label: s.Label, SkipInvalid: s.SkipInvalid, Threads: threads}
	x, hash, err := ds.ReadRows(opt, rows)
	if err != nil {
		return nil, err
	}
	if hash != t.Hash {
		return nil, fmt.Errorf("the input %s changed since it was read", s.inputName())
	}
	sub := make([]float64, 0, n*s.Dims)
	comps := Matrix{N: n, D: t.D, Data: make([]float32, 0, n*t.D)}
	for _, i := range rows {
		sub = append(sub, y[int(i)*s.Dims:(int(i)+1)*s.Dims]...)
		comps.Data = append(comps.Data, t.Row(int(i))...)
	}
	orig, origSpace := score.InputSpace(x), "original features, Euclidean distance"
	if red.Normalised {
		orig, origSpace = score.CosineSpace(x), "original features, cosine distance"
	}
	mapSpace := score.MapSpace(sub, s.Dims)
	o := score.Neighbourhood(orig, mapSpace, k, nil, threads)
	r := score.Neighbourhood(score.InputSpace(comps), mapSpace, k, nil, threads)
	return &SampleScores{Space: origSpace, Rows: n, K: k, Trustworthiness: o.Trustworthiness, Continuity: o.Continuity,
		ReducedSpace: reducedSpace(red), TrustworthinessIn: r.Trustworthiness, ContinuityIn: r.Continuity}, nil
}

// reducedSpace names the space of a reduced table.
func reducedSpace(r *Reduced) string {
	if r.Normalised {
		return fmt.Sprintf("%d principal components of the rows scaled to unit length, Euclidean distance", r.To)
	}
	return fmt.Sprintf("%d principal components, Euclidean distance", r.To)
}
