package ingest

import (
	"bufio"
	"bytes"
	"compress/gzip"
	"io"

	"github.com/klauspost/compress/zstd"
)

// compressions lists the magic numbers of the compressed formats recognised
// (gzip: RFC 1952; zstd: RFC 8878; bzip2, xz, LZ4 frame, zip: their format
// descriptions, from memory). Only gzip and zstd are read.
var compressions = []struct {
	name  string
	magic []byte
}{
	{"gzip", []byte{0x1f, 0x8b}},
	{"zstd", []byte{0x28, 0xb5, 0x2f, 0xfd}},
	{"bzip2", []byte("BZh")},
	{"xz", []byte{0xfd, '7', 'z', 'X', 'Z', 0}},
	{"lz4", []byte{0x04, 0x22, 0x4d, 0x18}},
	{"zip", []byte("PK\x03\x04")},
}

// compressionOf names the compression whose magic number head begins with, or "".
func compressionOf(head []byte) string {
	for _, c := range compressions {
		if bytes.HasPrefix(head, c.magic) {
			return c.name
		}
	}
	return ""
}

// decompressor returns a streaming reader of the decompressed bytes of r for
// gzip or zstd (concatenated gzip members and zstd frames are read through).
// zstd decoding runs on the calling goroutine with a window of at most 32 MiB
// (every compression level of the zstd tool but --long and --ultra fits).
func decompressor(kind string, r io.Reader) (io.ReadCloser, error) {
	switch kind {
	case "gzip":
		return gzip.NewReader(r)
	case "zstd":
		d, err := zstd.NewReader(r, zstd.WithDecoderConcurrency(1), zstd.WithDecoderMaxWindow(32<<20), zstd.WithDecoderLowmem(true))
		if err != nil {
			return nil, err
		}
		return d.IOReadCloser(), nil
	}
	return nil, errUnreadableCompression
}

// errUnreadableCompression is returned by decompressor for other kinds.
var errUnreadableCompression = io.ErrUnexpectedEOF

// counter counts the bytes read through it.
type counter struct {
	r io.Reader
	n int64
}

func (c *counter) Read(p []byte) (int, error) {
	n, err := c.r.Read(p)
	c.n += int64(n)
	return n, err
}

// compressedHead returns up to n decompressed bytes from the start of a
// compressed file, and whether the decompressed stream holds more.
func compressedHead(kind string, r io.Reader, n int) ([]byte, bool, error) {
	d, err := decompressor(kind, bufio.NewReaderSize(r, 64<<10))
	if err != nil {
		return nil, false, err
	}
	defer d.Close()
	head := make([]byte, n+1)
	k, err := io.ReadFull(d, head)
	if err != nil && err != io.ErrUnexpectedEOF && err != io.EOF {
		return head[:k], false, err
	}
	if k > n {
		return head[:n], true, nil
	}
	return head[:k], false, nil
}
