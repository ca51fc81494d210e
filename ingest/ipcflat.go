package ingest

import (
	"math"

	flatbuffers "github.com/google/flatbuffers/go"
)

// fbTable is a FlatBuffers table whose vtable and inline part were checked to lie
// inside the buffer, so that the flatbuffers accessors, which do not check, cannot
// read past its end.
type fbTable struct {
	flatbuffers.Table
	size uint32 // bytes of the inline part (the vtable's second entry)
}

// fbAt checks the table at position pos of buf.
func fbAt(buf []byte, pos uint64) (fbTable, bool) {
	n := uint64(len(buf))
	if pos+flatbuffers.SizeSOffsetT > n || n > math.MaxInt32 {
		return fbTable{}, false
	}
	vt := int64(pos) - int64(flatbuffers.GetSOffsetT(buf[pos:]))
	if vt < 0 || uint64(vt)+2*flatbuffers.SizeVOffsetT > n {
		return fbTable{}, false
	}
	vtSize := uint64(flatbuffers.GetVOffsetT(buf[vt:]))
	inline := uint64(flatbuffers.GetVOffsetT(buf[vt+flatbuffers.SizeVOffsetT:]))
	if vtSize < 2*flatbuffers.SizeVOffsetT || vtSize%2 != 0 || uint64(vt)+vtSize > n || inline < flatbuffers.SizeSOffsetT || pos+inline > n {
		return fbTable{}, false
	}
	return fbTable{flatbuffers.Table{Bytes: buf, Pos: flatbuffers.UOffsetT(pos)}, uint32(inline)}, true
}

// fbRoot returns the root table of a FlatBuffers buffer.
func fbRoot(buf []byte) (fbTable, bool) {
	if len(buf) < flatbuffers.SizeUOffsetT {
		return fbTable{}, false
	}
	return fbAt(buf, uint64(flatbuffers.GetUOffsetT(buf)))
}

// slot returns the vtable entry of field number f.
func slot(f int) flatbuffers.VOffsetT {
	return flatbuffers.VOffsetT(2*flatbuffers.SizeVOffsetT + f*flatbuffers.SizeVOffsetT)
}

// field returns the offset in t of field f, size bytes wide: present is false
// for a field left out (FlatBuffers omits scalars equal to their default, and a
// vtable written before the field existed ends before its entry), ok is false
// when the field does not fit in the table.
func (t fbTable) field(f, size int) (off flatbuffers.UOffsetT, present, ok bool) {
	o := t.Offset(slot(f))
	if o == 0 {
		return 0, false, true
	}
	if uint32(o)+uint32(size) > t.size {
		return 0, true, false
	}
	return flatbuffers.UOffsetT(o), true, true
}

// int64Field returns scalar field f (0 when left out).
func (t fbTable) int64Field(f int) (int64, bool) {
	off, present, ok := t.field(f, flatbuffers.SizeInt64)
	if !present || !ok {
		return 0, ok
	}
	return t.GetInt64(t.Pos + off), true
}

// uint8Field returns scalar field f (0 when left out).
func (t fbTable) uint8Field(f int) (uint8, bool) {
	off, present, ok := t.field(f, flatbuffers.SizeUint8)
	if !present || !ok {
		return 0, ok
	}
	return t.GetUint8(t.Pos + off), true
}

// indirect follows the offset stored at position p to the position it points at.
func (t fbTable) indirect(p flatbuffers.UOffsetT) (flatbuffers.UOffsetT, bool) {
	if uint64(p)+flatbuffers.SizeUOffsetT > uint64(len(t.Bytes)) {
		return 0, false
	}
	q := t.Indirect(p)
	return q, q >= p && uint64(q) < uint64(len(t.Bytes))
}

// tableField returns the table in field f (a table or a union value).
func (t fbTable) tableField(f int) (sub fbTable, present, ok bool) {
	off, present, ok := t.field(f, flatbuffers.SizeUOffsetT)
	if !present || !ok {
		return fbTable{}, present, ok
	}
	p, ok := t.indirect(t.Pos + off)
	if !ok {
		return fbTable{}, true, false
	}
	sub, ok = fbAt(t.Bytes, uint64(p))
	return sub, true, ok
}

// vector returns the start and length of the vector (or string) in field f with
// elements of elem bytes, after checking that it lies inside the buffer. A field
// left out is an empty vector.
func (t fbTable) vector(f, elem int) (start flatbuffers.UOffsetT, n int, ok bool) {
	off, present, ok := t.field(f, flatbuffers.SizeUOffsetT)
	if !present || !ok {
		return 0, 0, ok
	}
	hdr, ok := t.indirect(t.Pos + off)
	if !ok || uint64(hdr)+flatbuffers.SizeUOffsetT > uint64(len(t.Bytes)) {
		return 0, 0, false
	}
	start, n = t.Vector(off), t.VectorLen(off)
	if uint64(start)+uint64(n)*uint64(elem) > uint64(len(t.Bytes)) {
		return 0, 0, false
	}
	return start, n, true
}

// element returns table k of a vector of tables starting at start.
func (t fbTable) element(start flatbuffers.UOffsetT, k int) (fbTable, bool) {
	p, ok := t.indirect(start + flatbuffers.UOffsetT(k*flatbuffers.SizeUOffsetT))
	if !ok {
		return fbTable{}, false
	}
	return fbAt(t.Bytes, uint64(p))
}
