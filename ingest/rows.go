package ingest

import (
	"fmt"
	"slices"

	"nightjar/internal/core"
)

// ReadRows reads the features of the given rows — 0-based positions among the
// rows Read keeps, strictly increasing — in one pass over every part, without
// keeping the rest of the matrix (to score a sample of a reduced table against
// its original features). It returns the len(rows)×D matrix, in the order of
// rows, and the fingerprint of all the rows read (Table.Hash), by which the
// caller can tell that they are the rows it read before. Errors are those of
// Read; a row beyond the table is an error.
func (ds *Dataset) ReadRows(opt Options, rows []int32) (core.Matrix, string, error) {
	if !slices.IsSorted(rows) || len(slices.Compact(slices.Clone(rows))) != len(rows) {
		return core.Matrix{}, "", fmt.Errorf("ReadRows: rows not strictly increasing")
	}
	var out core.Matrix
	next, at := 0, int64(0) // next wanted row, kept rows seen
	t, err := readDataset(ds, opt, readCtl{noPass: true, sink: func(m core.Matrix) error {
		if out.Data == nil {
			out = core.Matrix{N: len(rows), D: m.D, Data: make([]float32, 0, len(rows)*m.D)}
		}
		for next < len(rows) && int64(rows[next]) < at+int64(m.N) {
			i := int(int64(rows[next]) - at)
			out.Data = append(out.Data, m.Data[i*m.D:(i+1)*m.D]...)
			next++
		}
		at += int64(m.N)
		return nil
	}})
	if err != nil {
		return core.Matrix{}, "", err
	}
	if next < len(rows) {
		return core.Matrix{}, "", fmt.Errorf("ReadRows: row %d beyond the %d rows of the table", rows[next], t.N)
	}
	return out, t.Hash, nil
}
