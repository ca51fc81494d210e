package bench

import (
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"math"

	"nightjar/ingest"
)

// matrixHash is the fingerprint ingest gives a table it reads (see ingest.Table.Hash):
// hex SHA-256 of D as a little-endian uint64 followed by the float32 values'
// little-endian bits in row-major order. It is repeated here so that generated
// and IDX-loaded tables carry the same kind of fingerprint as files read by ingest.
func matrixHash(m ingest.Matrix) string {
	h := sha256.New()
	var hdr [8]byte
	binary.LittleEndian.PutUint64(hdr[:], uint64(m.D))
	h.Write(hdr[:])
	const block = 1 << 14
	buf := make([]byte, 4*block)
	for vals := m.Data; len(vals) > 0; {
		k := min(len(vals), block)
		for j, v := range vals[:k] {
			binary.LittleEndian.PutUint32(buf[4*j:], math.Float32bits(v))
		}
		h.Write(buf[:4*k])
		vals = vals[k:]
	}
	return hex.EncodeToString(h.Sum(nil))
}
