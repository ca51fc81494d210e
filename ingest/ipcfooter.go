package ingest

import (
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"os"

	flatbuffers "github.com/google/flatbuffers/go"
)

// Arrow's Go IPC readers size Go slices straight from lengths found in the file
// (the schema's field and key-value counts, the metadata length of a stream
// message) with make, outside any memory.Allocator, so a capped allocator cannot
// refuse them (TestArrowReaderTrustsLengths); and the file reader does not tell the
// row count of each record batch without loading the batch. So the few fields
// needed are read and checked here, before the file is handed to the library,
// following the Arrow columnar format specification ("Serialization and
// Interprocess Communication"; File.fbs, Schema.fbs, Message.fbs). Every vector
// and string the library would size a slice from is checked to lie inside its
// buffer, and every message to lie inside the file.

// Field numbers of the Arrow format tables read here, in the order the fields are
// declared in the format's .fbs files (a union takes two: its type tag, then the
// value).
const (
	footerSchema        = 1 // Footer.schema: Schema
	footerDictionaries  = 2 // Footer.dictionaries: [Block]
	footerRecordBatches = 3 // Footer.recordBatches: [Block]

	schemaFields         = 1 // Schema.fields: [Field]
	schemaCustomMetadata = 2 // Schema.custom_metadata: [KeyValue]
	schemaFeatures       = 3 // Schema.features: [long]

	fieldName           = 0 // Field.name: string
	fieldTypeType       = 2 // Field.type's tag: Type
	fieldType           = 3 // Field.type: table of the tagged type
	fieldChildren       = 5 // Field.children: [Field]
	fieldCustomMetadata = 6 // Field.custom_metadata: [KeyValue]

	keyValueKey   = 0 // KeyValue.key: string
	keyValueValue = 1 // KeyValue.value: string

	timestampTimezone = 1 // Timestamp.timezone: string
	unionTypeIDs      = 1 // Union.typeIds: [int]

	messageHeaderType = 1 // Message.header's tag: MessageHeader
	messageHeader     = 2 // Message.header: table of the tagged header
	messageBodyLength = 3 // Message.bodyLength: long

	recordBatchLength  = 0 // RecordBatch.length: long
	recordBatchNodes   = 1 // RecordBatch.nodes: [FieldNode]
	recordBatchBuffers = 2 // RecordBatch.buffers: [Buffer]

	dictionaryBatchData = 1 // DictionaryBatch.data: RecordBatch
)

// Sizes of the structs FieldNode { length: long; null_count: long } and Buffer {
// offset: long; length: long } (Message.fbs, Schema.fbs).
const (
	fieldNodeSize = 16
	bufferSize    = 16
)

// Tags of the unions Type and MessageHeader (Schema.fbs, Message.fbs).
const (
	typeTimestamp         = 10
	typeUnion             = 14
	headerSchema          = 1
	headerDictionaryBatch = 2
	headerRecordBatch     = 3
)

// Layout of the struct Block { offset: long; metaDataLength: int; bodyLength:
// long } (File.fbs): 24 bytes with 4 bytes of padding after metaDataLength.
const (
	blockOffset     = 0
	blockMetaLength = 8
	blockBodyLength = 16
	blockSize       = 24
)

// Sizes of the IPC framing: the file's trailer (int32 footer length, "ARROW1"),
// a message's continuation marker, and the bound on one message's metadata.
const (
	fileTrailer     = 10
	continuation    = 0xFFFFFFFF
	maxMessageBytes = 1 << 26
	maxSchemaDepth  = 64
)

// errFooter is the reason given for any malformed footer or message header.
var errFooter = errors.New("malformed footer or message header")

