// Package ingest reads feature tables (Parquet, Arrow IPC, CSV) in chunks into a
// row-major float32 matrix, validates their values, carries id and label columns
// through, writes result tables, and computes principal components.
package ingest

// Matrix is an N×D matrix of float32 values stored row-major in one slice:
// element (i, j) is Data[i*D+j]. len(Data) must equal N*D.
type Matrix struct {
	N, D int
	Data []float32
}

// Row returns row i as a sub-slice of Data (no copy). It panics if i is out of range.
func (m Matrix) Row(i int) []float32 {
	return m.Data[i*m.D : (i+1)*m.D : (i+1)*m.D]
}

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
		return formatInt(c.Ints[i])
	}
	return c.Strings[i]
}
