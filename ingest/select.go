package ingest

import (
	"fmt"
	"path"
	"slices"
	"strings"
)

// colInfo describes one input column for column selection, whatever the format.
type colInfo struct {
	name    string
	numeric bool   // usable as a feature
	typ     string // type name for messages
	vector  bool   // a list of numbers: several matrix columns
	width   int    // a vector's fixed width, 0 when each row tells
	integer bool   // a scalar column of integers
	key     int    // 1 + the folder key it holds, 0 for a column of the file
}

// selection is the outcome of column selection: indices into the input columns.
type selection struct {
	features  []int    // in matrix column order
	patterns  []string // the Options.Features entry that chose each ("" by default)
	id, label int      // -1 when not requested
}

func (s selection) names(cols []colInfo) []string {
	out := make([]string, len(s.features))
	for j, c := range s.features {
		out[j] = cols[c].name
	}
	return out
}

// isPattern reports whether s uses path.Match meta characters.
func isPattern(s string) bool { return strings.ContainsAny(s, `*?[\`) }

// selectColumns applies Options.Features, ID and Label to the input columns.
//
// Rules: an exact name must exist and be numeric; a glob pattern (path.Match) must be
// valid and match at least one numeric column, and silently passes over non-numeric
// columns and the id and label columns; a column matched twice is taken once, at its
// first match. With no Features, every numeric column except ID and Label is taken,
// in file order.
func selectColumns(file string, cols []colInfo, opt Options) (selection, error) {
	sel := selection{id: -1, label: -1}
	find := func(name string) int {
		for i, c := range cols {
			if c.name == name {
				return i
			}
		}
		return -1
	}
	missing := func(name string) error {
		return inputErr(file, name, 0, "no such column (the table has %s)", listNames(cols, 6))
	}
	if opt.ID != "" {
		if sel.id = find(opt.ID); sel.id < 0 {
			return sel, missing(opt.ID)
		}
	}
	if opt.Label != "" {
		if sel.label = find(opt.Label); sel.label < 0 {
			return sel, missing(opt.Label)
		}
	}
	if opt.ID != "" && opt.ID == opt.Label {
		return sel, inputErr(file, opt.ID, 0, "the same column is requested as id and as label")
	}
	taken := make([]bool, len(cols))
	passThrough := func(i int) bool { return i == sel.id || i == sel.label }
	if len(opt.Features) == 0 {
		for i, c := range cols {
			if c.numeric && !passThrough(i) {
				sel.features = append(sel.features, i)
				sel.patterns = append(sel.patterns, "")
			}
		}
		if len(sel.features) == 0 {
			return sel, inputErr(file, "", 0, "no numeric feature columns (the table has %s)", describeCols(cols, 6))
		}
		return sel, checkUnique(file, cols, sel)
	}
	for _, f := range opt.Features {
		if !isPattern(f) {
			i := find(f)
			if i < 0 {
				return sel, missing(f)
			}
			if !cols[i].numeric {
				return sel, inputErr(file, f, 0, "feature column is not numeric (type %s)", cols[i].typ)
			}
			if !taken[i] {
				taken[i] = true
				sel.features = append(sel.features, i)
				sel.patterns = append(sel.patterns, f)
			}
			continue
		}
		if err := sel.addMatches(file, f, cols, taken, passThrough); err != nil {
			return sel, err
		}
	}
	return sel, checkUnique(file, cols, sel)
}

// checkUnique refuses a selected column (feature, id or label) whose name
// another column of the table has too: which one was meant is unknown.
func checkUnique(file string, cols []colInfo, sel selection) error {
	count := make(map[string]int, len(cols))
	for _, c := range cols {
		count[c.name]++
	}
	used := append(slices.Clone(sel.features), sel.id, sel.label)
	for _, i := range used {
		if i < 0 || count[cols[i].name] < 2 {
			continue
		}
		var at []int
		for k, c := range cols {
			if c.name == cols[i].name {
				at = append(at, k+1)
			}
		}
		return inputErr(file, cols[i].name, 0, "two columns have this name (columns %d and %d); rename one", at[0], at[1])
	}
	return nil
}

// addMatches appends the numeric columns that the glob pattern matches and that
// are neither taken already nor pass-through columns, in file order.
func (sel *selection) addMatches(file, pattern string, cols []colInfo, taken []bool, passThrough func(int) bool) error {
	if _, err := path.Match(pattern, ""); err != nil {
		return inputErr(file, "", 0, "bad feature pattern %q: %v", pattern, err)
	}
	matched, numeric := 0, 0
	for i, c := range cols {
		if ok, _ := path.Match(pattern, c.name); !ok {
			continue
		}
		matched++
		if !c.numeric || passThrough(i) {
			continue
		}
		numeric++
		if !taken[i] {
			taken[i] = true
			sel.features = append(sel.features, i)
			sel.patterns = append(sel.patterns, pattern)
		}
	}
	switch {
	case matched == 0:
		return inputErr(file, "", 0, "feature pattern %q matches no column (the table has %s)", pattern, listNames(cols, 6))
	case numeric == 0:
		return inputErr(file, "", 0, "feature pattern %q matches no numeric column", pattern)
	}
	return nil
}

// listNames lists up to max column names for messages, e.g. `"a", "b", … 12 more`.
func listNames(cols []colInfo, max int) string {
	return listCols(cols, max, func(c colInfo) string { return fmt.Sprintf("%q", c.name) })
}

// describeCols is listNames with the type of each column.
func describeCols(cols []colInfo, max int) string {
	return listCols(cols, max, func(c colInfo) string { return fmt.Sprintf("%q %s", c.name, c.typ) })
}

// listCols joins up to max columns as show formats them, counting the rest.
func listCols(cols []colInfo, max int, show func(colInfo) string) string {
	if len(cols) == 0 {
		return "no columns"
	}
	var b strings.Builder
	b.WriteString("columns ")
	for i, c := range cols {
		if i == max {
			fmt.Fprintf(&b, ", … %d more", len(cols)-max)
			break
		}
		if i > 0 {
			b.WriteString(", ")
		}
		b.WriteString(show(c))
	}
	return b.String()
}
