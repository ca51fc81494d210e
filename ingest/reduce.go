package ingest

import (
	"fmt"
	"math"
	"strings"

	"nightjar/internal/core"
)

// Reduction asks Dataset.Read to project the features onto their first
// principal components while reading, without holding the N×D matrix.
type Reduction struct {
	// Components is the number k of principal components kept; 0 means no
	// reduction.
	Components int
	// Above, when positive, reduces only a table of more than Above matrix
	// columns; a narrower table is read whole, as without a reduction.
	Above int
	// Normalise scales each row to unit Euclidean length before the PCA and the
	// projection (for the cosine distance: the Euclidean distance between unit
	// rows is √(2 − 2·cos)). A row of zeros is then an error.
	Normalise bool
}

// ReadReduced reads the table at path (a file, directory or glob) like Read,
// but returns the scores of its rows on the first k principal components; it is
// OpenDataset(path) then Dataset.Read with Reduction{Components: k}.
func ReadReduced(path string, opt Options, k int) (*Table, *PCA, error) {
	if k < 1 {
		return nil, nil, fmt.Errorf("pca: k = %d components; want k ≥ 1", k)
	}
	ds, err := OpenDataset(path)
	if err != nil {
		return nil, nil, err
	}
	return ds.Read(opt, Reduction{Components: k})
}

// Read reads every part of the dataset into one table, as described by opt
// (see the package function Read for formats, types and errors). With a
// reduction that applies (red.Components > 0 and more than red.Above matrix
// columns) it returns the scores of the rows on the first k principal
// components instead of the features, and the PCA, without ever holding the
// N×D feature matrix: a first pass over the files checks and fingerprints the
// rows and starts the fit, further passes finish it, a last pass projects each
// chunk.
//
// Up to RandomizedAbove columns the fit is exact: the first pass accumulates the
// mean and covariance chunk by chunk (exactly as FitPCA does, so the components
// are the same bits as FitPCA on the matrix Read would return), and there are
// two passes in all. Above it, the fit is randomised subspace iteration (see the
// package documentation), the same bits as FitPCA on that matrix too, with one
// pass per iteration.
//
// The reduced table has Matrix N×k (float32 scores), Features "pc_1" … "pc_k",
// Columns describing the input columns, the ID and Label columns, Skipped,
// Format, and the Hash of the original features (the value Read gives), so it
// fingerprints the input. Peak memory is about N×k float32 plus one chunk (see
// Options.BatchRows) plus O(D²) (exact) or O(D·k) (randomised). Progress, if
// set, sees every pass: done runs over the passes, out of a total of the rows
// times the passes planned (or −1 when the row count is not known up front);
// a randomised fit that converges early skips ahead.
//
// Errors are those of Read and FitPCA; an *InputError also reports files that
// changed between the passes.
func (ds *Dataset) Read(opt Options, red Reduction) (*Table, *PCA, error) {
	if red.Components <= 0 {
		t, err := readDataset(ds, opt, readCtl{})
		return t, nil, err
	}
	r := &reduction{ds: ds, opt: opt, red: red, user: opt.Progress}
	return r.read()
}

// reduction is one run of Dataset.Read with a reduction.
type reduction struct {
	ds   *Dataset
	opt  Options
	red  Reduction
	user func(done, total int64)

	d      int
	active bool // the table is wide enough to be reduced
	acc    *covAcc
	sub    *subspace
	pass   int   // passes done, for Progress
	rows   int64 // input rows of one pass
	passes int   // passes planned
	kept   int64 // rows normalised so far in this pass
}

func (r *reduction) name() string { return strings.Join(r.ds.Inputs, ", ") }

// progress is the Options.Progress of every pass.
func (r *reduction) progress(done, total int64) {
	if r.user == nil {
		return
	}
	if total >= 0 {
		total *= int64(max(r.passes, 1))
	}
	r.user(int64(r.pass)*r.rows+done, total)
}

