package ingest

import (
	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
)

// vectorWidth tells whether dt is a vector feature type (a list, large list or
// fixed-size list of integers or floats) and its fixed width (0 when each row
// says: list and large list).
func vectorWidth(dt arrow.DataType) (ok bool, width int) {
	switch t := dt.(type) {
	case *arrow.ListType:
		return isVectorElem(t.Elem()), 0
	case *arrow.LargeListType:
		return isVectorElem(t.Elem()), 0
	case *arrow.FixedSizeListType:
		return isVectorElem(t.Elem()) && t.Len() > 0, int(t.Len())
	}
	return false, 0
}

func isVectorElem(dt arrow.DataType) bool {
	switch dt.ID() {
	case arrow.FLOAT16, arrow.FLOAT32, arrow.FLOAT64:
		return true
	}
	return isIntegerType(dt)
}

// firstWidth returns the length of the first non-null list of arr, -1 when
// every row is null, or -2 when its offsets lie outside the values.
func firstWidth(arr arrow.Array) int {
	l, ok := arr.(array.ListLike)
	if !ok {
		return -1
	}
	for i := 0; i < l.Len(); i++ {
		if !l.IsNull(i) {
			s, e := l.ValueOffsets(i)
			if s < 0 || e < s || e > int64(l.ListValues().Len()) {
				return -2
			}
			return int(e - s)
		}
	}
	return -1
}

// fillList converts the vector column arr (a list array of n rows) into matrix
// columns j0 … j0+w−1 of dst, marking null lists and null, NaN and infinite
// values. A list of another length than w is an error naming the row.
func (b *builder) fillList(dst []float32, j0, w int, name string, arr arrow.Array) error {
	l, ok := arr.(array.ListLike)
	if !ok {
		panic("ingest: unexpected vector type " + arr.DataType().String())
	}
	vals := l.ListValues()
	for i := 0; i < l.Len(); i++ {
		row := dst[i*b.d+j0 : i*b.d+j0+w]
		if l.IsNull(i) {
			clear(row)
			b.markBad(i, j0, badNull, "")
			continue
		}
		s, e := l.ValueOffsets(i)
		if s < 0 || e < s || e > int64(vals.Len()) {
			return inputErr(b.file, name, b.seen+int64(i)+1, "corrupt list offsets")
		}
		if int(e-s) != w {
			return inputErr(b.file, name, b.seen+int64(i)+1, "vector of %d values; every row must hold %d (the length of the first)", e-s, w)
		}
		b.fillElems(row, i, j0, vals, int(s))
	}
	return nil
}

// fillElems copies len(row) values of vals from position s into row (chunk row
// i, matrix columns from j0), marking null, NaN and infinite values.
func (b *builder) fillElems(row []float32, i, j0 int, vals arrow.Array, s int) {
	w := len(row)
	switch a := vals.(type) {
	case *array.Float32:
		copy(row, a.Float32Values()[s:s+w])
	case *array.Float64:
		for e, v := range a.Float64Values()[s : s+w] {
			row[e] = float32(v)
		}
	case *array.Float16:
		for e := range row {
			row[e] = a.Value(s + e).Float32()
		}
	case *array.Int8:
		convertInts(row, a.Int8Values()[s:s+w])
	case *array.Int16:
		convertInts(row, a.Int16Values()[s:s+w])
	case *array.Int32:
		convertInts(row, a.Int32Values()[s:s+w])
	case *array.Int64:
		convertInts(row, a.Int64Values()[s:s+w])
	case *array.Uint8:
		convertInts(row, a.Uint8Values()[s:s+w])
	case *array.Uint16:
		convertInts(row, a.Uint16Values()[s:s+w])
	case *array.Uint32:
		convertInts(row, a.Uint32Values()[s:s+w])
	case *array.Uint64:
		convertInts(row, a.Uint64Values()[s:s+w])
	default:
		panic("ingest: unexpected vector element type " + vals.DataType().String())
	}
	if vals.NullN() > 0 {
		for e := range row {
			if vals.IsNull(s + e) {
				row[e] = 0
				b.markBad(i, j0+e, badNull, "")
			}
		}
	}
	for e, v := range row {
		if v-v != 0 {
			b.markBad(i, j0+e, floatReason(v), "")
		}
	}
}

func convertInts[T int8 | int16 | int32 | int64 | uint8 | uint16 | uint32 | uint64](dst []float32, src []T) {
	for e, v := range src {
		dst[e] = float32(v)
	}
}
