package ingest

import (
	"fmt"
	"math"
	"os"
	"slices"
	"strings"
	"testing"

	"nightjar/internal/core"
)

// TestReadReduced: the streaming PCA over MNIST test images (every other pixel of
// every other row: 196 columns) gives the
// same components as FitPCA on the matrix Read returns, the same scores, the same
// Hash and pass-through columns, whatever the chunk size.
func TestReadReduced(t *testing.T) {
	n := 5000
	if testing.Short() {
		n = 4200
	}
	tab := mnistTable(t, n)
	tab.Data[0], tab.Data[1], tab.Data[2], tab.Data[3] = 0, 0, 0, 0 // keep the covariance finite
	var names []string
	var data []float32
	for i := 0; i < n; i++ {
		for r := 0; r < 28; r += 2 {
			for c := 0; c < 28; c += 2 {
				data = append(data, tab.Data[i*784+r*28+c])
				if i == 0 {
					names = append(names, tab.Features[r*28+c])
				}
			}
		}
	}
	tab.Matrix, tab.Features = core.Matrix{N: n, D: len(names), Data: data}, names
	path := writeTableFile(t, tab)
	const k = 6
	full, err := Read(path, Options{ID: "image", Label: "digit"})
	if err != nil {
		t.Fatal(err)
	}
	ref, err := FitPCA(full.Matrix, k, 2)
	if err != nil {
		t.Fatal(err)
	}
	refY := ref.Project(full.Matrix, 2)
	// Agreement with gonum's stat.PC on the same rows (first two components).
	checkAgainstGonum(t, core.Matrix{N: 1500, D: full.D, Data: full.Data[:1500*full.D]}, mustFit(t, core.Matrix{N: 1500, D: full.D, Data: full.Data[:1500*full.D]}, 2), 2, 1e-7)

	for _, batch := range []int{0, 333, 4096} {
		t.Run(fmt.Sprint("batch", batch), func(t *testing.T) {
			var last [2]int64
			got, p, err := ReadReduced(path, Options{ID: "image", Label: "digit", BatchRows: batch, Threads: 3,
				Progress: func(done, total int64) { last = [2]int64{done, total} }}, k)
			if err != nil {
				t.Fatal(err)
			}
			if !slices.Equal(p.Components, ref.Components) || !slices.Equal(p.Variance, ref.Variance) || !slices.Equal(p.Mean, ref.Mean) {
				t.Fatal("components differ from FitPCA on the full matrix")
			}
			if got.N != n || got.D != k || got.Features[0] != "pc_1" || got.Features[k-1] != fmt.Sprint("pc_", k) {
				t.Fatalf("got %d×%d %v", got.N, got.D, got.Features)
			}
			for i, v := range refY {
				if got.Data[i] != float32(v) {
					t.Fatalf("score %d = %v, want %v", i, got.Data[i], float32(v))
				}
			}
			if got.Hash != full.Hash || !slices.Equal(got.ID.Ints, full.ID.Ints) || !slices.Equal(got.Label.Strings, full.Label.Strings) {
				t.Fatal("hash or pass-through columns differ from Read")
			}
			if last != [2]int64{2 * int64(n), 2 * int64(n)} {
				t.Errorf("last progress %v, want both 2N = %d", last, 2*n)
			}
		})
	}
}

func mustFit(t *testing.T, m core.Matrix, k int) *PCA {
	t.Helper()
	p, err := FitPCA(m, k, 2)
	if err != nil {
		t.Fatal(err)
	}
	return p
}

// TestReadReducedChangedFile rewrites a CSV file between the two passes (from the
// progress callback) and expects an InputError.
func TestReadReducedChangedFile(t *testing.T) {
	var b strings.Builder
	b.WriteString("a,b,c\n")
	for i := 0; i < 50; i++ {
		fmt.Fprintf(&b, "%d,%d,%g\n", i, i*i%7, math.Sqrt(float64(i)))
	}
	path := writeTemp(t, "x.csv", []byte(b.String()))
	changed := strings.Replace(b.String(), "\n3,", "\n4,", 1)
	_, _, err := ReadReduced(path, Options{Progress: func(done, total int64) {
		if done == 50 {
			os.WriteFile(path, []byte(changed), 0o644)
		}
	}}, 2)
	wantInputError(t, err, path, "", 0, "file changed between the passes")

	// Errors of Read come through; k beyond D is refused.
	_, _, err = ReadReduced(path, Options{Features: []string{"zz"}}, 2)
	wantInputError(t, err, path, "zz", 0, "no such column")
	if _, _, err := ReadReduced(path, Options{}, 4); err == nil {
		t.Error("k > D accepted")
	}
}
