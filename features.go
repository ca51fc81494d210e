package nightjar

import (
	"bufio"
	"bytes"
	"encoding/csv"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"path"
	"path/filepath"
	"strconv"
	"strings"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/ipc"
	"github.com/apache/arrow/go/v17/parquet/file"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"

	"nightjar/checkpoint"
	"nightjar/ingest"
)

// A finished run keeps what placing new rows into its map needs: the
// features the map was made from (float32, after --reduce if any), their
// names, and the --reduce projection with the names of the input columns it
// projects. They are one artifact of the run directory, features.njs, with
// named sections checked when loaded.

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

// saveFeatures writes t's features (and the projection that made them) into
// the run directory. With a projection, the names of the input columns are
// read from the input's header or schema.
func (j *job) saveFeatures(t *ingest.Table, pca *ingest.PCA) error {
	f := refFeatures{X: t.Matrix, Names: t.Features, Hash: t.Hash, PCA: pca}
	if pca != nil {
		names, err := sourceFeatureNames(j.s.Input, ingest.Options{Features: j.s.Features, ID: j.s.ID, Label: j.s.Label})
		switch {
		case err != nil:
			j.obs.Warn(fmt.Sprintf("the names of the features that --reduce projects could not be read (%v): placing new rows will check only their number", err))
		case len(names) != pca.D:
			j.obs.Warn(fmt.Sprintf("found %d feature names for the %d columns that --reduce projects: placing new rows will check only their number", len(names), pca.D))
		default:
			f.SourceNames = names
		}
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
			checkpoint.Section{Name: "pca_shape", Data: checkpoint.EncodeValues([]int64{int64(p.K), int64(p.D), p.N})},
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
	if f.X.Data, err = checkpoint.SectionValues[float32](secs, "values"); err != nil {
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
	if len(ps) != 3 || ps[0] != int64(f.X.D) || ps[1] < ps[0] {
		return fmt.Errorf("features: projection shape %v does not fit %d columns", ps, f.X.D)
	}
	p := &ingest.PCA{K: int(ps[0]), D: int(ps[1]), N: ps[2]}
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

// sourceFeatureNames returns the names of the feature columns that reading
// the table at p with opt selects, without reading its values: from the
// schema of a Parquet or Arrow IPC file, from the header and the first 1,000
// rows of a CSV file. The rules are those of the ingest package (a column
// is numeric by its Arrow type, or in CSV when at least half of its non-empty
// sampled values are numbers; no Features means every numeric column but
// the id and the label; a pattern adds its numeric matches in file order).
func sourceFeatureNames(p string, opt ingest.Options) ([]string, error) {
	cols, err := tableColumns(p)
	if err != nil {
		return nil, err
	}
	pass := func(name string) bool { return name == opt.ID || name == opt.Label }
	var out []string
	taken := map[string]bool{}
	if len(opt.Features) == 0 {
		for _, c := range cols {
			if c.numeric && !pass(c.name) {
				out = append(out, c.name)
			}
		}
		return out, nil
	}
	for _, want := range opt.Features {
		for _, c := range cols {
			ok, _ := path.Match(want, c.name)
			if strings.ContainsAny(want, `*?[\`) {
				ok = ok && c.numeric && !pass(c.name)
			} else {
				ok = want == c.name
			}
			if ok && !taken[c.name] {
				taken[c.name] = true
				out = append(out, c.name)
			}
		}
	}
	return out, nil
}

type tableColumn struct {
	name    string
	numeric bool
}

// tableColumns lists a table file's columns and whether each is numeric.
func tableColumns(p string) ([]tableColumn, error) {
	f, err := os.Open(p)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	head := make([]byte, 8)
	n, _ := io.ReadFull(f, head)
	head = head[:n]
	if _, err := f.Seek(0, io.SeekStart); err != nil {
		return nil, err
	}
	var sc *arrow.Schema
	switch {
	case bytes.HasPrefix(head, []byte("PAR1")):
		pf, err := file.NewParquetReader(f)
		if err != nil {
			return nil, err
		}
		defer pf.Close()
		// As the ingest package does, ignore an Arrow schema stored by an
		// Arrow writer: the Parquet types decide.
		for _, kv := range pf.MetaData().KeyValueMetadata() {
			if kv.Key == "ARROW:schema" {
				kv.Key = "ARROW:schema (not used by nightjar)"
			}
		}
		fr, err := pqarrow.NewFileReader(pf, pqarrow.ArrowReadProperties{}, nil)
		if err != nil {
			return nil, err
		}
		if sc, err = fr.Schema(); err != nil {
			return nil, err
		}
	case bytes.HasPrefix(head, []byte("ARROW1")):
		r, err := ipc.NewFileReader(f)
		if err != nil {
			return nil, err
		}
		defer r.Close()
		sc = r.Schema()
	case bytes.HasPrefix(head, []byte{0xff, 0xff, 0xff, 0xff}):
		r, err := ipc.NewReader(bufio.NewReader(f))
		if err != nil {
			return nil, err
		}
		defer r.Release()
		sc = r.Schema()
	default:
		return csvColumns(p, f)
	}
	var cols []tableColumn
	for _, fd := range sc.Fields() {
		cols = append(cols, tableColumn{name: fd.Name, numeric: numericArrow(fd.Type)})
	}
	return cols, nil
}

// numericArrow tells whether the ingest package reads columns of type dt
// as features.
func numericArrow(dt arrow.DataType) bool {
	switch dt.ID() {
	case arrow.INT8, arrow.INT16, arrow.INT32, arrow.INT64,
		arrow.UINT8, arrow.UINT16, arrow.UINT32, arrow.UINT64,
		arrow.FLOAT16, arrow.FLOAT32, arrow.FLOAT64,
		arrow.DECIMAL128, arrow.DECIMAL256:
		return true
	}
	return false
}

// csvColumns reads a CSV header and classifies the columns on the first
// 1,000 records.
func csvColumns(p string, f *os.File) ([]tableColumn, error) {
	br := bufio.NewReaderSize(f, 1<<20)
	cr := csv.NewReader(br)
	cr.Comma = ','
	line, _ := br.Peek(min(br.Size(), 64<<10))
	if k := bytes.IndexByte(line, '\n'); k >= 0 {
		line = line[:k]
	}
	if strings.EqualFold(filepath.Ext(p), ".tsv") || (bytes.IndexByte(line, '\t') >= 0 && bytes.IndexByte(line, ',') < 0) {
		cr.Comma = '\t'
	}
	header, err := cr.Read()
	if err != nil {
		return nil, fmt.Errorf("reading the CSV header: %w", err)
	}
	nonEmpty := make([]int, len(header))
	numbers := make([]int, len(header))
	for r := 0; r < 1000; r++ {
		rec, err := cr.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return nil, err
		}
		for c, s := range rec {
			if s = strings.TrimSpace(s); s == "" {
				continue
			}
			nonEmpty[c]++
			if _, err := strconv.ParseFloat(s, 32); err == nil || errors.Is(err, strconv.ErrRange) {
				numbers[c]++
			}
		}
	}
	cols := make([]tableColumn, len(header))
	for c, name := range header {
		name = strings.TrimSpace(name)
		if c == 0 {
			name = strings.TrimPrefix(name, "\ufeff")
		}
		cols[c] = tableColumn{name: name, numeric: nonEmpty[c] > 0 && 2*numbers[c] >= nonEmpty[c]}
	}
	return cols, nil
}
