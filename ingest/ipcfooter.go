package ingest

import (
	"encoding/binary"
	"errors"
	"fmt"
	"os"
)

// The Arrow library reads the footer of an IPC file but does not expose the row count
// of each record batch without loading the batch, and it trusts the lengths it finds
// there (a damaged footer can make it allocate hundreds of GiB and crash the
// process). So the few fields needed are read and checked here by hand from the
// footer and the record batch headers, following the Arrow columnar format
// specification ("IPC File Format", File.fbs, Schema.fbs, Message.fbs) and the
// FlatBuffers binary layout, before the file is handed to the library.

// fbTable is a FlatBuffers table inside buf.
type fbTable struct {
	buf []byte
	pos int
}

func le32(b []byte, p int) (uint32, bool) {
	if p < 0 || p+4 > len(b) {
		return 0, false
	}
	return binary.LittleEndian.Uint32(b[p:]), true
}

// fbRoot returns the root table of a FlatBuffers buffer.
func fbRoot(buf []byte) (fbTable, bool) {
	off, ok := le32(buf, 0)
	return fbTable{buf, int(off)}, ok && int(off) < len(buf)
}

// field returns the position of field i of t; present is false for a field left
// out (FlatBuffers omits scalars equal to their default) and valid is false for a
// malformed table.
func (t fbTable) field(i int) (pos int, present, valid bool) {
	so, ok := le32(t.buf, t.pos)
	if !ok {
		return 0, false, false
	}
	vt := t.pos - int(int32(so))
	if vt < 0 || vt+4 > len(t.buf) {
		return 0, false, false
	}
	vtSize := int(binary.LittleEndian.Uint16(t.buf[vt:]))
	slot := vt + 4 + 2*i
	if slot+2 > vt+vtSize || slot+2 > len(t.buf) {
		return 0, false, true // the vtable predates the field
	}
	off := int(binary.LittleEndian.Uint16(t.buf[slot:]))
	if off == 0 {
		return 0, false, true
	}
	return t.pos + off, true, true
}

// ref follows the offset stored in field i (a table or vector).
func (t fbTable) ref(i int) (int, bool) {
	p, present, _ := t.field(i)
	if !present {
		return 0, false
	}
	u, ok := le32(t.buf, p)
	if !ok || p+int(u) >= len(t.buf) {
		return 0, false
	}
	return p + int(u), true
}

// int64Field returns scalar field i (0 when left out).
func (t fbTable) int64Field(i int) (int64, bool) {
	p, present, valid := t.field(i)
	if !present {
		return 0, valid
	}
	if p+8 > len(t.buf) {
		return 0, false
	}
	return int64(binary.LittleEndian.Uint64(t.buf[p:])), true
}

// uint8Field returns scalar field i (0 when left out).
func (t fbTable) uint8Field(i int) (uint8, bool) {
	p, present, valid := t.field(i)
	if !present {
		return 0, valid
	}
	if p >= len(t.buf) {
		return 0, false
	}
	return t.buf[p], true
}

// errFooter is the reason given for any malformed footer or record batch header.
var errFooter = errors.New("malformed footer or record batch header")

// ipcFileRows returns the total number of rows of the record batches of an Arrow IPC
// file, from its footer and the record batch headers, without reading the bodies. It
// also checks that every record batch lies inside the file: the Arrow library would
// otherwise allocate whatever body length a damaged footer announces.
func ipcFileRows(f *os.File) (int64, error) {
	st, err := f.Stat()
	if err != nil {
		return 0, err
	}
	size := st.Size()
	if size < 20 {
		return 0, errFooter
	}
	var tail [10]byte
	if _, err := f.ReadAt(tail[:], size-10); err != nil {
		return 0, err
	}
	flen := int64(int32(binary.LittleEndian.Uint32(tail[:4])))
	if flen <= 0 || flen > size-18 || flen > 1<<30 {
		return 0, errFooter
	}
	footerStart := size - 10 - flen
	footer := make([]byte, flen)
	if _, err := f.ReadAt(footer, footerStart); err != nil {
		return 0, err
	}
	root, ok := fbRoot(footer)
	if !ok {
		return 0, errFooter
	}
	if sp, ok := root.ref(1); !ok || !schemaOK(fbTable{footer, sp}) { // Footer.schema
		return 0, errFooter
	}
	vec, ok := root.ref(3) // Footer.recordBatches: [Block]
	if !ok {
		if _, present, valid := root.field(3); !present && valid {
			return 0, nil // no record batches
		}
		return 0, errFooter
	}
	count, ok := le32(footer, vec)
	const blockSize = 24 // struct Block { offset: long; metaDataLength: int; bodyLength: long }
	if !ok || int64(vec)+4+int64(count)*blockSize > int64(len(footer)) {
		return 0, errFooter
	}
	var total int64
	for b := 0; b < int(count); b++ {
		p := vec + 4 + b*blockSize
		off := int64(binary.LittleEndian.Uint64(footer[p:]))
		metaLen := int64(int32(binary.LittleEndian.Uint32(footer[p+8:])))
		bodyLen := int64(binary.LittleEndian.Uint64(footer[p+16:]))
		if off < 8 || metaLen < 8 || bodyLen < 0 || metaLen > footerStart || bodyLen > footerStart ||
			off > footerStart-metaLen-bodyLen {
			return 0, fmt.Errorf("record batch %d lies outside the file", b)
		}
		meta := make([]byte, metaLen)
		if _, err := f.ReadAt(meta, off); err != nil {
			return 0, err
		}
		// Encapsulated message: optional 0xFFFFFFFF continuation, int32 length, Message.
		start := 4
		if binary.LittleEndian.Uint32(meta) == 0xFFFFFFFF {
			start = 8
		}
		msg, ok := fbRoot(meta[start:])
		if !ok {
			return 0, errFooter
		}
		if ht, ok := msg.uint8Field(1); !ok || ht != 3 { // MessageHeader.RecordBatch
			return 0, errFooter
		}
		hdr, ok := msg.ref(2)
		if !ok {
			return 0, errFooter
		}
		n, ok := fbTable{msg.buf, hdr}.int64Field(0) // RecordBatch.length
		if !ok || n < 0 {
			return 0, errFooter
		}
		total += n
	}
	return total, nil
}

