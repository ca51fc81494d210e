package checkpoint

import (
	"encoding/binary"
	"fmt"
	"unsafe"
)

// Element is the set of value types a section can hold. Every value is
// stored little-endian: integers in two's complement, floats as their IEEE
// 754 bits, kept exactly (signed zeros, subnormals, NaN payloads), which a
// bit-identical resume needs.
//
// Three helpers move values in and out of sections:
//
//   - EncodeValues copies values into new section bytes. Use it for small
//     sections and for values that may change before the section is written.
//   - View gives a large slice's own memory as section bytes, without a copy
//     on little-endian hosts. Use it for big arrays (embedding, graph,
//     affinities) that stay unchanged until the file is written.
//   - DecodeValues (and SectionValues, which also looks the section up)
//     copies section bytes into a new slice of values. Use it for sections
//     of Decode, which alias one buffer and need not be aligned for T.
//   - ShareValues (and SharedSectionValues) gives the values in the section
//     bytes' own memory where it can: on little-endian hosts, for bytes
//     aligned for T, as ReadFile's sections are (each has its own buffer).
//     Use it for big arrays read from files, which a copy would hold twice.
type Element interface {
	int32 | int64 | uint64 | float32 | float64
}

// size returns the number of bytes of one T.
func size[T Element]() int {
	var zero T
	return int(unsafe.Sizeof(zero))
}

// EncodeValues returns the little-endian bytes of v (see Element) in a new
// slice of len(v)·size bytes, size being 4 for int32 and float32 and 8 for
// the others.
func EncodeValues[T Element](v []T) []byte {
	b := make([]byte, len(v)*size[T]())
	if len(v) == 0 {
		return b
	}
	if _, err := binary.Encode(b, binary.LittleEndian, v); err != nil {
		// b has exactly the size Encode needs for a slice of fixed-size values.
		panic("checkpoint: EncodeValues: " + err.Error())
	}
	return b
}

// DecodeValues is the inverse of EncodeValues: it returns the len(b)/size
// values held in b in a new slice. It fails when len(b) is not a multiple of
// the size of T.
func DecodeValues[T Element](b []byte) ([]T, error) {
	n := size[T]()
	if len(b)%n != 0 {
		var zero T
		return nil, fmt.Errorf("%d bytes cannot hold %T values: not a multiple of %d", len(b), zero, n)
	}
	v := make([]T, len(b)/n)
	if len(v) == 0 {
		return v, nil
	}
	if _, err := binary.Decode(b, binary.LittleEndian, v); err != nil {
		return nil, fmt.Errorf("decoding %d values: %w", len(v), err)
	}
	return v, nil
}

// ShareValues is DecodeValues without the copy where it can: on a
// little-endian host, when b starts at an address that is a multiple of the
// size of T, the values are b's own memory (b must not change afterwards,
// and the values keep b alive); otherwise they are a copy. It fails as
// DecodeValues does.
func ShareValues[T Element](b []byte) ([]T, error) {
	n := size[T]()
	if !hostLittleEndian || len(b) == 0 || uintptr(unsafe.Pointer(unsafe.SliceData(b)))%uintptr(n) != 0 {
		return DecodeValues[T](b)
	}
	if len(b)%n != 0 {
		return DecodeValues[T](b) // its error
	}
	return unsafe.Slice((*T)(unsafe.Pointer(unsafe.SliceData(b))), len(b)/n), nil
}

// SharedSectionValues looks up the section called name (see Lookup) and
// turns its bytes into values with ShareValues. Errors name the section.
func SharedSectionValues[T Element](sections []Section, name string) ([]T, error) {
	return sectionValues(sections, name, ShareValues[T])
}

// SectionValues looks up the section called name (see Lookup) and decodes
// its bytes with DecodeValues. Errors name the section.
func SectionValues[T Element](sections []Section, name string) ([]T, error) {
	return sectionValues(sections, name, DecodeValues[T])
}

// sectionValues looks up the section called name and turns its bytes into
// values with decode; errors name the section.
func sectionValues[T Element](sections []Section, name string, decode func([]byte) ([]T, error)) ([]T, error) {
	b, err := Lookup(sections, name)
	if err != nil {
		return nil, err
	}
	v, err := decode(b)
	if err != nil {
		return nil, fmt.Errorf("section %q: %w", name, err)
	}
	return v, nil
}

// hostLittleEndian reports whether the machine stores integers
// least-significant byte first, as the section format does.
var hostLittleEndian = binary.NativeEndian.Uint16([]byte{1, 0}) == 1

// View returns the little-endian section bytes of v for writing, the same
// bytes as EncodeValues(v), but without a copy on little-endian hosts (amd64,
// arm64 and most others): the bytes are then v's own memory, so v must not
// change until they are written. A million-row P is about 1 GB; a copy
// would double it while it is saved. On big-endian hosts View copies.
func View[T Element](v []T) []byte {
	if len(v) == 0 {
		return []byte{}
	}
	if hostLittleEndian {
		return unsafe.Slice((*byte)(unsafe.Pointer(unsafe.SliceData(v))), len(v)*size[T]())
	}
	return EncodeValues(v)
}
