package ingest

import (
	"math"
	"strconv"
	"strings"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
)

// isNumericType reports whether columns of type dt can be features.
func isNumericType(dt arrow.DataType) bool {
	switch dt.ID() {
	case arrow.INT8, arrow.INT16, arrow.INT32, arrow.INT64,
		arrow.UINT8, arrow.UINT16, arrow.UINT32, arrow.UINT64,
		arrow.FLOAT16, arrow.FLOAT32, arrow.FLOAT64,
		arrow.DECIMAL128, arrow.DECIMAL256:
		return true
	}
	return false
}

func isIntegerType(dt arrow.DataType) bool {
	switch dt.ID() {
	case arrow.INT8, arrow.INT16, arrow.INT32, arrow.INT64,
		arrow.UINT8, arrow.UINT16, arrow.UINT32, arrow.UINT64:
		return true
	}
	return false
}

// isTextType reports whether dt is a string type, or a dictionary of one.
func isTextType(dt arrow.DataType) bool {
	switch dt.ID() {
	case arrow.STRING, arrow.LARGE_STRING, arrow.STRING_VIEW:
		return true
	case arrow.DICTIONARY:
		return isTextType(dt.(*arrow.DictionaryType).ValueType)
	}
	return false
}

// isLabelType reports whether dt can be a label: text or integers, plain or dictionary.
func isLabelType(dt arrow.DataType) bool {
	if dt.ID() == arrow.DICTIONARY {
		vt := dt.(*arrow.DictionaryType).ValueType
		return isTextType(vt) || isIntegerType(vt)
	}
	return isTextType(dt) || isIntegerType(dt)
}

// arrowCols describes the fields of an Arrow schema for column selection.
func arrowCols(sc *arrow.Schema) []colInfo {
	fs := sc.Fields()
	cols := make([]colInfo, len(fs))
	for i, f := range fs {
		vec, width := vectorWidth(f.Type)
		cols[i] = colInfo{name: f.Name, numeric: isNumericType(f.Type) || vec, typ: f.Type.String(),
			vector: vec, width: width, integer: isIntegerType(f.Type)}
	}
	return cols
}

// checkPassTypes checks the types of the id and label columns (folder keys,
// beyond the schema's fields, are text).
func checkPassTypes(file string, sc *arrow.Schema, sel selection) error {
	if sel.id >= 0 && sel.id < sc.NumFields() {
		f := sc.Field(sel.id)
		if !isIntegerType(f.Type) && !isTextType(f.Type) {
			return inputErr(file, f.Name, 0, "id column has type %s; want integers or text", f.Type)
		}
	}
	if sel.label >= 0 && sel.label < sc.NumFields() {
		f := sc.Field(sel.label)
		if !isLabelType(f.Type) {
			return inputErr(file, f.Name, 0, "label column has type %s; want text or integers", f.Type)
		}
	}
	return nil
}

// intsIn reports whether field i of sc holds integers, plain or dictionary-
// encoded (false beyond the schema: folder keys are text).
func intsIn(sc *arrow.Schema, i int) bool {
	if i < 0 || i >= sc.NumFields() {
		return false
	}
	dt := sc.Field(i).Type
	if d, ok := dt.(*arrow.DictionaryType); ok {
		dt = d.ValueType
	}
	return isIntegerType(dt)
}

// fillArrow converts feature column j of a chunk (arr, n rows) into dst (n×D, row-major)
// and marks null, NaN and infinite values.
func (b *builder) fillArrow(dst []float32, j int, arr arrow.Array) {
	switch a := arr.(type) {
	case *array.Int8:
		fillInts(b, dst, j, a.Int8Values(), arr)
	case *array.Int16:
		fillInts(b, dst, j, a.Int16Values(), arr)
	case *array.Int32:
		fillInts(b, dst, j, a.Int32Values(), arr)
	case *array.Int64:
		fillInts(b, dst, j, a.Int64Values(), arr)
	case *array.Uint8:
		fillInts(b, dst, j, a.Uint8Values(), arr)
	case *array.Uint16:
		fillInts(b, dst, j, a.Uint16Values(), arr)
	case *array.Uint32:
		fillInts(b, dst, j, a.Uint32Values(), arr)
	case *array.Uint64:
		fillInts(b, dst, j, a.Uint64Values(), arr)
	case *array.Float32:
		fillFloats(b, dst, j, a.Float32Values(), arr)
	case *array.Float64:
		fillFloats(b, dst, j, a.Float64Values(), arr)
	case *array.Float16:
		for i := 0; i < a.Len(); i++ {
			b.put(dst, i, j, a.Value(i).Float32(), arr)
		}
	case *array.Decimal128:
		scale := a.DataType().(*arrow.Decimal128Type).Scale
		for i := 0; i < a.Len(); i++ {
			b.put(dst, i, j, float32(a.Value(i).ToFloat64(scale)), arr)
		}
	case *array.Decimal256:
		scale := a.DataType().(*arrow.Decimal256Type).Scale
		for i := 0; i < a.Len(); i++ {
			b.put(dst, i, j, float32(a.Value(i).ToFloat64(scale)), arr)
		}
	default:
		// Column selection admits only the types above.
		panic("ingest: unexpected feature type " + arr.DataType().String())
	}
}

