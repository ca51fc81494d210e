package ingest

import (
	"fmt"
	"os"
	"slices"
	"strings"
)

// assembly reads the parts of a dataset, one after the other, into one builder
// and one pair of pass-through columns.
type assembly struct {
	ds  *Dataset
	opt Options
	ctl readCtl

	part int    // the part being read
	path string // its path
	b    *builder

	first   string          // path of the part that fixed the feature columns
	src     []string        // their names, in matrix order
	cols    []FeatureColumn // and their description
	idP     *passCol
	labelP  *passCol
	formats []string

	done     int64 // input rows of the parts before this one
	total    int64 // input rows of every part when known up front, else -1
	curTotal int64 // input rows the current part announces, else -1
	bytes    int64 // size of every part's file
}

func newAssembly(ds *Dataset, opt Options, ctl readCtl) *assembly {
	as := &assembly{ds: ds, opt: opt, ctl: ctl, total: -1}
	for _, p := range ds.Parts {
		as.bytes += fileSize(p.Path)
	}
	if len(ds.Parts) > 1 {
		as.total = 0
		for _, p := range ds.Parts {
			n := countRows(p.Path)
			if n < 0 {
				as.total = -1
				break
			}
			as.total += n
		}
	}
	return as
}

// startPart makes part k the current one.
func (as *assembly) startPart(k int, format string) {
	as.part, as.path, as.curTotal = k, as.ds.Parts[k].Path, -1
	if as.b != nil {
		as.b.file, as.b.seen = as.path, 0
	}
	if !slices.Contains(as.formats, format) {
		as.formats = append(as.formats, format)
	}
}

// endPart counts the current part's rows as done.
func (as *assembly) endPart() error {
	if as.b != nil {
		as.done += as.b.seen
		as.b.seen = 0
	}
	return nil
}

// progress reports the rows consumed so far.
func (as *assembly) progress() {
	if as.opt.Progress != nil {
		seen := int64(0)
		if as.b != nil {
			seen = as.b.seen
		}
		total := as.total
		if len(as.ds.Parts) == 1 {
			total = as.curTotal
		}
		as.opt.Progress(as.done+seen, total)
	}
}

// withKeys appends the dataset's folder keys to the columns of a part as
// text columns (a file column of the same name takes precedence); hive[i] is
// the key index of column i, or -1.
func (as *assembly) withKeys(cols []colInfo) []colInfo {
	for k, key := range as.ds.Keys {
		if !slices.ContainsFunc(cols, func(c colInfo) bool { return c.name == key }) {
			cols = append(cols, colInfo{name: key, typ: "folder key", key: k + 1})
		}
	}
	return cols
}

// selectPart selects the columns of the current part. The first part's
// feature columns (by Options) fix those of every later part: each must have
// them, and (with default or pattern selection) no others.
func (as *assembly) selectPart(cols []colInfo) (selection, error) {
	sel, err := selectColumns(as.path, cols, as.opt)
	if err != nil {
		return sel, err
	}
	if as.src == nil {
		as.first = as.path
		as.src = sel.names(cols)
		return sel, nil
	}
	// Later parts: the first part's columns, by name, in its order.
	got := sel.names(cols)
	for _, name := range got {
		if !slices.Contains(as.src, name) {
			return sel, inputErr(as.path, name, 0, "feature column not in the first part (%s); every part must have the same feature columns", as.first)
		}
	}
	byName := selection{id: sel.id, label: sel.label}
	for _, name := range as.src {
		i := slices.IndexFunc(cols, func(c colInfo) bool { return c.name == name })
		if i < 0 {
			return sel, inputErr(as.path, name, 0, "no such column, but the first part (%s) has it as a feature; every part must have the same feature columns", as.first)
		}
		if !cols[i].numeric {
			return sel, inputErr(as.path, name, 0, "feature column is not numeric here (type %s), but is in the first part (%s)", cols[i].typ, as.first)
		}
		byName.features = append(byName.features, i)
		byName.patterns = append(byName.patterns, "")
	}
	return byName, nil
}