// vecOK reports whether the vector in field i of t (absent is fine) fits in the
// buffer with elements of elem bytes; it returns the vector position and length.
func (t fbTable) vecOK(i, elem int) (pos, n int, ok bool) {
	_, present, valid := t.field(i)
	if !valid {
		return 0, 0, false
	}
	if !present {
		return 0, 0, true
	}
	v, ok := t.ref(i)
	if !ok {
		return 0, 0, false
	}
	l, ok := le32(t.buf, v)
	if !ok || int64(v)+4+int64(l)*int64(elem) > int64(len(t.buf)) {
		return 0, 0, false
	}
	return v, int(l), true
}

// elemTable returns element k of a vector of tables at pos.
func (t fbTable) elemTable(pos, k int) (fbTable, bool) {
	p := pos + 4 + 4*k
	u, ok := le32(t.buf, p)
	if !ok || p+int(u) >= len(t.buf) {
		return fbTable{}, false
	}
	return fbTable{t.buf, p + int(u)}, true
}

// schemaOK checks that every vector and string of an Arrow Schema table (Schema.fbs:
// fields, custom metadata, features; per Field: name, type, dictionary, children,
// custom metadata) lies inside the buffer, because the Arrow library sizes slices from
// these lengths before it looks at the data. depth bounds the nesting of children.
func schemaOK(s fbTable) bool {
	if _, _, ok := s.vecOK(3, 8); !ok { // features: [long]
		return false
	}
	if !keyValuesOK(s, 2) {
		return false
	}
	return fieldsOK(s, 1, 0)
}

func fieldsOK(t fbTable, i, depth int) bool {
	if depth > 64 {
		return false
	}
	pos, n, ok := t.vecOK(i, 4)
	if !ok {
		return false
	}
	for k := 0; k < n; k++ {
		f, ok := t.elemTable(pos, k)
		if !ok {
			return false
		}
		if _, _, ok := f.vecOK(0, 1); !ok { // name
			return false
		}
		kind, ok := f.uint8Field(2) // Field.type_type
		if !ok {
			return false
		}
		if tp, present, valid := f.field(3); !valid || (present && !typeOK(kind, fbTableAt(f, tp))) {
			return false
		}
		if !keyValuesOK(f, 6) || !fieldsOK(f, 5, depth+1) {
			return false
		}
	}
	return true
}

// fbTableAt follows the table offset stored at position p.
func fbTableAt(t fbTable, p int) fbTable {
	u, ok := le32(t.buf, p)
	if !ok || p+int(u) >= len(t.buf) {
		return fbTable{t.buf, -1}
	}
	return fbTable{t.buf, p + int(u)}
}

// typeOK checks the vectors a type table may hold: Timestamp.timezone (Type 10) and
// Union.typeIds (Type 14), both field 1.
func typeOK(kind uint8, t fbTable) bool {
	if t.pos < 0 {
		return false
	}
	switch kind {
	case 10:
		_, _, ok := t.vecOK(1, 1)
		return ok
	case 14:
		_, _, ok := t.vecOK(1, 4)
		return ok
	}
	return true
}

func keyValuesOK(t fbTable, i int) bool {
	pos, n, ok := t.vecOK(i, 4)
	if !ok {
		return false
	}
	for k := 0; k < n; k++ {
		kv, ok := t.elemTable(pos, k)
		if !ok {
			return false
		}
		if _, _, ok := kv.vecOK(0, 1); !ok {
			return false
		}
		if _, _, ok := kv.vecOK(1, 1); !ok {
			return false
		}
	}
	return true
}

// ipcStreamSchemaOK checks the first message of an Arrow IPC stream: a Schema message
// whose vectors lie inside it (see schemaOK). It reads through f's ReadAt.
func ipcStreamSchemaOK(f *os.File) error {
	st, err := f.Stat()
	if err != nil {
		return err
	}
	var pre [8]byte
	if _, err := f.ReadAt(pre[:], 0); err != nil {
		return errFooter
	}
	start, n := int64(4), int64(int32(binary.LittleEndian.Uint32(pre[:4])))
	if uint32(n) == 0xFFFFFFFF {
		start, n = 8, int64(int32(binary.LittleEndian.Uint32(pre[4:])))
	}
	if n <= 0 || n > st.Size()-start || n > 1<<26 {
		return errFooter
	}
	meta := make([]byte, n)
	if _, err := f.ReadAt(meta, start); err != nil {
		return errFooter
	}
	msg, ok := fbRoot(meta)
	if !ok {
		return errFooter
	}
	if ht, ok := msg.uint8Field(1); !ok || ht != 1 { // MessageHeader.Schema
		return errFooter
	}
	sp, ok := msg.ref(2)
	if !ok || !schemaOK(fbTable{meta, sp}) {
		return errFooter
	}
	return nil
}
