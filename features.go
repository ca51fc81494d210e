package nightjar

import (
	"encoding/json"
	"fmt"

	"nightjar/checkpoint"
	"nightjar/ingest"
)

// A finished run keeps what placing new rows into its map needs: the
// features the map was made from (float32, after --reduce if any), their
// names, and the --reduce projection with the names of the input columns it
// projects. They are one artifact of the run directory, features.njs, with
// named sections checked when loaded: shape (N, D), names (JSON), hash (the
// input's fingerprint), values (N×D float32, little-endian), and with a
// projection pca_shape (K, D, rows fitted, passes, normalised), pca_totals
// (total variance, angle bound), pca_names (JSON), pca_mean (D float64),
// pca_components (K×D float64) and pca_variance (K float64).

// fileFeatures is the artifact name (features.njs) and kindFeatures its kind.
const (
	fileFeatures = "features"
	kindFeatures = "features"
)

// refFeatures is the content of features.njs.
type refFeatures struct {
	X     Matrix
	Names []string // the D feature names of X
	Hash  string   // ingest's fingerprint of the input values
	// PCA is the --reduce projection (nil without it); SourceNames are the
	// input columns it projects, in order (nil when they could not be told).
	PCA         *ingest.PCA
	SourceNames []string
}

// saveFeatures writes t's features (and the projection that made them, with
// the names of the input columns it projects) into the run directory.
func (j *job) saveFeatures(t *ingest.Table, pca *ingest.PCA) error {
	f := refFeatures{X: t.Matrix, Names: t.Features, Hash: t.Hash, PCA: pca}
	if pca != nil && len(t.SourceFeatures) == pca.D {
		f.SourceNames = t.SourceFeatures
	}
	secs, err := featureSections(&f)
	if err != nil {
		return err
	}
	if err := j.run.SaveArtifact(fileFeatures, kindFeatures, secs); err != nil {
		return fmt.Errorf("saving the features for placement: %w", err)
	}
	return nil
}

// featureSections encodes f; the values are not copied.
func featureSections(f *refFeatures) ([]checkpoint.Section, error) {
	names, err := json.Marshal(f.Names)
	if err != nil {
		return nil, err
	}
	secs := []checkpoint.Section{
		{Name: "shape", Data: checkpoint.EncodeValues([]int64{int64(f.X.N), int64(f.X.D)})},
		{Name: "names", Data: names},
		{Name: "hash", Data: []byte(f.Hash)},
		{Name: "values", Data: checkpoint.View(f.X.Data)},
	}
	if p := f.PCA; p != nil {
		src, err := json.Marshal(f.SourceNames)
		if err != nil {
			return nil, err
		}
		secs = append(secs,
			checkpoint.Section{Name: "pca_shape", Data: checkpoint.EncodeValues([]int64{int64(p.K), int64(p.D), p.N, int64(p.Passes), boolInt(p.Normalised)})},
			checkpoint.Section{Name: "pca_totals", Data: checkpoint.EncodeValues([]float64{p.TotalVariance, p.AngleBound})},
			checkpoint.Section{Name: "pca_names", Data: src},
			checkpoint.Section{Name: "pca_mean", Data: checkpoint.EncodeValues(p.Mean)},
			checkpoint.Section{Name: "pca_components", Data: checkpoint.EncodeValues(p.Components)},
			checkpoint.Section{Name: "pca_variance", Data: checkpoint.EncodeValues(p.Variance)})
	}
	return secs, nil
}

// featuresFromSections decodes features.njs and checks that its parts agree.
func featuresFromSections(secs []checkpoint.Section) (*refFeatures, error) {
	shape, err := checkpoint.SectionValues[int64](secs, "shape")
	if err != nil {
		return nil, err
	}
	if len(shape) != 2 || shape[0] < 1 || shape[1] < 1 {
		return nil, fmt.Errorf("features: bad shape %v", shape)
	}
	f := &refFeatures{X: Matrix{N: int(shape[0]), D: int(shape[1])}}
	if f.X.Data, err = checkpoint.SharedSectionValues[float32](secs, "values"); err != nil {
		return nil, err
	}
	if len(f.X.Data) != f.X.N*f.X.D {
		return nil, fmt.Errorf("features: %d values for %d×%d", len(f.X.Data), f.X.N, f.X.D)
	}
	if err := jsonSection(secs, "names", &f.Names); err != nil {
		return nil, err
	}
	if len(f.Names) != f.X.D {
		return nil, fmt.Errorf("features: %d names for %d columns", len(f.Names), f.X.D)
	}
	hash, err := checkpoint.Lookup(secs, "hash")
	if err != nil {
		return nil, err
	}
	f.Hash = string(hash)
	if _, err := checkpoint.Lookup(secs, "pca_shape"); err != nil {
		return f, nil
	}
	return f, pcaFromSections(secs, f)
}