// ipcFileRows returns the total number of rows of the record batches of an Arrow IPC
// file, from its footer and the record batch headers, without reading the bodies. It
// checks the schema (see schemaOK) and that every record batch and dictionary batch
// lies inside the file: the Arrow library would otherwise allocate whatever lengths
// a damaged footer announces.
func ipcFileRows(f *os.File) (int64, error) {
	st, err := f.Stat()
	if err != nil {
		return 0, err
	}
	size := st.Size()
	if size < 2*fileTrailer {
		return 0, errFooter
	}
	var tail [fileTrailer]byte
	if _, err := f.ReadAt(tail[:], size-fileTrailer); err != nil {
		return 0, err
	}
	flen := int64(int32(binary.LittleEndian.Uint32(tail[:4])))
	if flen <= 0 || flen > size-fileTrailer-8 || flen > 1<<30 {
		return 0, errFooter
	}
	footerStart := size - fileTrailer - flen
	footer := make([]byte, flen)
	if _, err := f.ReadAt(footer, footerStart); err != nil {
		return 0, err
	}
	root, ok := fbRoot(footer)
	if !ok {
		return 0, errFooter
	}
	if schema, present, ok := root.tableField(footerSchema); !present || !ok || !schemaOK(schema) {
		return 0, errFooter
	}
	read := func(off, metaLen, bodyLen int64) ([]byte, error) {
		meta := make([]byte, metaLen)
		if _, err := f.ReadAt(meta, off); err != nil {
			return nil, err
		}
		return meta, nil
	}
	if _, err := ipcBlocks(root, footerDictionaries, "dictionary batch", footerStart, func(off, metaLen, bodyLen int64) (int64, error) {
		meta, err := read(off, metaLen, bodyLen)
		if err != nil {
			return 0, err
		}
		_, err = blockMessage(meta, headerDictionaryBatch, bodyLen)
		return 0, err
	}); err != nil {
		return 0, err
	}
	return ipcBlocks(root, footerRecordBatches, "record batch", footerStart, func(off, metaLen, bodyLen int64) (int64, error) {
		meta, err := read(off, metaLen, bodyLen)
		if err != nil {
			return 0, err
		}
		return blockMessage(meta, headerRecordBatch, bodyLen)
	})
}

// ipcBlocks checks the blocks of what (a kind of batch) in the footer's vector
// field f: each must lie in [0, end) of the file, and its message must pass
// rows(offset, metadata length, body length), which returns its row count; it
// returns the sum of the row counts.
func ipcBlocks(root fbTable, f int, what string, end int64, rows func(off, metaLen, bodyLen int64) (int64, error)) (int64, error) {
	start, count, ok := root.vector(f, blockSize)
	if !ok {
		return 0, errFooter
	}
	var total, metas int64
	for b := 0; b < count; b++ {
		p := start + flatbuffers.UOffsetT(b*blockSize)
		off := root.GetInt64(p + blockOffset)
		metaLen := int64(root.GetInt32(p + blockMetaLength))
		bodyLen := root.GetInt64(p + blockBodyLength)
		if off < 8 || metaLen < 8 || bodyLen < 0 || metaLen > end || bodyLen > end || off > end-metaLen-bodyLen {
			return 0, fmt.Errorf("%s %d lies outside the file", what, b)
		}
		// Blocks do not overlap: their metadata adds up to less than the file.
		if metas += metaLen; metaLen > maxMessageBytes || metas > end {
			return 0, fmt.Errorf("%s %d: the blocks' metadata adds up to more than the file", what, b)
		}
		n, err := rows(off, metaLen, bodyLen)
		if err != nil {
			return 0, fmt.Errorf("%s %d: %w", what, b, err)
		}
		if n > math.MaxInt64-total {
			return 0, errFooter
		}
		total += n
	}
	return total, nil
}

// blockMessage checks the encapsulated message of a file block (optional
// continuation marker, int32 length, Message): a header of the kind tag whose
// record batch fits a body of bodyLen bytes (see batchOK). It returns the row
// count of a record batch.
func blockMessage(meta []byte, tag uint8, bodyLen int64) (int64, error) {
	start := 4
	if binary.LittleEndian.Uint32(meta) == continuation {
		start = 8
	}
	msg, ok := fbRoot(meta[start:])
	if !ok {
		return 0, errFooter
	}
	if got, ok := msg.uint8Field(messageHeaderType); !ok || got != tag {
		return 0, errFooter
	}
	hdr, present, ok := msg.tableField(messageHeader)
	if !present || !ok {
		return 0, errFooter
	}
	return batchOK(hdr, tag, bodyLen)
}