// put stores one value, marking it when null, NaN or infinite.
func (b *builder) put(dst []float32, i, j int, v float32, arr arrow.Array) {
	if arr.IsNull(i) {
		dst[i*b.d+j] = 0
		b.markBad(i, j, badNull, "")
		return
	}
	dst[i*b.d+j] = v
	if v-v != 0 {
		b.markBad(i, j, floatReason(v), "")
	}
}

func floatReason(v float32) uint8 {
	switch {
	case math.IsInf(float64(v), 1):
		return badPosInf
	case math.IsInf(float64(v), -1):
		return badNegInf
	}
	return badNaN
}

func fillInts[T int8 | int16 | int32 | int64 | uint8 | uint16 | uint32 | uint64](b *builder, dst []float32, j int, vals []T, arr arrow.Array) {
	d := b.d
	for i, v := range vals {
		dst[i*d+j] = float32(v)
	}
	if arr.NullN() > 0 {
		for i := range vals {
			if arr.IsNull(i) {
				dst[i*d+j] = 0
				b.markBad(i, j, badNull, "")
			}
		}
	}
}

func fillFloats[T float32 | float64](b *builder, dst []float32, j int, vals []T, arr arrow.Array) {
	d := b.d
	nulls := arr.NullN() > 0
	for i, v := range vals {
		f := float32(v)
		if nulls && arr.IsNull(i) {
			dst[i*d+j] = 0
			b.markBad(i, j, badNull, "")
			continue
		}
		dst[i*d+j] = f
		if f-f != 0 {
			if w := float64(v); w-w == 0 {
				// A finite float64 beyond float32's range.
				b.markBad(i, j, badRange, strconv.FormatFloat(w, 'g', -1, 64))
			} else {
				b.markBad(i, j, floatReason(f), "")
			}
		}
	}
}

// passCol accumulates an id or label column.
type passCol struct {
	col    *Column
	isID   bool
	file   string
	intern map[string]string // shares the memory of repeated text values
}

func newPassCol(file, name string, isID, ints bool) *passCol {
	p := &passCol{col: &Column{Name: name}, isID: isID, file: file}
	if ints {
		p.col.Ints = []int64{}
	} else {
		p.col.Strings = []string{}
	}
	if !isID {
		p.intern = make(map[string]string)
	}
	return p
}

// maxInterned bounds the interning table of labels.
const maxInterned = 1 << 16

// text returns an owned copy of s (Arrow strings alias the batch's buffers).
func (p *passCol) text(s string) string {
	if p.intern == nil {
		return strings.Clone(s)
	}
	if v, ok := p.intern[s]; ok {
		return v
	}
	v := strings.Clone(s)
	if len(p.intern) < maxInterned {
		p.intern[v] = v
	}
	return v
}

// appendArrow appends the kept rows of arr (keep == nil: all). rowBase is the number
// of input rows before this chunk, for messages.
func (p *passCol) appendArrow(arr arrow.Array, keep []bool, rowBase int64) error {
	if dict, ok := arr.(*array.Dictionary); ok {
		return p.appendDict(dict, keep, rowBase)
	}
	for i := 0; i < arr.Len(); i++ {
		if keep != nil && !keep[i] {
			continue
		}
		if arr.IsNull(i) {
			if err := p.appendNull(rowBase + int64(i) + 1); err != nil {
				return err
			}
			continue
		}
		if err := p.appendValue(arr, i, rowBase); err != nil {
			return err
		}
	}
	return nil
}

// appendConst appends the same value (a folder key) for the kept rows of a
// chunk of n rows.
func (p *passCol) appendConst(v string, null bool, n int, keep []bool, rowBase int64) error {
	v = p.text(v)
	for i := 0; i < n; i++ {
		if keep != nil && !keep[i] {
			continue
		}
		if null {
			if err := p.appendNull(rowBase + int64(i) + 1); err != nil {
				return err
			}
			continue
		}
		p.appendText(v)
	}
	return nil
}

