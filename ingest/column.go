package ingest

import "strconv"

// Column is a pass-through column (row id or label), in input row order.
// Exactly one of Ints and Strings is non-nil.
type Column struct {
	Name    string
	Ints    []int64
	Strings []string
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

// String returns value i formatted as text.
func (c *Column) String(i int) string {
	if c.Ints != nil {
		return strconv.FormatInt(c.Ints[i], 10)
	}
	return c.Strings[i]
}
