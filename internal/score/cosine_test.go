package score

import (
	"math"
	"math/rand/v2"
	"sort"
	"testing"

	"nightjar/internal/core"
)

// cosineRows returns n pseudo-random rows of d columns around a few
// directions, with lengths that vary by a factor of up to 20 (so that the
// cosine and Euclidean neighbours differ), and a 2-D map that keeps most
// neighbourhoods: the direction's first two coordinates plus noise.
func cosineRows(n, d int, seed uint64) (core.Matrix, []float64) {
	rng := rand.New(rand.NewPCG(seed, 3))
	centres := make([][]float64, 4)
	for c := range centres {
		centres[c] = make([]float64, d)
		for j := range centres[c] {
			centres[c][j] = rng.NormFloat64()
		}
	}
	x := core.Matrix{N: n, D: d, Data: make([]float32, n*d)}
	y := make([]float64, 2*n)
	for i := range n {
		c := centres[i%len(centres)]
		length := 0.5 + 9.5*rng.Float64()
		for j := range d {
			x.Data[i*d+j] = float32(length * (c[j] + 0.6*rng.NormFloat64()))
		}
		var ss float64
		for _, v := range x.Row(i) {
			ss += float64(v) * float64(v)
		}
		y[2*i] = float64(x.Data[i*d])/math.Sqrt(ss) + 0.05*rng.NormFloat64()
		y[2*i+1] = float64(x.Data[i*d+1])/math.Sqrt(ss) + 0.05*rng.NormFloat64()
	}
	return x, y
}

// bruteTrustworthiness is the published formula (Venna & Kaski 2001,
// "Neighborhood preservation in nonlinear projection methods: an experimental
// study", ICANN, LNCS 2130) computed the plain way, apart from the package's
// code: for every row, the input ranks from a full sort of the cosine
// distances 1 − cos(x_i, x_j) (ties by index), the map's k nearest from a full
// sort of Euclidean distances, and
//
//	T(k) = 1 − 2/(N·k·(2N − 3k − 1)) · Σ_i Σ_{j ∈ U_k(i)} (r(i, j) − k).
func bruteTrustworthiness(x core.Matrix, y []float64, k int) float64 {
	n := x.N
	norm := func(i int) float64 {
		var s float64
		for _, v := range x.Row(i) {
			s += float64(v) * float64(v)
		}
		return math.Sqrt(s)
	}
	order := func(i int, dist func(j int) float64) []int {
		var js []int
		for j := range n {
			if j != i {
				js = append(js, j)
			}
		}
		sort.SliceStable(js, func(a, b int) bool { return dist(js[a]) < dist(js[b]) })
		return js
	}
	sum := 0.0
	for i := range n {
		in := order(i, func(j int) float64 {
			var dot float64
			for f := range x.D {
				dot += float64(x.Data[i*x.D+f]) * float64(x.Data[j*x.D+f])
			}
			return 1 - dot/(norm(i)*norm(j))
		})
		out := order(i, func(j int) float64 { return math.Hypot(y[2*i]-y[2*j], y[2*i+1]-y[2*j+1]) })
		rank := map[int]int{}
		for r, j := range in {
			rank[j] = r + 1
		}
		for _, j := range out[:k] {
			if rank[j] > k {
				sum += float64(rank[j] - k)
			}
		}
	}
	return 1 - 2/(float64(n)*float64(k)*(2*float64(n)-3*float64(k)-1))*sum
}

// TestCosineTrustworthiness: scored on all rows of a small table (where the
// ranks among the sample and among all rows coincide), trustworthiness in
// CosineSpace equals the brute-force computation of the published formula under
// the cosine metric, and differs from the Euclidean one on these rows of varied
// lengths.
func TestCosineTrustworthiness(t *testing.T) {
	x, y := cosineRows(160, 12, 1)
	for _, k := range []int{1, 5, 10} {
		want := bruteTrustworthiness(x, y, k)
		for _, threads := range []int{1, 3} {
			got := Trustworthiness(CosineSpace(x), MapSpace(y, 2), k, nil, threads)
			if math.Abs(got-want) > 1e-12 {
				t.Errorf("k=%d, %d threads: %.15f, brute force %.15f", k, threads, got, want)
			}
		}
		if euclid := Trustworthiness(InputSpace(x), MapSpace(y, 2), k, nil, 1); math.Abs(euclid-want) < 1e-3 {
			t.Errorf("k=%d: the Euclidean score %.4f is the cosine one %.4f: the test rows do not tell them apart", k, euclid, want)
		}
	}
}

// TestCosineSpace: distances are 1 − cos (checked against the formula), 0 to
// the row itself, 1 to and from a zero row, and the four-row kernel gives the
// one-row bits.
func TestCosineSpace(t *testing.T) {
	x, _ := cosineRows(37, 5, 2)
	clear(x.Data[7*5 : 8*5])
	s := CosineSpace(x)
	one := make([]float64, x.N)
	outs := make([][]float64, 6)
	rows := []int32{0, 7, 3, 36, 12, 5}
	for r := range outs {
		outs[r] = make([]float64, x.N)
	}
	distRows(s, rows, outs)
	for r, i := range rows {
		s.DistRow(int(i), one)
		for j := range x.N {
			if math.Float64bits(one[j]) != math.Float64bits(outs[r][j]) {
				t.Fatalf("row %d, %d: kernel %v, one row %v", i, j, outs[r][j], one[j])
			}
			var want float64
			switch {
			case int(i) == j:
				want = 0
			case i == 7 || j == 7:
				want = 1
			default:
				var ab, aa, bb float64
				for f := range 5 {
					a, b := float64(x.Data[int(i)*5+f]), float64(x.Data[j*5+f])
					ab, aa, bb = ab+a*b, aa+a*a, bb+b*b
				}
				want = 1 - ab/math.Sqrt(aa*bb)
			}
			if math.Abs(one[j]-want) > 1e-12 {
				t.Errorf("d(%d,%d) = %v, want %v", i, j, one[j], want)
			}
		}
	}
}

// TestCentroidRankUnit: the centroid rank of rows compared by direction equals
// the plain centroid rank of the rows scaled to unit length beforehand.
func TestCentroidRankUnit(t *testing.T) {
	x, y := cosineRows(200, 6, 3)
	labels := make([]string, x.N)
	for i := range labels {
		labels[i] = string(rune('a' + i%4 + 4*(i%7%2)))
	}
	unit := core.Matrix{N: x.N, D: x.D, Data: make([]float32, len(x.Data))}
	for i := range x.N {
		var ss float64
		for _, v := range x.Row(i) {
			ss += float64(v) * float64(v)
		}
		for j, v := range x.Row(i) {
			unit.Data[i*x.D+j] = float32(float64(v) / math.Sqrt(ss))
		}
	}
	got, want := CentroidRankUnit(x, y, 2, labels), CentroidRank(unit, y, 2, labels)
	if math.Abs(got-want) > 1e-12 || math.IsNaN(got) {
		t.Errorf("unit centroid rank %v, of unit rows %v", got, want)
	}
}