// appendNull appends a null: an error for an id, a marked null for a label.
func (p *passCol) appendNull(row int64) error {
	if p.isID {
		return inputErr(p.file, p.col.Name, row, "id is null")
	}
	c := p.col
	if c.Null == nil {
		c.Null = make([]bool, c.Len(), max(16, c.Len()*5/4))
	}
	if c.Ints != nil {
		c.Ints = append(c.Ints, 0)
	} else {
		c.Strings = append(c.Strings, "")
	}
	c.Null = append(c.Null, true)
	return nil
}

// appendInt appends an integer (as text to a text column).
func (p *passCol) appendInt(v int64) {
	c := p.col
	if c.Ints != nil {
		c.Ints = append(c.Ints, v)
	} else {
		c.Strings = append(c.Strings, p.text(strconv.FormatInt(v, 10)))
	}
	if c.Null != nil {
		c.Null = append(c.Null, false)
	}
}

// appendText appends text; an integer column becomes a text column first.
func (p *passCol) appendText(s string) {
	c := p.col
	if c.Ints != nil {
		strs := make([]string, len(c.Ints), max(cap(c.Ints), 16))
		for i, v := range c.Ints {
			if c.Null == nil || !c.Null[i] {
				strs[i] = strconv.FormatInt(v, 10)
			}
		}
		c.Ints, c.Strings = nil, strs
	}
	c.Strings = append(c.Strings, p.text(s))
	if c.Null != nil {
		c.Null = append(c.Null, false)
	}
}

func (p *passCol) appendValue(arr arrow.Array, i int, rowBase int64) error {
	var iv int64
	switch a := arr.(type) {
	case *array.String:
		p.appendText(a.Value(i))
		return nil
	case *array.LargeString:
		p.appendText(a.Value(i))
		return nil
	case *array.StringView:
		p.appendText(a.Value(i))
		return nil
	case *array.Int8:
		iv = int64(a.Value(i))
	case *array.Int16:
		iv = int64(a.Value(i))
	case *array.Int32:
		iv = int64(a.Value(i))
	case *array.Int64:
		iv = a.Value(i)
	case *array.Uint8:
		iv = int64(a.Value(i))
	case *array.Uint16:
		iv = int64(a.Value(i))
	case *array.Uint32:
		iv = int64(a.Value(i))
	case *array.Uint64:
		u := a.Value(i)
		if u > math.MaxInt64 {
			return inputErr(p.file, p.col.Name, rowBase+int64(i)+1, "value %d does not fit in int64", u)
		}
		iv = int64(u)
	default:
		panic("ingest: unexpected pass-through type " + arr.DataType().String())
	}
	p.appendInt(iv)
	return nil
}

// textAt returns value i of a pass-through array as text ("" when null).
func textAt(arr arrow.Array, i int) string {
	if arr.IsNull(i) {
		return ""
	}
	if d, ok := arr.(*array.Dictionary); ok {
		return textAt(d.Dictionary(), d.GetValueIndex(i))
	}
	return arr.ValueStr(i)
}

// appendDict appends from a dictionary-encoded array, converting each dictionary
// entry once.
func (p *passCol) appendDict(a *array.Dictionary, keep []bool, rowBase int64) error {
	dict := a.Dictionary()
	tmp := &passCol{col: &Column{Name: p.col.Name}, file: p.file, intern: p.intern}
	if p.col.Ints != nil {
		tmp.col.Ints = []int64{}
	} else {
		tmp.col.Strings = []string{}
	}
	if tmp.intern == nil {
		tmp.intern = make(map[string]string)
	}
	valid := make([]bool, dict.Len())
	for k := 0; k < dict.Len(); k++ {
		if dict.IsNull(k) {
			tmp.appendInt(0) // a placeholder; valid[k] stays false
			continue
		}
		if err := tmp.appendValue(dict, k, 0); err != nil {
			return err
		}
		valid[k] = true
	}
	for i := 0; i < a.Len(); i++ {
		if keep != nil && !keep[i] {
			continue
		}
		k := a.GetValueIndex(i)
		if a.IsNull(i) || k < 0 || k >= len(valid) || !valid[k] {
			if err := p.appendNull(rowBase + int64(i) + 1); err != nil {
				return err
			}
			continue
		}
		if tmp.col.Ints != nil {
			p.appendInt(tmp.col.Ints[k])
		} else {
			p.appendText(tmp.col.Strings[k])
		}
	}
	return nil
}
