package ingest

import (
	"fmt"

	"nightjar/internal/core"
)

// ReadReduced reads the table at path like Read, but returns the scores of its rows
// on the first k principal components instead of the features, without ever holding
// the N×D feature matrix: a first pass over the file accumulates the mean and
// covariance chunk by chunk (exactly as FitPCA does, so the components are the same
// bits as FitPCA on the matrix Read would return), a second pass projects each chunk.
//
// The returned table has Matrix N×k (float32 scores), Features "pc_1" … "pc_k",
// the ID and Label columns, Skipped, Format, and the Hash of the original features (the
// same value Read gives), so it fingerprints the input. Peak memory is about N×k
// float32 plus one chunk (see Options.BatchRows) plus O(D²). Progress, if set, sees
// both passes: done runs to 2N out of a total of 2N (or −1 when the row count is not
// known up front).
//
// Errors are those of Read and FitPCA; an *InputError also reports a file that
// changed between the two passes.
func ReadReduced(path string, opt Options, k int) (*Table, *PCA, error) {
	if k < 1 {
		return nil, nil, fmt.Errorf("pca: k = %d components; want k ≥ 1", k)
	}
	var acc *covAcc
	userProgress := opt.Progress
	var pass int64 // rows of earlier passes, for Progress
	if userProgress != nil {
		opt.Progress = func(done, total int64) {
			if total >= 0 {
				total *= 2
			}
			userProgress(pass+done, total)
		}
	}
	first, err := read(path, opt, readCtl{sink: func(rows core.Matrix) error {
		if acc == nil {
			acc = newCovAcc(rows.D, opt.Threads)
		}
		acc.add(rows)
		return nil
	}})
	if err != nil {
		return nil, nil, err
	}
	if k > first.D {
		return nil, nil, fmt.Errorf("pca: k = %d components requested for D = %d columns; want 1 ≤ k ≤ D", k, first.D)
	}
	p, err := acc.pca(k)
	if err != nil {
		return nil, nil, fmt.Errorf("reading %s: %w", path, err)
	}
	pass = int64(first.N) + first.Skipped
	scores := make([]float32, first.N*k)
	var buf []float64
	at := 0
	second, err := read(path, opt, readCtl{noPass: true, sink: func(rows core.Matrix) error {
		if at+rows.N*k > len(scores) {
			return inputErr(path, "", 0, "file changed between the two passes of the streaming PCA")
		}
		if cap(buf) < rows.N*k {
			buf = make([]float64, rows.N*k)
		}
		buf = buf[:rows.N*k]
		p.ProjectTo(buf, rows, opt.Threads)
		for i, v := range buf {
			scores[at+i] = float32(v)
		}
		at += len(buf)
		return nil
	}})
	if err != nil {
		return nil, nil, err
	}
	if second.Hash != first.Hash || second.N != first.N {
		return nil, nil, inputErr(path, "", 0, "file changed between the two passes of the streaming PCA")
	}
	t := &Table{
		Matrix:   core.Matrix{N: first.N, D: k, Data: scores},
		Features: make([]string, k),
		ID:       first.ID,
		Label:    first.Label,
		Skipped:  first.Skipped,
		Hash:     first.Hash,
		Format:   first.Format,
	}
	for c := range t.Features {
		t.Features[c] = fmt.Sprintf("pc_%d", c+1)
	}
	return t, p, nil
}
