package nightjar

import (
	"errors"
	"fmt"
	"io/fs"

	"nightjar/checkpoint"
	"nightjar/ingest"
)

// A finished run records which row of its input table each row of its map
// is (rows.njs): with --skip-invalid the map skips the dropped rows, so a
// column of the input can be matched to the map by row number even without
// an id. Sections: "rows" (int64: the map's row count), "known" (int64: 1
// when the input rows are known), and, when rows were dropped and are
// known, "input" (int64: the 0-based input row number of each map row).
const (
	fileRows = "rows"
	kindRows = "rows"
)

// inputRows returns the 0-based input row number of each row of t, or nil
// when none was dropped (row i is input row i). known is false when rows
// were dropped and the table does not say which of them (more than
// ingest.MaxSkippedRows, or dropped from several files of a dataset).
func inputRows(t *ingest.Table) (rows []int64, known bool) {
	if t.Skipped == 0 {
		return nil, true
	}
	if int64(len(t.SkippedRows)) != t.Skipped {
		return nil, false
	}
	for _, s := range t.SkippedRows {
		if s.File != t.SkippedRows[0].File {
			return nil, false
		}
	}
	rows = make([]int64, 0, t.N)
	next := 0 // the next dropped row in SkippedRows (1-based rows, ascending)
	for r := int64(0); len(rows) < t.N; r++ {
		if next < len(t.SkippedRows) && t.SkippedRows[next].Row-1 == r {
			next++
			continue
		}
		rows = append(rows, r)
	}
	return rows, true
}

// saveRows records the input row numbers of a map of n rows in run.
func saveRows(run *checkpoint.Run, rows []int64, known bool, n int) error {
	k := int64(0)
	if known {
		k = 1
	}
	secs := []checkpoint.Section{
		{Name: "rows", Data: checkpoint.EncodeValues([]int64{int64(n)})},
		{Name: "known", Data: checkpoint.EncodeValues([]int64{k})},
	}
	if rows != nil {
		secs = append(secs, checkpoint.Section{Name: "input", Data: checkpoint.EncodeValues(rows)})
	}
	if err := run.SaveArtifact(fileRows, kindRows, secs); err != nil {
		return fmt.Errorf("saving the input row numbers of the map: %w", err)
	}
	return nil
}

// loadRows reads the input row numbers of a map of n rows: nil when row i
// is input row i. found is false when the run did not record them (made by
// an earlier version) or does not know them.
func loadRows(run *checkpoint.Run, n int) (rows []int64, found bool, err error) {
	secs, err := run.LoadArtifact(fileRows, kindRows)
	if errors.Is(err, fs.ErrNotExist) {
		return nil, false, nil
	}
	if err != nil {
		return nil, false, err
	}
	count, err := checkpoint.SectionValues[int64](secs, "rows")
	if err != nil {
		return nil, false, err
	}
	known, err := checkpoint.SectionValues[int64](secs, "known")
	if err != nil {
		return nil, false, err
	}
	if len(count) != 1 || count[0] != int64(n) || len(known) != 1 {
		return nil, false, &RunDirError{Dir: run.Dir, Msg: fmt.Sprintf("%s%s does not describe the map's %d rows", fileRows, checkpoint.Extension, n)}
	}
	if known[0] != 1 {
		return nil, false, nil
	}
	if _, err := checkpoint.Lookup(secs, "input"); err != nil {
		return nil, true, nil
	}
	rows, err = checkpoint.SectionValues[int64](secs, "input")
	if err != nil {
		return nil, false, err
	}
	if len(rows) != n {
		return nil, false, &RunDirError{Dir: run.Dir, Msg: fmt.Sprintf("%s%s has %d row numbers for %d rows", fileRows, checkpoint.Extension, len(rows), n)}
	}
	return rows, true, nil
}
