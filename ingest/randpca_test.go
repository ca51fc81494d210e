package ingest

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"

	"nightjar/internal/core"
)

// factorTable returns n rows of d columns: r latent factors with standard
// deviations top·decay^j, mixed by pseudo-random Gaussian loadings (scaled by
// 1/√d, so nearly orthonormal), an offset per column, plus isotropic noise of
// standard deviation noise. Its covariance has r large, well separated
// eigenvalues (ratio about 1/decay² apart) above a flat bulk.
func factorTable(n, d, r int, top, decay, noise float64, seed uint64) core.Matrix {
	rng := rand.New(rand.NewPCG(seed, 11))
	load := make([]float64, r*d)
	for i := range load {
		load[i] = rng.NormFloat64() / math.Sqrt(float64(d))
	}
	offset := make([]float64, d)
	for j := range offset {
		offset[j] = 3 * rng.Float64()
	}
	m := core.Matrix{N: n, D: d, Data: make([]float32, n*d)}
	z := make([]float64, r)
	for i := range n {
		sd := top
		for f := range z {
			z[f] = sd * rng.NormFloat64()
			sd *= decay
		}
		row := m.Data[i*d : (i+1)*d]
		for j := range row {
			v := offset[j] + noise*rng.NormFloat64()
			for f, zf := range z {
				v += zf * load[f*d+j]
			}
			row[j] = float32(v)
		}
	}
	return m
}

// principalAngle returns the angle between two unit vectors, up to sign.
func principalAngle(a, b []float64) float64 {
	dot := 0.0
	for j := range a {
		dot += a[j] * b[j]
	}
	return math.Acos(math.Min(1, math.Abs(dot)))
}

// gonumEigen returns gonum's exact principal variances and directions of m
// (columns of the D×D matrix): the eigendecomposition (mat.EigenSym) of the
// covariance computed by stat.CovarianceMatrix, in decreasing order. Faster
// than stat.PC's SVD at a thousand columns, and as exact.
func gonumEigen(t *testing.T, m core.Matrix) ([]float64, *mat.Dense) {
	t.Helper()
	x := mat.NewDense(m.N, m.D, nil)
	for i := range m.N {
		for j := range m.D {
			x.Set(i, j, float64(m.Data[i*m.D+j]))
		}
	}
	cov := mat.NewSymDense(m.D, nil)
	stat.CovarianceMatrix(cov, x, nil)
	var eig mat.EigenSym
	if !eig.Factorize(cov, true) {
		t.Fatal("EigenSym failed")
	}
	asc := eig.Values(nil)
	var v mat.Dense
	eig.VectorsTo(&v)
	vars := make([]float64, m.D)
	vecs := mat.NewDense(m.D, m.D, nil)
	for c := range m.D {
		vars[c] = asc[m.D-1-c]
		for j := range m.D {
			vecs.Set(j, c, v.At(j, m.D-1-c))
		}
	}
	return vars, vecs
}

// TestRandomizedPCA compares the randomised subspace iteration of a
// 1,000-column table with gonum's exact PCA (gonumEigen): principal angles at
// most 1e-3 rad and variances within 1e-3 relative for every component whose
// eigenvalue is well separated (ratio above 1.1 to both neighbours), the
// explained variance of the first k within 1e-3 relative, the total variance to
// rounding.
func TestRandomizedPCA(t *testing.T) {
	n, d := 1500, 1000
	if testing.Short() {
		n = 1100
	}
	m := factorTable(n, d, 30, 10, 0.85, 0.3, 1)
	vars, vecs := gonumEigen(t, m)
	total := 0.0
	for _, v := range vars {
		total += v
	}
	for _, k := range []int{10, 50} {
		t.Run(fmt.Sprint("k", k), func(t *testing.T) {
			p, err := FitPCA(m, k, 2)
			if err != nil {
				t.Fatal(err)
			}
			if p.Passes < minPasses || p.K != k || p.N != int64(n) {
				t.Fatalf("passes %d, K %d, N %d", p.Passes, p.K, p.N)
			}
			if math.Abs(p.TotalVariance-total) > 1e-6*total {
				t.Errorf("total variance %.9g, gonum %.9g", p.TotalVariance, total)
			}
			var got, want float64
			for c := range k {
				got += p.Variance[c]
				want += vars[c]
				if vars[c] < 1.1*vars[c+1] || (c > 0 && vars[c-1] < 1.1*vars[c]) {
					continue // not well separated: the direction is not defined to 1e-3
				}
				if math.Abs(p.Variance[c]-vars[c]) > 1e-3*vars[c] {
					t.Errorf("variance %d = %.6g, gonum %.6g", c, p.Variance[c], vars[c])
				}
				ref := make([]float64, d)
				for j := range ref {
					ref[j] = vecs.At(j, c)
				}
				if a := principalAngle(p.Components[c*d:(c+1)*d], ref); a > 1e-3 {
					t.Errorf("component %d: angle %.2e rad to gonum's", c, a)
				}
			}
			if rel := math.Abs(got/total-want/total) / (want / total); rel > 1e-3 {
				t.Errorf("explained variance %.6f, gonum %.6f (relative %.1e)", got/total, want/total, rel)
			}
		})
	}
}

