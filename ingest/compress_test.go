package ingest

import (
	"bytes"
	"compress/gzip"
	"fmt"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/klauspost/compress/zstd"
)

func gzipBytes(t testing.TB, b []byte) []byte {
	t.Helper()
	var buf bytes.Buffer
	w := gzip.NewWriter(&buf)
	w.Write(b)
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

func zstdBytes(t testing.TB, b []byte) []byte {
	t.Helper()
	w, err := zstd.NewWriter(nil)
	if err != nil {
		t.Fatal(err)
	}
	return w.EncodeAll(b, nil)
}

// plumbingCSV returns a CSV of n rows: an integer id, a text label and d
// float32 features written as the shortest decimals that round-trip.
func plumbingCSV(n, d int, sep string) []byte {
	vals := vectorValues(n, d, 3)
	var b strings.Builder
	b.WriteString("id" + sep + "kind")
	for j := range d {
		fmt.Fprintf(&b, "%sf%d", sep, j)
	}
	b.WriteByte('\n')
	for i := range n {
		fmt.Fprintf(&b, "%d%s%s", i, sep, []string{"x", "y", "z"}[i%3])
		for j := range d {
			b.WriteString(sep + strconv.FormatFloat(float64(vals[i*d+j]), 'g', -1, 32))
		}
		b.WriteByte('\n')
	}
	return []byte(b.String())
}

// TestCompressedCSV: .csv.gz (gzip from the standard library), .csv.zst
// (klauspost/compress's zstd encoder) and .tsv.gz read as the bits of the
// plain file, streamed in chunks; other compressions and compressed binary
// tables are refused with a message naming the compression.
func TestCompressedCSV(t *testing.T) {
	plain := plumbingCSV(3000, 7, ",")
	tsv := plumbingCSV(3000, 7, "\t")
	want, err := Read(writeTemp(t, "t.csv", plain), Options{ID: "id", Label: "kind"})
	if err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		name   string
		data   []byte
		format string
	}{
		{"t.csv.gz", gzipBytes(t, plain), "csv+gzip"},
		{"t.csv.zst", zstdBytes(t, plain), "csv+zstd"},
		{"t.tsv.gz", gzipBytes(t, tsv), "csv+gzip"},
		{"t.gz", gzipBytes(t, plain), "csv+gzip"}, // the content decides
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			got, err := Read(writeTemp(t, c.name, c.data), Options{ID: "id", Label: "kind", BatchRows: 500, Threads: 2})
			if err != nil {
				t.Fatal(err)
			}
			if got.Hash != want.Hash || !equalBits(got.Data, want.Data) || got.Format != c.format || got.Label.String(4) != "y" {
				t.Errorf("hash %s format %q, want %s", got.Hash, got.Format, want.Hash)
			}
		})
	}
	pq := tableBytes(t, partTable(0, 3))
	bad := []struct {
		name   string
		data   []byte
		reason string
	}{
		{"t.csv.bz2", []byte("BZh91AY&SY\x00\x00"), "bzip2-compressed file: nightjar reads gzip- or zstd-compressed CSV and TSV only"},
		{"t.csv.xz", []byte("\xfd7zXZ\x00\x00\x04"), "xz-compressed file"},
		{"t.zip", []byte("PK\x03\x04\x14\x00"), "zip-compressed file"},
		{"t.parquet.gz", gzipBytes(t, pq), "gzip-compressed Parquet file: decompress it first"},
		{"t.parquet.zst", zstdBytes(t, pq), "zstd-compressed Parquet file"},
		{"t.csv.gz", gzipBytes(t, nil), "empty gzip-compressed file"},
		{"noise.gz", gzipBytes(t, []byte("\x00\x01\x02binary")), "gzip-compressed file that does not hold CSV text"},
		{"cut.csv.gz", gzipBytes(t, plain)[:200], "unexpected EOF"},
		{"line.csv.gz", gzipBytes(t, bytes.Repeat([]byte("a"), maxLineBytes+10)), "longer than 4 MiB"},
	}
	for _, c := range bad {
		t.Run(c.name, func(t *testing.T) {
			path := writeTemp(t, c.name, c.data)
			_, err := Read(path, Options{})
			var ie *InputError
			if err == nil || !strings.Contains(err.Error(), c.reason) || !strings.HasPrefix(err.Error(), path) || !asInputError(err, &ie) {
				t.Errorf("got %v, want an InputError about %q", err, c.reason)
			}
		})
	}
	// A directory of compressed parts.
	dir := t.TempDir()
	putFile(t, dir, "a.csv.gz", gzipBytes(t, plain))
	putFile(t, dir, "b.csv.zst", zstdBytes(t, plain))
	got, err := Read(filepath.Join(dir, "*"), Options{})
	if err != nil || got.N != 6000 || got.Format != "csv+gzip, csv+zstd" {
		t.Fatalf("%v %+v", err, got)
	}
}

func asInputError(err error, ie **InputError) bool {
	e, ok := err.(*InputError)
	*ie = e
	return ok
}