// batchOK checks the header hdr of a record batch (tag headerRecordBatch) or of
// a dictionary batch's record batch (headerDictionaryBatch) against a body of
// body bytes: a row count of 0 or more, field nodes of a length of 0 or more
// with 0 ≤ null count ≤ length, and buffers that lie inside the body (the Arrow
// library slices the body by these numbers without checking them). It returns
// the record batch's row count.
func batchOK(hdr fbTable, tag uint8, body int64) (int64, error) {
	if tag == headerDictionaryBatch {
		data, present, ok := hdr.tableField(dictionaryBatchData)
		if !present || !ok {
			return 0, errFooter
		}
		hdr = data
	}
	n, ok := hdr.int64Field(recordBatchLength)
	if !ok || n < 0 {
		return 0, errFooter
	}
	start, count, ok := hdr.vector(recordBatchNodes, fieldNodeSize)
	if !ok {
		return 0, errFooter
	}
	for k := range count {
		p := start + flatbuffers.UOffsetT(k*fieldNodeSize)
		length, nulls := hdr.GetInt64(p), hdr.GetInt64(p+8)
		if length < 0 || nulls < 0 || nulls > length {
			return 0, fmt.Errorf("field node %d announces %d values of which %d null", k, length, nulls)
		}
	}
	start, count, ok = hdr.vector(recordBatchBuffers, bufferSize)
	if !ok {
		return 0, errFooter
	}
	for k := range count {
		p := start + flatbuffers.UOffsetT(k*bufferSize)
		off, length := hdr.GetInt64(p), hdr.GetInt64(p+8)
		if off < 0 || length < 0 || off > body-length {
			return 0, fmt.Errorf("buffer %d (offset %d, length %d) lies outside the body of %d bytes", k, off, length, body)
		}
	}
	return n, nil
}

// schemaOK checks that every vector and string of an Arrow Schema table (fields,
// custom metadata, features; per Field: name, type, children, custom metadata) lies
// inside the buffer, because the Arrow library sizes slices from these lengths
// before it looks at the data.
func schemaOK(s fbTable) bool {
	if _, _, ok := s.vector(schemaFeatures, flatbuffers.SizeInt64); !ok {
		return false
	}
	return keyValuesOK(s, schemaCustomMetadata) && fieldsOK(s, schemaFields, 0)
}

// fieldsOK checks the vector of Field tables in field f of t, and their children
// down to maxSchemaDepth levels.
func fieldsOK(t fbTable, f, depth int) bool {
	if depth > maxSchemaDepth {
		return false
	}
	start, n, ok := t.vector(f, flatbuffers.SizeUOffsetT)
	if !ok {
		return false
	}
	for k := 0; k < n; k++ {
		fd, ok := t.element(start, k)
		if !ok {
			return false
		}
		if _, _, ok := fd.vector(fieldName, 1); !ok {
			return false
		}
		tag, ok := fd.uint8Field(fieldTypeType)
		if !ok {
			return false
		}
		if typ, present, ok := fd.tableField(fieldType); !ok || (present && !typeOK(tag, typ)) {
			return false
		}
		if !keyValuesOK(fd, fieldCustomMetadata) || !fieldsOK(fd, fieldChildren, depth+1) {
			return false
		}
	}
	return true
}

// typeOK checks the vectors a type table may hold: Timestamp.timezone and
// Union.typeIds.
func typeOK(tag uint8, t fbTable) bool {
	var ok bool
	switch tag {
	case typeTimestamp:
		_, _, ok = t.vector(timestampTimezone, 1)
	case typeUnion:
		_, _, ok = t.vector(unionTypeIDs, flatbuffers.SizeInt32)
	default:
		ok = true
	}
	return ok
}

