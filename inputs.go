package nightjar

import (
	"encoding/csv"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strconv"
	"strings"

	"nightjar/bench"
	"nightjar/checkpoint"
	"nightjar/ingest"
)

// FileSkippedRows is the file of a run directory that lists the rows dropped
// by --skip-invalid (CSV: file, row, id, column, reason).
const FileSkippedRows = "skipped_rows.csv"

// FromFiles returns the source of a table read from several inputs, one
// after the other: each a table file, a directory of parts or a glob pattern
// (see FromFile). Embed records every input (absolute) in Settings.Inputs.
func FromFiles(paths ...string) Source {
	if len(paths) == 0 {
		return Source{}
	}
	return Source{path: paths[0], more: paths[1:]}
}

// DocumentSource returns rows of nightjar's documents scenario: invented
// texts embedded as 768-wide vectors around 40 topics (bench.WriteDocuments),
// with a doc_id and a topic label, generated deterministically from seed on
// threads goroutines and written chunk by chunk. Embed saves it into the run
// directory as documents.arrow (an Arrow IPC file with one fixed_size_list
// column) before reading it as it would a user's file. It is meant for the
// cosine metric.
func DocumentSource(rows int, seed uint64, threads int) Source {
	return Source{name: "documents.arrow", id: "doc_id", label: "topic",
		what:  fmt.Sprintf("%d invented document embeddings (one vector column of %d)", rows, bench.DocumentWidth),
		write: func(w io.Writer) error { return bench.WriteDocuments(w, rows, seed, threads) }}
}

// inputList returns every input of the settings, in reading order.
func (s *Settings) inputList() []string {
	if len(s.Inputs) > 0 {
		return s.Inputs
	}
	return []string{s.Input}
}

// inputName is how messages name the input: the path, or the paths joined.
func (s *Settings) inputName() string { return strings.Join(s.inputList(), ", ") }

// openInput lists the files of the run's input.
func openInput(s Settings) (*ingest.Dataset, error) { return ingest.OpenDataset(s.inputList()...) }

// inputFingerprint fingerprints the run's input: one file named directly as
// before (path, size, modification time), several files as one input of
// parts (checkpoint.FingerprintParts). ValuesHash is left to the caller.
func inputFingerprint(s Settings) (checkpoint.Fingerprint, error) {
	in := s.inputList()
	if len(in) == 1 {
		if st, err := os.Stat(in[0]); err == nil && st.Mode().IsRegular() {
			return checkpoint.FingerprintFile(in[0])
		}
	}
	ds, err := ingest.OpenDataset(in...)
	if err != nil {
		return checkpoint.Fingerprint{}, err
	}
	abs := make([]string, len(in))
	for i, p := range in {
		if abs[i], err = filepath.Abs(p); err != nil {
			abs[i] = p
		}
	}
	return checkpoint.FingerprintParts(strings.Join(abs, ", "), ds.Files())
}

// checkInput refuses, before a run directory exists, inputs that name no
// table: a missing path, a directory without tables, a pattern that matches
// none.
func checkInput(paths ...string) error {
	_, err := ingest.OpenDataset(paths...)
	return err
}

// FeatureColumn describes an input column the features of a run came from
// (report.json's "feature_columns").
type FeatureColumn struct {
	Name  string `json:"name"`
	Type  string `json:"type"`
	Width int    `json:"width"` // matrix columns: 1, or a vector's length
	// Selected is the --features entry that chose the column ("" when every
	// numeric column was taken).
	Selected string `json:"selected_by,omitempty"`
}

// DuplicateIDs is report.json's account of ids that occur more than once.
type DuplicateIDs struct {
	Values int      `json:"values"`
	Rows   int      `json:"rows"`
	First  []string `json:"first"`
}

// describeInput tells what was read: the feature columns used, the parts, the
// files passed over, integer columns with few values taken as features,
// duplicate ids, the rows skipped (written to FileSkippedRows), and records it
// in the report.
func (j *job) describeInput(ds *ingest.Dataset, t *ingest.Table) error {
	for _, c := range t.Columns {
		j.rep.FeatureColumns = append(j.rep.FeatureColumns, FeatureColumn{Name: c.Name, Type: c.Type, Width: c.Width, Selected: c.Pattern})
	}
	if len(t.Columns) > 0 {
		j.obs.Note("features: " + describeColumns(t.Columns))
	}
	if len(ds.Parts) > 1 {
		j.rep.Parts = ds.Files()
		j.obs.Note(fmt.Sprintf("read %d parts (%s … %s)", len(ds.Parts), ds.Parts[0].Path, ds.Parts[len(ds.Parts)-1].Path))
	}
	if n := len(ds.Ignored); n > 0 {
		j.obs.Note(fmt.Sprintf("passed over %d file(s) that are not tables: %s", n, shortList(ds.Ignored, 3)))
	}
	j.warnFewValues(t)
	if t.ID != nil {
		if d := ingest.FindDuplicates(t.ID, 5); d.Values > 0 {
			j.rep.DuplicateIDs = &DuplicateIDs{Values: d.Values, Rows: d.Rows, First: d.First}
			j.warn(fmt.Sprintf("id column %q: %d value(s) occur more than once (%d rows), e.g. %s; joining embedding.parquet back by id will match those rows more than once",
				t.ID.Name, d.Values, d.Rows, quoteList(d.First)))
		}
	}
	if t.Skipped > 0 {
		if err := j.writeSkipped(t); err != nil {
			return err
		}
	}
	return nil
}