// TestRandomizedBits: the randomised fit is the same bits for any thread count,
// and streamed from a file in any chunk size (Dataset.Read with a reduction)
// it gives the components of FitPCA on the matrix Read returns, and the scores
// of Project.
func TestRandomizedBits(t *testing.T) {
	m := factorTable(900, 640, 12, 5, 0.8, 0.5, 2)
	const k = 8
	ref, err := FitPCA(m, k, 1)
	if err != nil {
		t.Fatal(err)
	}
	for _, threads := range []int{2, 3} {
		p, err := FitPCA(m, k, threads)
		if err != nil || !slices.Equal(p.Components, ref.Components) || !slices.Equal(p.Variance, ref.Variance) {
			t.Fatalf("%d threads: components differ (%v)", threads, err)
		}
	}
	names := make([]string, m.D)
	for j := range names {
		names[j] = fmt.Sprintf("g%d", j)
	}
	path := writeTableFile(t, &Table{Matrix: m, Features: names})
	refY := ref.Project(m, 2)
	for _, batch := range []int{0, 77, 1000} {
		ds, err := OpenDataset(path)
		if err != nil {
			t.Fatal(err)
		}
		got, p, err := ds.Read(Options{BatchRows: batch, Threads: 2}, Reduction{Components: k, Above: 100})
		if err != nil {
			t.Fatal(err)
		}
		if !slices.Equal(p.Components, ref.Components) || !slices.Equal(p.Mean, ref.Mean) || p.Passes != ref.Passes {
			t.Fatalf("batch %d: streamed components differ from FitPCA", batch)
		}
		for i, v := range refY {
			if got.Data[i] != float32(v) {
				t.Fatalf("batch %d: score %d = %v, want %v", batch, i, got.Data[i], float32(v))
			}
		}
		if got.D != k || got.Features[0] != "pc_1" || got.Hash != Fingerprint(m) {
			t.Errorf("table %d×%d %v", got.N, got.D, got.Features[:2])
		}
	}
	// Above: a narrower table is read whole.
	ds, _ := OpenDataset(path)
	whole, p, err := ds.Read(Options{}, Reduction{Components: k, Above: 640})
	if err != nil || p != nil || whole.D != 640 {
		t.Fatalf("not reduced: %v, %v, D %d", err, p, whole.D)
	}
}

// TestReduceWide: a 5,000-column × 2,000-row table (the case) reduces
// to 50 components in a few streamed passes; each component's variance is the
// variance of its scores (the Rayleigh quotient of a Ritz vector), and the
// variances descend.
func TestReduceWide(t *testing.T) {
	n, d := 2000, 5000
	if testing.Short() {
		n, d = 600, 2000
	}
	m := factorTable(n, d, 40, 8, 0.93, 0.4, 3)
	names := make([]string, d)
	for j := range names {
		names[j] = fmt.Sprintf("gene%d", j)
	}
	path := writeTableFile(t, &Table{Matrix: m, Features: names})
	got, p, err := ReadReduced(path, Options{Threads: 2}, 50)
	if err != nil {
		t.Fatal(err)
	}
	if got.N != n || got.D != 50 || p.K != 50 || p.D != d || p.Passes > maxPasses {
		t.Fatalf("%d×%d, K %d, D %d, passes %d", got.N, got.D, p.K, p.D, p.Passes)
	}
	for c := range 50 {
		if c > 0 && p.Variance[c] > p.Variance[c-1] {
			t.Errorf("variance %d above %d", c, c-1)
		}
		var s, ss float64
		for i := range n {
			v := float64(got.Data[i*50+c])
			s += v
			ss += v * v
		}
		v := (ss - s*s/float64(n)) / float64(n-1)
		if math.Abs(v-p.Variance[c]) > 1e-4*p.Variance[0] {
			t.Errorf("component %d: scores' variance %.6g, component variance %.6g", c, v, p.Variance[c])
		}
	}
}

// TestReduceNormalised: with Normalise, the reduction is the PCA of the
// L2-normalised rows (x·(1/‖x‖)) and their scores, Project of a normalised fit
// scales raw rows the same way, and a zero row is refused.
func TestReduceNormalised(t *testing.T) {
	m := factorTable(300, 40, 5, 3, 0.7, 0.5, 4)
	unit := core.Matrix{N: m.N, D: m.D, Data: slices.Clone(m.Data)}
	for i := range unit.N {
		row := unit.Data[i*m.D : (i+1)*m.D]
		var ss float64
		for _, v := range row {
			ss += float64(v) * float64(v)
		}
		inv := 1 / math.Sqrt(ss)
		for j, v := range row {
			row[j] = float32(float64(v) * inv)
		}
	}
	ref := mustFit(t, unit, 4)
	refY := ref.Project(unit, 1)
	names := make([]string, m.D)
	for j := range names {
		names[j] = fmt.Sprintf("x%d", j)
	}
	path := writeTableFile(t, &Table{Matrix: m, Features: names})
	ds, _ := OpenDataset(path)
	got, p, err := ds.Read(Options{}, Reduction{Components: 4, Normalise: true})
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(p.Components, ref.Components) || got.Hash != Fingerprint(m) || !p.Normalised {
		t.Error("not the PCA of the normalised rows, or the hash is not the input's")
	}
	for i, v := range refY {
		if got.Data[i] != float32(v) {
			t.Fatalf("score %d = %v, want %v", i, got.Data[i], float32(v))
		}
	}
	// Project scales the rows of a normalised fit itself.
	if y := p.Project(m, 2); !slices.Equal(y, refY) {
		t.Error("Project of the raw rows is not the projection of the unit rows")
	}
	clear(m.Data[5*m.D : 6*m.D])
	path = writeTableFile(t, &Table{Matrix: m, Features: names})
	ds, _ = OpenDataset(path)
	_, _, err = ds.Read(Options{}, Reduction{Components: 4, Normalise: true})
	wantInputError(t, err, path, "", 0, "row 6 (counting kept rows) has only zeros")
}