// pcaFromSections decodes the projection of features.njs into f.
func pcaFromSections(secs []checkpoint.Section, f *refFeatures) error {
	ps, err := checkpoint.SectionValues[int64](secs, "pca_shape")
	if err != nil {
		return err
	}
	if len(ps) != 5 || ps[0] != int64(f.X.D) || ps[1] < ps[0] {
		return fmt.Errorf("features: projection shape %v does not fit %d columns", ps, f.X.D)
	}
	p := &ingest.PCA{K: int(ps[0]), D: int(ps[1]), N: ps[2], Passes: int(ps[3]), Normalised: ps[4] == 1}
	totals, err := checkpoint.SectionValues[float64](secs, "pca_totals")
	if err != nil || len(totals) != 2 {
		return fmt.Errorf("features: projection totals damaged")
	}
	p.TotalVariance, p.AngleBound = totals[0], totals[1]
	if p.Mean, err = checkpoint.SectionValues[float64](secs, "pca_mean"); err != nil {
		return err
	}
	if p.Components, err = checkpoint.SectionValues[float64](secs, "pca_components"); err != nil {
		return err
	}
	if p.Variance, err = checkpoint.SectionValues[float64](secs, "pca_variance"); err != nil {
		return err
	}
	if len(p.Mean) != p.D || len(p.Components) != p.K*p.D || len(p.Variance) != p.K {
		return fmt.Errorf("features: projection sections do not fit %d×%d", p.K, p.D)
	}
	if err := jsonSection(secs, "pca_names", &f.SourceNames); err != nil {
		return err
	}
	if f.SourceNames != nil && len(f.SourceNames) != p.D {
		return fmt.Errorf("features: %d source names for a projection of %d columns", len(f.SourceNames), p.D)
	}
	f.PCA = p
	return nil
}

func jsonSection(secs []checkpoint.Section, name string, v any) error {
	b, err := checkpoint.Lookup(secs, name)
	if err != nil {
		return err
	}
	if err := json.Unmarshal(b, v); err != nil {
		return fmt.Errorf("section %q: %w", name, err)
	}
	return nil
}

// loadFeatures reads features.njs of a finished run (opened read-only).
func loadFeatures(run *checkpoint.Run) (*refFeatures, error) {
	secs, err := run.LoadArtifact(fileFeatures, kindFeatures)
	if err != nil {
		return nil, err
	}
	f, err := featuresFromSections(secs)
	if err != nil {
		return nil, &checkpoint.CorruptError{File: run.Path(fileFeatures + checkpoint.Extension), Reason: err.Error()}
	}
	return f, nil
}

func boolInt(b bool) int64 {
	if b {
		return 1
	}
	return 0
}

// Between the neighbour search and the scores, a run needs its features
// only for the PCA start, so they leave memory once the neighbour graph is
// known (features.njs holds them) and are read back when needed: at 10^7
// rows × 50 that is 1.9 GiB less through the affinities and the optimiser,
// the phases that hold P. Read back, they are the same float32 values, so
// the map and the scores keep their bits.

// releaseFeatures drops the table's features from memory.
func (j *job) releaseFeatures() {
	if j.table.Data == nil {
		return
	}
	j.table.Data = nil
	j.freeMemory()
}

// features returns the table's features, read back from features.njs when
// releaseFeatures has dropped them (and not kept: a caller holds them only
// while it needs them).
func (j *job) features() (Matrix, error) {
	if j.table.Data != nil {
		return j.table.Matrix, nil
	}
	f, err := loadFeatures(j.run)
	if err != nil {
		return Matrix{}, fmt.Errorf("reading the features back: %w", err)
	}
	if f.X.N != j.table.N || f.X.D != j.table.D || f.Hash != j.table.Hash {
		return Matrix{}, &checkpoint.CorruptError{File: j.run.Path(fileFeatures + checkpoint.Extension),
			Reason: fmt.Sprintf("holds %d × %d features of input %s, the run read %d × %d of %s", f.X.N, f.X.D, f.Hash, j.table.N, j.table.D, j.table.Hash)}
	}
	return f.X, nil
}