// warn prints a warning and records it in the report.
func (j *job) warn(msg string) {
	j.rep.Warnings = append(j.rep.Warnings, msg)
	j.obs.Warn(msg)
}

// warnFewValues warns about integer feature columns with few distinct values
// that were not named one by one in --features: they are often codes
// (batches, categories) whose numbers weigh on every distance.
func (j *job) warnFewValues(t *ingest.Table) {
	var named []string
	for _, c := range t.Columns {
		if c.Pattern == c.Name {
			named = append(named, c.Name)
		}
	}
	var few []ingest.FewValued
	for _, f := range t.FewValues {
		if !contains(named, f.Column) {
			few = append(few, f)
		}
	}
	if len(few) == 0 || t.N < 20 {
		return
	}
	if len(few) <= 3 {
		for _, f := range few {
			j.warn(fmt.Sprintf("feature column %q holds integers with only %d distinct value(s) (%s): if it is a code (a batch, a category), its numbers weigh on every distance; leave it out with --features, or colour the map by it with --label %s",
				f.Column, len(f.Values), floatList(f.Values), f.Column))
		}
		return
	}
	names := make([]string, len(few))
	for i, f := range few {
		names[i] = f.Column
	}
	j.warn(fmt.Sprintf("%d integer feature columns hold %d or fewer distinct values (%s): if they are codes rather than measurements, leave them out with --features",
		len(few), ingest.FewDistinct, shortList(names, 4)))
}

// writeSkipped writes the rows --skip-invalid dropped into the run directory.
func (j *job) writeSkipped(t *ingest.Table) error {
	path := j.run.Path(FileSkippedRows)
	err := checkpoint.AtomicWrite(path, func(w io.Writer) error {
		cw := csv.NewWriter(w)
		cw.Write([]string{"file", "row", "id", "column", "reason"})
		for _, r := range t.SkippedRows {
			cw.Write([]string{r.File, strconv.FormatInt(r.Row, 10), r.ID, r.Column, r.Reason})
		}
		cw.Flush()
		return cw.Error()
	})
	if err != nil {
		return fmt.Errorf("writing %s: %w", FileSkippedRows, err)
	}
	j.rep.SkippedRowsFile = FileSkippedRows
	more := ""
	if int64(len(t.SkippedRows)) < t.Skipped {
		more = fmt.Sprintf(" (the first %d)", len(t.SkippedRows))
	}
	j.obs.Note(fmt.Sprintf("the skipped rows are listed in %s%s", path, more))
	return nil
}

// describeColumns lists feature columns for a summary: vectors with their
// width, columns chosen by one pattern counted, others by name.
func describeColumns(cols []ingest.FeatureColumn) string {
	var parts []string
	for i := 0; i < len(cols); {
		c := cols[i]
		if c.Vector {
			parts = append(parts, fmt.Sprintf("%q (vector of %d)", c.Name, c.Width))
			i++
			continue
		}
		k := i + 1
		for k < len(cols) && !cols[k].Vector && cols[k].Pattern == c.Pattern {
			k++
		}
		names := make([]string, 0, k-i)
		for _, g := range cols[i:k] {
			names = append(names, g.Name)
		}
		switch {
		case c.Pattern != "" && c.Pattern != c.Name:
			parts = append(parts, fmt.Sprintf("%s: %d column(s) %s", c.Pattern, k-i, shortList(names, 4)))
		case k-i > 6:
			parts = append(parts, fmt.Sprintf("%d columns %s", k-i, shortList(names, 4)))
		default:
			parts = append(parts, quoteList(names))
		}
		i = k
	}
	return strings.Join(parts, "; ")
}

// shortList quotes up to n names and counts the rest.
func shortList(names []string, n int) string {
	if len(names) <= n {
		return quoteList(names)
	}
	return fmt.Sprintf("%s … and %d more", quoteList(names[:n]), len(names)-n)
}

func quoteList(names []string) string {
	q := make([]string, len(names))
	for i, s := range names {
		q[i] = strconv.Quote(s)
	}
	return strings.Join(q, ", ")
}

func floatList(v []float32) string {
	s := make([]string, len(v))
	for i, x := range v {
		s[i] = strconv.FormatFloat(float64(x), 'g', -1, 32)
	}
	return strings.Join(s, ", ")
}

func contains(list []string, s string) bool {
	for _, x := range list {
		if x == s {
			return true
		}
	}
	return false
}
