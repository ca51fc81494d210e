package ingest

import (
	"math"
	"slices"
	"testing"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"

	"nightjar/internal/core"
)

// gonumPC returns gonum's stat.PC variances and the direction vectors (D×D, columns
// are components) for m.
func gonumPC(t *testing.T, m core.Matrix) ([]float64, *mat.Dense) {
	t.Helper()
	x := mat.NewDense(m.N, m.D, nil)
	for i := 0; i < m.N; i++ {
		for j := 0; j < m.D; j++ {
			x.Set(i, j, float64(m.Data[i*m.D+j]))
		}
	}
	var pc stat.PC
	if !pc.PrincipalComponents(x, nil) {
		t.Fatal("stat.PC failed")
	}
	var vec mat.Dense
	pc.VectorsTo(&vec)
	return pc.VarsTo(nil), &vec
}

// checkAgainstGonum compares the first k components of p with gonum's stat.PC.
func checkAgainstGonum(t *testing.T, m core.Matrix, p *PCA, k int, tol float64) {
	t.Helper()
	vars, vec := gonumPC(t, m)
	for c := 0; c < k; c++ {
		if d := math.Abs(p.Variance[c] - vars[c]); d > tol*vars[0] {
			t.Errorf("variance %d = %.10g, gonum %.10g", c, p.Variance[c], vars[c])
		}
		// Same direction up to sign.
		dot := 0.0
		for j := 0; j < m.D; j++ {
			dot += p.Components[c*m.D+j] * vec.At(j, c)
		}
		if math.Abs(math.Abs(dot)-1) > tol {
			t.Errorf("component %d: |cos| with gonum = %.12f", c, math.Abs(dot))
		}
	}
	// Scores are the centred data times the components.
	y := p.Project(m, 2)
	for i := 0; i < m.N; i += max(1, m.N/50) {
		for c := 0; c < k; c++ {
			s := 0.0
			for j := 0; j < m.D; j++ {
				s += (float64(m.Data[i*m.D+j]) - p.Mean[j]) * p.Components[c*m.D+j]
			}
			if math.Abs(y[i*k+c]-s) > 1e-9*(1+math.Abs(s)) {
				t.Fatalf("score (%d,%d) = %v, want %v", i, c, y[i*k+c], s)
			}
		}
	}
}

// irisHead is the truncated sample of Fisher's Iris data printed in gonum's
// stat.PC example (gonum v0.17.0, stat/pca_example_test.go).
var irisHead = core.Matrix{N: 10, D: 4, Data: []float32{
	5.1, 3.5, 1.4, 0.2,
	4.9, 3.0, 1.4, 0.2,
	4.7, 3.2, 1.3, 0.2,
	4.6, 3.1, 1.5, 0.2,
	5.0, 3.6, 1.4, 0.2,
	5.4, 3.9, 1.7, 0.4,
	4.6, 3.4, 1.4, 0.3,
	5.0, 3.4, 1.5, 0.2,
	4.4, 2.9, 1.4, 0.2,
	4.9, 3.1, 1.5, 0.1,
}}

func TestPCAIris(t *testing.T) {
	p, err := FitPCA(irisHead, 4, 2)
	if err != nil {
		t.Fatal(err)
	}
	// Published output of gonum's ExamplePC: variances = [0.1666 0.0207 0.0079 0.0019].
	for c, want := range []float64{0.1666, 0.0207, 0.0079, 0.0019} {
		if math.Abs(p.Variance[c]-want) > 0.00005 {
			t.Errorf("variance %d = %.5f, want %.4f (gonum ExamplePC)", c, p.Variance[c], want)
		}
	}
	// The float32 input differs from gonum's float64 input by < 1e-7 relative.
	checkAgainstGonum(t, irisHead, p, 4, 1e-5)
	// Mean is the column mean (hand sum of the first column: 48.6 / 10).
	if math.Abs(p.Mean[0]-4.86) > 1e-6 {
		t.Errorf("mean[0] = %v, want 4.86", p.Mean[0])
	}
	// Published projections of gonum's ExamplePC are x·v (not centred); first row on
	// the first component: -6.1686 (up to sign).
	y := p.Project(irisHead, 2)
	mv := 0.0
	for j := 0; j < 4; j++ {
		mv += p.Mean[j] * p.Components[j]
	}
	if got := math.Abs(y[0] + mv); math.Abs(got-6.1686) > 0.0001 {
		t.Errorf("uncentred score of row 1 = %.4f, want ±6.1686 (gonum ExamplePC)", got)
	}
}

