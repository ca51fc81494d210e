package checkpoint

import (
	"encoding/binary"
	"fmt"
	"math"
	"unsafe"
)

// The helpers below turn typed slices into little-endian section bytes and
// back. Encoders return a new slice of len(v)·size bytes; decoders return a
// new slice of len(b)/size values and fail when len(b) is not a multiple of
// the element size. Floats keep their exact bits (NaN payloads included),
// which a bit-identical resume needs.

func lengthError(n, size int, what string) error {
	return fmt.Errorf("%d bytes cannot hold %s values: not a multiple of %d", n, what, size)
}

// Float64Bytes returns the IEEE 754 bits of v, 8 bytes per value, little-endian.
func Float64Bytes(v []float64) []byte {
	b := make([]byte, 8*len(v))
	for i, x := range v {
		binary.LittleEndian.PutUint64(b[8*i:], math.Float64bits(x))
	}
	return b
}

// BytesFloat64 is the inverse of Float64Bytes. It fails when len(b)%8 != 0.
func BytesFloat64(b []byte) ([]float64, error) {
	if len(b)%8 != 0 {
		return nil, lengthError(len(b), 8, "float64")
	}
	v := make([]float64, len(b)/8)
	for i := range v {
		v[i] = math.Float64frombits(binary.LittleEndian.Uint64(b[8*i:]))
	}
	return v, nil
}

// Float32Bytes returns the IEEE 754 bits of v, 4 bytes per value, little-endian.
func Float32Bytes(v []float32) []byte {
	b := make([]byte, 4*len(v))
	for i, x := range v {
		binary.LittleEndian.PutUint32(b[4*i:], math.Float32bits(x))
	}
	return b
}

// BytesFloat32 is the inverse of Float32Bytes. It fails when len(b)%4 != 0.
func BytesFloat32(b []byte) ([]float32, error) {
	if len(b)%4 != 0 {
		return nil, lengthError(len(b), 4, "float32")
	}
	v := make([]float32, len(b)/4)
	for i := range v {
		v[i] = math.Float32frombits(binary.LittleEndian.Uint32(b[4*i:]))
	}
	return v, nil
}

// Int32Bytes returns v in two's complement, 4 bytes per value, little-endian.
func Int32Bytes(v []int32) []byte {
	b := make([]byte, 4*len(v))
	for i, x := range v {
		binary.LittleEndian.PutUint32(b[4*i:], uint32(x))
	}
	return b
}

// BytesInt32 is the inverse of Int32Bytes. It fails when len(b)%4 != 0.
func BytesInt32(b []byte) ([]int32, error) {
	if len(b)%4 != 0 {
		return nil, lengthError(len(b), 4, "int32")
	}
	v := make([]int32, len(b)/4)
	for i := range v {
		v[i] = int32(binary.LittleEndian.Uint32(b[4*i:]))
	}
	return v, nil
}

// Int64Bytes returns v in two's complement, 8 bytes per value, little-endian.
func Int64Bytes(v []int64) []byte {
	b := make([]byte, 8*len(v))
	for i, x := range v {
		binary.LittleEndian.PutUint64(b[8*i:], uint64(x))
	}
	return b
}

// BytesInt64 is the inverse of Int64Bytes. It fails when len(b)%8 != 0.
func BytesInt64(b []byte) ([]int64, error) {
	if len(b)%8 != 0 {
		return nil, lengthError(len(b), 8, "int64")
	}
	v := make([]int64, len(b)/8)
	for i := range v {
		v[i] = int64(binary.LittleEndian.Uint64(b[8*i:]))
	}
	return v, nil
}

// Uint64Bytes returns v, 8 bytes per value, little-endian.
func Uint64Bytes(v []uint64) []byte {
	b := make([]byte, 8*len(v))
	for i, x := range v {
		binary.LittleEndian.PutUint64(b[8*i:], x)
	}
	return b
}

// BytesUint64 is the inverse of Uint64Bytes. It fails when len(b)%8 != 0.
func BytesUint64(b []byte) ([]uint64, error) {
	if len(b)%8 != 0 {
		return nil, lengthError(len(b), 8, "uint64")
	}
	v := make([]uint64, len(b)/8)
	for i := range v {
		v[i] = binary.LittleEndian.Uint64(b[8*i:])
	}
	return v, nil
}

// hostLittleEndian reports whether the machine stores integers
// least-significant byte first, as the section format does.
var hostLittleEndian = binary.NativeEndian.Uint16([]byte{1, 0}) == 1

// View returns the little-endian section bytes of v for writing, like the
// XBytes encoders above, but without a copy on little-endian hosts (amd64,
// arm64 and most others): the bytes are then v's own memory, so v must not
// change until they are written. A million-row P is about 1 GB; a copy
// would double it while it is saved. On big-endian hosts View copies.
func View[T int32 | int64 | uint64 | float32 | float64](v []T) []byte {
	if len(v) == 0 {
		return []byte{}
	}
	if hostLittleEndian {
		return unsafe.Slice((*byte)(unsafe.Pointer(unsafe.SliceData(v))), len(v)*int(unsafe.Sizeof(v[0])))
	}
	switch w := any(v).(type) {
	case []int32:
		return Int32Bytes(w)
	case []int64:
		return Int64Bytes(w)
	case []uint64:
		return Uint64Bytes(w)
	case []float32:
		return Float32Bytes(w)
	default:
		return Float64Bytes(any(v).([]float64))
	}
}