func (r *reduction) read() (*Table, *PCA, error) {
	k := r.red.Components
	opt := r.opt
	opt.Progress = r.progress
	r.passes = 2
	first, err := readDataset(r.ds, opt, readCtl{sinkFor: func(d int) batchSink {
		r.d = d
		if r.red.Above > 0 && d <= r.red.Above {
			return nil // keep the matrix: no reduction
		}
		r.active = true
		if d > RandomizedAbove {
			r.sub = newSubspace(d, min(k, d), opt.Threads)
			r.passes = maxPasses + 1
			return r.normalised(r.sub.add)
		}
		r.acc = newCovAcc(d, opt.Threads)
		return r.normalised(func(rows core.Matrix) { r.acc.add(rows) })
	}})
	if err != nil {
		return nil, nil, err
	}
	if !r.active {
		return first, nil, nil
	}
	if k > first.D {
		return nil, nil, fmt.Errorf("pca: k = %d components requested for D = %d columns; want 1 ≤ k ≤ D", k, first.D)
	}
	r.rows = int64(first.N) + first.Skipped
	p, err := r.fit(first)
	if err != nil {
		return nil, nil, err
	}
	t, err := r.project(first, p)
	return t, p, err
}

// normalised returns the sink that scales each row to unit length (when the
// reduction asks for it) before handing the rows to feed.
func (r *reduction) normalised(feed func(core.Matrix)) batchSink {
	r.kept = 0
	return func(rows core.Matrix) error {
		if r.red.Normalise {
			for i := range rows.N {
				row := rows.Data[i*rows.D : (i+1)*rows.D]
				ss := sumSquares(row)
				if ss == 0 {
					return inputErr(r.name(), "", 0, "row %d (counting kept rows) has only zeros: the cosine distance needs a row of non-zero length", r.kept+int64(i)+1)
				}
				inv := 1 / math.Sqrt(ss)
				for j, v := range row {
					row[j] = float32(float64(v) * inv)
				}
			}
			r.kept += int64(rows.N)
		}
		feed(rows)
		return nil
	}
}

// fit finishes the PCA: the exact covariance's eigendecomposition, or the
// remaining passes of the subspace iteration.
func (r *reduction) fit(first *Table) (*PCA, error) {
	k := r.red.Components
	r.pass = 1
	if r.acc != nil {
		p, err := r.acc.pca(k)
		if err != nil {
			return nil, fmt.Errorf("reading %s: %w", r.name(), err)
		}
		p.Normalised = r.red.Normalise
		return p, nil
	}
	for {
		done, err := r.sub.endPass()
		if err != nil {
			return nil, fmt.Errorf("reading %s: %w", r.name(), err)
		}
		if done {
			break
		}
		if err := r.again(first, r.normalised(r.sub.add)); err != nil {
			return nil, err
		}
		r.pass++
	}
	r.pass = r.passes - 1 // skip ahead to the projection
	p, err := r.sub.result()
	if p != nil {
		p.Normalised = r.red.Normalise
	}
	return p, err
}

// again reads every row once more into sink and checks that they are the rows
// of the first pass.
func (r *reduction) again(first *Table, sink batchSink) error {
	opt := r.opt
	opt.Progress = r.progress
	t, err := readDataset(r.ds, opt, readCtl{noPass: true, sink: sink})
	if err != nil {
		return err
	}
	if t.Hash != first.Hash || t.N != first.N {
		return inputErr(r.name(), "", 0, "file changed between the passes of the streaming PCA")
	}
	return nil
}

// project reads the rows a last time and returns their scores.
func (r *reduction) project(first *Table, p *PCA) (*Table, error) {
	k := p.K
	scores := make([]float32, first.N*k)
	var buf []float64
	at := 0
	err := r.again(first, func(rows core.Matrix) error { // ProjectTo scales the rows of a normalised fit
		if at+rows.N*k > len(scores) {
			return inputErr(r.name(), "", 0, "file changed between the passes of the streaming PCA")
		}
		if cap(buf) < rows.N*k {
			buf = make([]float64, rows.N*k)
		}
		buf = buf[:rows.N*k]
		p.ProjectTo(buf, rows, r.opt.Threads)
		for i, v := range buf {
			scores[at+i] = float32(v)
		}
		at += len(buf)
		return nil
	})
	if err != nil {
		return nil, err
	}
	t := &Table{
		Matrix:         core.Matrix{N: first.N, D: k, Data: scores},
		Features:       make([]string, k),
		Columns:        first.Columns,
		SourceFeatures: first.Features,
		ID:             first.ID,
		Label:          first.Label,
		Skipped:        first.Skipped,
		SkippedRows:    first.SkippedRows,
		FewValues:      first.FewValues,
		Hash:           first.Hash,
		Format:         first.Format,
		Parts:          first.Parts,
	}
	for c := range t.Features {
		t.Features[c] = fmt.Sprintf("pc_%d", c+1)
	}
	return t, nil
}