// TestPCAMNIST compares with gonum's stat.PC on 5000 MNIST test images (more than
// one block of PCABlockRows), using the 64 pixels of the central 8×8 patch.
func TestPCAMNIST(t *testing.T) {
	n := 5000
	full, _ := mnistRows(t, n)
	m := core.Matrix{N: n, D: 64, Data: make([]float32, n*64)}
	for i := 0; i < n; i++ {
		for r := 0; r < 8; r++ {
			copy(m.Data[i*64+r*8:i*64+r*8+8], full.Data[i*784+(10+r)*28+10:])
		}
	}
	p, err := FitPCA(m, 5, 2)
	if err != nil {
		t.Fatal(err)
	}
	if p.N != int64(n) || len(p.Components) != 5*64 || p.K != 5 || p.D != 64 {
		t.Fatalf("shape: N %d K %d D %d", p.N, p.K, p.D)
	}
	if !slices.IsSortedFunc(p.Variance, func(a, b float64) int { return -cmpFloat(a, b) }) {
		t.Errorf("variances not descending: %v", p.Variance)
	}
	checkAgainstGonum(t, m, p, 5, 1e-8)
}

func cmpFloat(a, b float64) int {
	switch {
	case a < b:
		return -1
	case a > b:
		return 1
	}
	return 0
}

// TestPCADeterministic: the same bits whatever the thread count and however the rows
// are fed to the accumulator (the streaming path feeds uneven chunks).
func TestPCADeterministic(t *testing.T) {
	m, _ := mnistRows(t, 9000)
	m = core.Matrix{N: m.N, D: 40, Data: subColumns(m, 370, 40)}
	var ref *PCA
	var refY []float64
	for _, threads := range []int{1, 2, 5, 0} {
		p, err := FitPCA(m, 3, threads)
		if err != nil {
			t.Fatal(err)
		}
		y := p.Project(m, threads)
		if ref == nil {
			ref, refY = p, y
			continue
		}
		if !slices.Equal(p.Components, ref.Components) || !slices.Equal(p.Variance, ref.Variance) || !slices.Equal(y, refY) {
			t.Fatalf("%d threads change the result", threads)
		}
	}
	acc := newCovAcc(m.D, 3)
	for lo, step := 0, 1; lo < m.N; step = step*3 + 1 {
		hi := min(m.N, lo+step)
		acc.add(core.Matrix{N: hi - lo, D: m.D, Data: m.Data[lo*m.D : hi*m.D]})
		lo = hi
	}
	p, err := acc.pca(3)
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(p.Components, ref.Components) || !slices.Equal(p.Mean, ref.Mean) {
		t.Fatal("chunked feeding changes the result")
	}
}

// subColumns copies columns [from, from+d) of m.
func subColumns(m core.Matrix, from, d int) []float32 {
	out := make([]float32, m.N*d)
	for i := 0; i < m.N; i++ {
		copy(out[i*d:(i+1)*d], m.Data[i*m.D+from:])
	}
	return out
}

func TestPCAErrors(t *testing.T) {
	cases := []struct {
		m core.Matrix
		k int
	}{
		{irisHead, 0},
		{irisHead, 5},
		{core.Matrix{N: 1, D: 2, Data: []float32{1, 2}}, 1},
	}
	for _, c := range cases {
		if _, err := FitPCA(c.m, c.k, 1); err == nil {
			t.Errorf("FitPCA(N=%d, D=%d, k=%d) gave no error", c.m.N, c.m.D, c.k)
		}
	}
	p, _ := FitPCA(irisHead, 2, 2)
	defer func() {
		if recover() == nil {
			t.Error("Project with the wrong D did not panic")
		}
	}()
	p.Project(core.Matrix{N: 1, D: 3, Data: []float32{1, 2, 3}}, 1)
}