// keyValuesOK checks the vector of KeyValue tables in field f of t.
func keyValuesOK(t fbTable, f int) bool {
	start, n, ok := t.vector(f, flatbuffers.SizeUOffsetT)
	if !ok {
		return false
	}
	for k := 0; k < n; k++ {
		kv, ok := t.element(start, k)
		if !ok {
			return false
		}
		if _, _, ok := kv.vector(keyValueKey, 1); !ok {
			return false
		}
		if _, _, ok := kv.vector(keyValueValue, 1); !ok {
			return false
		}
	}
	return true
}

// streamError is a fault found by ipcStreamCheck, at the message that follows
// rows rows of record batches.
type streamError struct {
	rows   int64
	schema bool // the fault is in the schema message
	err    error
}

func (e *streamError) Error() string { return e.err.Error() }

func (e *streamError) Unwrap() error { return e.err }

// ipcStreamCheck walks the messages of the Arrow IPC stream in f up to its
// end-of-stream marker or the end of the file: the first must be a Schema message
// whose vectors lie inside it (see schemaOK), and every message's metadata and body
// must lie inside the file, because the Arrow library allocates the announced
// lengths before reading. It returns nil or a *streamError.
func ipcStreamCheck(f *os.File) error {
	st, err := f.Stat()
	if err != nil {
		return err
	}
	size := st.Size()
	var rows int64
	var meta []byte
	for pos, k := int64(0), 0; ; k++ {
		fault := func(format string, args ...any) error {
			return &streamError{rows: rows, schema: k == 0, err: fmt.Errorf(format, args...)}
		}
		var pre [8]byte
		if n, _ := f.ReadAt(pre[:], pos); n < 4 {
			if k == 0 {
				return fault("%w", errFooter)
			}
			return nil // the end, or a cut the Arrow library reports
		}
		start, n := int64(4), int64(int32(binary.LittleEndian.Uint32(pre[:4])))
		if uint32(n) == continuation {
			start, n = 8, int64(int32(binary.LittleEndian.Uint32(pre[4:])))
		}
		if n == 0 && k > 0 {
			return nil // end-of-stream marker
		}
		if n <= 0 || n > size-pos-start || n > maxMessageBytes {
			return fault("message %d announces %d bytes of metadata, %d remain in the file", k, n, size-pos-start)
		}
		if int64(cap(meta)) < n {
			meta = make([]byte, n)
		}
		meta = meta[:n]
		if _, err := f.ReadAt(meta, pos+start); err != nil && err != io.EOF {
			return err
		}
		body, tag, length, err := messageInfo(meta, k == 0)
		if err != nil {
			return fault("message %d: %w", k, err)
		}
		pos += start + n
		if body > size-pos {
			return fault("message %d announces a body of %d bytes, %d remain in the file", k, body, size-pos)
		}
		pos += body
		if tag == headerRecordBatch && length <= math.MaxInt64-rows {
			rows += length
		}
	}
}

// messageInfo returns the body length, header tag and (for a record batch) row
// count of the Message in meta; a schema message must pass schemaOK.
func messageInfo(meta []byte, schema bool) (body int64, tag uint8, rows int64, err error) {
	msg, ok := fbRoot(meta)
	if !ok {
		return 0, 0, 0, errFooter
	}
	tag, ok = msg.uint8Field(messageHeaderType)
	if !ok || schema && tag != headerSchema {
		return 0, 0, 0, errFooter
	}
	body, ok = msg.int64Field(messageBodyLength)
	if !ok || body < 0 {
		return 0, 0, 0, errFooter
	}
	hdr, present, ok := msg.tableField(messageHeader)
	if !present || !ok {
		return 0, 0, 0, errFooter
	}
	switch {
	case schema && !schemaOK(hdr):
		return 0, 0, 0, errFooter
	case tag == headerRecordBatch, tag == headerDictionaryBatch:
		if rows, err = batchOK(hdr, tag, body); err != nil {
			return 0, 0, 0, err
		}
		if tag == headerDictionaryBatch {
			rows = 0
		}
	}
	return body, tag, rows, nil
}