// checkWidths compares the vector widths a later part declares (fixed-size
// lists) with those of the first part.
func (as *assembly) checkWidths(cols []colInfo, sel selection) error {
	if as.cols == nil {
		return nil
	}
	for j, c := range sel.features {
		want := as.cols[j]
		got := cols[c]
		switch {
		case got.vector != want.Vector:
			kind := map[bool]string{false: "a scalar", true: "a vector"}
			return inputErr(as.path, got.name, 0, "feature column is %s here (type %s), %s in the first part (%s)", kind[got.vector], got.typ, kind[want.Vector], as.first)
		case got.vector && got.width > 0 && got.width != want.Width:
			return inputErr(as.path, got.name, 0, "vector column holds %d values per row here, %d in the first part (%s)", got.width, want.Width, as.first)
		}
	}
	return nil
}

// ensureBuilder creates the builder once the widths of the feature columns are
// known (widths[j] for selected column j of cols); later parts keep it.
func (as *assembly) ensureBuilder(cols []colInfo, sel selection, widths []int, capRows int64) {
	if as.b != nil {
		as.b.reserve(capRows)
		return
	}
	var names []string
	var ints []int
	as.cols = make([]FeatureColumn, len(sel.features))
	for j, c := range sel.features {
		ci := cols[c]
		w := max(1, widths[j])
		as.cols[j] = FeatureColumn{Name: ci.name, Type: ci.typ, Width: w, Vector: ci.vector, Pattern: sel.patterns[j]}
		if !ci.vector {
			if ci.integer {
				ints = append(ints, len(names))
			}
			names = append(names, ci.name)
			continue
		}
		for e := 0; e < w; e++ {
			names = append(names, fmt.Sprintf("%s[%d]", ci.name, e))
		}
	}
	ctl := as.ctl
	if ctl.sinkFor != nil {
		ctl.sink = ctl.sinkFor(len(names))
	}
	if as.total > 0 && capRows > 0 {
		capRows = as.total // the whole dataset is known: allocate once
	}
	as.b = newBuilder(as.path, names, ints, as.opt, presizeRows(capRows, len(names), as.bytes), ctl)
}

// passCols returns the pass-through columns, created by the first part
// (integers or text as its column types say; a later part of another type
// turns the column into text).
func (as *assembly) passCols(idName, labelName string, idInts, labelInts bool) (*passCol, *passCol) {
	if as.ctl.noPass {
		return nil, nil
	}
	if as.idP == nil && idName != "" {
		as.idP = newPassCol(as.path, idName, true, idInts)
	}
	if as.labelP == nil && labelName != "" {
		as.labelP = newPassCol(as.path, labelName, false, labelInts)
	}
	for _, p := range []*passCol{as.idP, as.labelP} {
		if p != nil {
			p.file = as.path
		}
	}
	return as.idP, as.labelP
}

// keyValue returns folder key k of the current part, and whether it is null.
func (as *assembly) keyValue(k int) (string, bool) {
	p := as.ds.Parts[as.part]
	return p.Keys[k], p.Null[k]
}

// table returns the assembled table.
func (as *assembly) table() (*Table, error) {
	if as.b == nil {
		return nil, inputErr(strings.Join(as.ds.Inputs, ", "), "", 0, "empty table (0 rows)")
	}
	as.b.file = strings.Join(as.ds.Inputs, ", ")
	t, err := as.b.table()
	if err != nil {
		return nil, err
	}
	t.Columns = as.cols
	if as.idP != nil {
		t.ID = as.idP.col
	}
	if as.labelP != nil {
		t.Label = as.labelP.col
	}
	t.Format = strings.Join(as.formats, ", ")
	t.Parts = len(as.ds.Parts)
	return t, nil
}

func fileSize(path string) int64 {
	st, err := os.Stat(path)
	if err != nil {
		return 0
	}
	return st.Size()
}
