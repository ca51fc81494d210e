package ingest

import (
	"cmp"
	"slices"
	"strconv"
)

// Column is a pass-through column (row id or label), in input row order.
// Exactly one of Ints and Strings is non-nil.
type Column struct {
	Name    string
	Ints    []int64
	Strings []string
	// Null is nil when every value is present; otherwise it has one entry per
	// row, true where the row has no value (whose Ints or Strings entry is then
	// 0 or "" and meaningless). Ids are never null.
	Null []bool
}

// Len returns the number of values in the column.
func (c *Column) Len() int {
	if c == nil {
		return 0
	}
	if c.Ints != nil {
		return len(c.Ints)
	}
	return len(c.Strings)
}

// IsNull reports whether row i has no value.
func (c *Column) IsNull(i int) bool { return c.Null != nil && c.Null[i] }

// String returns value i formatted as text ("" for a null).
func (c *Column) String(i int) string {
	if c.IsNull(i) {
		return ""
	}
	if c.Ints != nil {
		return strconv.FormatInt(c.Ints[i], 10)
	}
	return c.Strings[i]
}

// Duplicates describes the values of a column that occur more than once.
type Duplicates struct {
	Values int      // distinct values that occur more than once
	Rows   int      // rows holding such a value
	First  []string // up to the requested number of them, in order of first occurrence
}

// FindDuplicates returns the values of c that occur more than once (nulls are
// not values), with up to examples of them in the order of their first
// occurrence. It sorts a permutation of the rows: O(N log N) time, 4N bytes
// beyond the column.
func FindDuplicates(c *Column, examples int) Duplicates {
	n := c.Len()
	order := make([]int32, 0, n)
	for i := 0; i < n; i++ {
		if !c.IsNull(i) {
			order = append(order, int32(i))
		}
	}
	var same func(a, b int32) int
	if c.Ints != nil {
		same = func(a, b int32) int { return cmp.Compare(c.Ints[a], c.Ints[b]) }
	} else {
		same = func(a, b int32) int { return cmp.Compare(c.Strings[a], c.Strings[b]) }
	}
	slices.SortFunc(order, func(a, b int32) int { return cmp.Or(same(a, b), cmp.Compare(a, b)) })
	var d Duplicates
	var firsts []int32 // first row of each repeated value
	for lo := 0; lo < len(order); {
		hi := lo + 1
		for hi < len(order) && same(order[lo], order[hi]) == 0 {
			hi++
		}
		if hi-lo > 1 {
			d.Values++
			d.Rows += hi - lo
			firsts = append(firsts, order[lo])
		}
		lo = hi
	}
	slices.Sort(firsts)
	for _, i := range firsts[:min(len(firsts), examples)] {
		d.First = append(d.First, c.String(int(i)))
	}
	return d
}
