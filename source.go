package nightjar

import (
	"fmt"
	"io"
	"os"
	"path/filepath"

	"nightjar/bench"
	"nightjar/checkpoint"
	"nightjar/ingest"
)

// Source is the table a run maps: a file (FromFile), a table in memory
// (FromMatrix), or generated data (DemoSource, DocumentSource), which Embed
// first saves into the run directory as a file, so that Resume and Score
// find it there.
type Source struct {
	path  string        // a table file, directory or glob, or "" for an in-memory table
	more  []string      // further inputs read after path (FromFiles)
	table *ingest.Table // an in-memory table, saved under name
	name  string
	// write writes a generated table file under name, whose id and label
	// columns are id and label (DocumentSource, DemoSource), without
	// holding the table; what says what it wrote.
	write     func(io.Writer) error
	id, label string
	what      string
}

// FromFile returns the source of a Parquet, Arrow IPC or CSV table file
// (CSV with a header row, plain or gzip- or zstd-compressed), of a directory
// of such files (read as parts of one table, in byte order of their paths),
// or of a glob pattern naming them (see ingest.OpenDataset). The path is made
// absolute, so the run can be resumed from another working directory.
func FromFile(path string) Source { return Source{path: path} }

// FromMatrix returns an in-memory source of the N×D matrix x, with optional
// id and label columns of length N (nil for none). Embed saves it into the
// run directory as input.parquet. x is read, not kept or changed.
func FromMatrix(x Matrix, id, label *Column) Source {
	t := &ingest.Table{Matrix: x, ID: id, Label: label}
	t.Features = make([]string, x.D)
	for j := range t.Features {
		t.Features[j] = fmt.Sprintf("f%d", j+1)
	}
	return Source{table: t, name: "input.parquet"}
}

// DemoSource returns rows of nightjar's built-in demo data: an invented
// survey of households in a fictional region, with an id and a population
// label, generated deterministically from seed on threads goroutines (the
// data do not depend on threads). Embed saves it into the run directory as
// survey.parquet.
func DemoSource(rows int, seed uint64, threads int) Source {
	return Source{name: "survey.parquet", id: "id", label: "population",
		what:  fmt.Sprintf("%d rows × %d features of an invented survey", rows, bench.DemoFeatures),
		write: func(w io.Writer) error { return bench.WriteDemo(w, rows, seed, threads) }}
}

// check refuses a file source whose file cannot be found.
func (src Source) check() error {
	if src.path == "" {
		return nil
	}
	return checkInput(append([]string{src.path}, src.more...)...)
}

// inputs returns the absolute paths of every input of a source of several
// (FromFiles), nil for one.
func (src Source) inputs() []string {
	if len(src.more) == 0 {
		return nil
	}
	out := make([]string, 0, 1+len(src.more))
	for _, p := range append([]string{src.path}, src.more...) {
		abs, err := filepath.Abs(p)
		if err != nil {
			abs = p
		}
		out = append(out, abs)
	}
	return out
}

// resolve returns the path of the table to read, saving an in-memory table
// into dir first, and the id and label column names of an in-memory table.
func (src Source) resolve(dir string, obs Observer) (path, id, label string, err error) {
	if src.path != "" {
		abs, err := filepath.Abs(src.path)
		if err != nil {
			return "", "", "", fmt.Errorf("resolving %s: %w", src.path, err)
		}
		if err := checkInput(abs); err != nil {
			return "", "", "", err
		}
		return abs, "", "", nil
	}
	if src.write != nil {
		path = filepath.Join(dir, src.name)
		if err := checkpoint.AtomicWrite(path, src.write); err != nil {
			return "", "", "", fmt.Errorf("writing %s: %w", path, err)
		}
		obs.Note(fmt.Sprintf("demo: wrote %s to %s", src.what, path))
		if path, err = filepath.Abs(path); err != nil {
			return "", "", "", err
		}
		return path, src.id, src.label, nil
	}
	t := src.table
	if t == nil {
		return "", "", "", &SettingError{Msg: "empty source: use FromFile, FromMatrix or DemoSource"}
	}
	if t.N*t.D != len(t.Data) {
		return "", "", "", &SettingError{Msg: fmt.Sprintf("matrix of %d×%d holds %d values", t.N, t.D, len(t.Data))}
	}
	path = filepath.Join(dir, src.name)
	if err := writeTable(path, t); err != nil {
		return "", "", "", err
	}
	if path, err = filepath.Abs(path); err != nil {
		return "", "", "", err
	}
	if t.ID != nil {
		id = t.ID.Name
	}
	if t.Label != nil {
		label = t.Label.Name
	}
	return path, id, label, nil
}

// errorText is the message of a file-system error without the operation
// and path that the caller names itself.
func errorText(err error) string {
	if pe, ok := err.(*os.PathError); ok {
		return pe.Err.Error()
	}
	return err.Error()
}
