package score

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"sort"
	"testing"

	"nightjar/internal/core"
)

// line6 is the hand-worked example of the tests below: six points on a line at
// 0, 1, 3, 7, 12, 20 (gaps 1, 2, 4, 5, 8: no equal distances), and a 2-D map on
// the x axis where rows 2 and 3 swap places: 0, 1, 7, 3, 12, 20.
func line6() (core.Matrix, []float64) {
	x := core.Matrix{N: 6, D: 1, Data: []float32{0, 1, 3, 7, 12, 20}}
	y := []float64{0, 0, 1, 0, 7, 0, 3, 0, 12, 0, 20, 0}
	return x, y
}

// Hand-worked ranks for line6 (nearest = 1), written out from the distances:
//
//	input  i=0: 1,2,3,4,5 → ranks 1,2,3,4,5     map  i=0: 1:1 3:2 2:3 4:4 5:5
//	       i=1: 0:1 2:2 3:3 4:4 5:5                  i=1: 0:1 3:2 2:3 4:4 5:5
//	       i=2: 1:1 0:2 3:3 4:4 5:5                  i=2: 3:1 4:2 1:3 0:4 5:5
//	       i=3: 2:1 4:2 1:3 0:4 5:5                  i=3: 1:1 0:2 2:3 4:4 5:5
//	       i=4: 3:1 5:2 2:3 1:4 0:5                  i=4: 2:1 5:2 3:3 1:4 0:5
//	       i=5: 4:1 3:2 2:3 1:4 0:5                  i=5: 4:1 2:2 3:3 1:4 0:5
//
// k = 2. Input 2-NN: {1,2} {0,2} {1,0} {2,4} {3,5} {4,3}; map 2-NN: {1,3} {0,3}
// {3,4} {1,0} {2,5} {4,2}.
// U (map, not input), input rank − k: i0 {3}: 3−2=1; i1 {3}: 1; i2 {3,4}: 1+2=3;
// i3 {1,0}: 1+2=3; i4 {2}: 1; i5 {2}: 1. Σ = 10.
// T = 1 − 2/(6·2·(12−6−1))·10 = 1 − 20/60 = 2/3.
// V (input, not map), map rank − k: i0 {2}: 1; i1 {2}: 1; i2 {1,0}: 1+2 = 3;
// i3 {2,4}: 1+2 = 3; i4 {3}: 1; i5 {3}: 1. Σ = 10. C = 2/3.
// Preservation: shared {1} {0} {} {} {5} {4} → 4/(6·2) = 1/3.
//
// k = 1. Input 1-NN: 1 0 1 2 3 4; map 1-NN: 1 0 3 1 2 4.
// U: i2 {3} 3−1 = 2; i3 {1} 2; i4 {2} 2; Σ = 6. T = 1 − 2/(6·1·8)·6 = 0.75.
// V: i2 {1} 2; i3 {2} 2; i4 {3} 2; Σ = 6. C = 0.75. Preservation 3/6 = 0.5.
//
// Sample S = {2, 3}, k = 2: U sums 3 + 3 = 6, T = 1 − 2/(2·2·5)·6 = 0.4;
// V sums 3 + 3 = 6, C = 0.4; shared 0 → preservation 0.
func TestNeighbourhoodHandWorked(t *testing.T) {
	x, y := line6()
	tests := []struct {
		name    string
		k       int
		sample  []int32
		t, c, p float64
	}{
		{"k=2 all rows", 2, nil, 2.0 / 3, 2.0 / 3, 1.0 / 3},
		{"k=1 all rows", 1, nil, 0.75, 0.75, 0.5},
		{"k=2 sample {2,3}", 2, []int32{2, 3}, 0.4, 0.4, 0},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			for _, threads := range []int{1, 3} {
				got := Neighbourhood(InputSpace(x), MapSpace(y, 2), tc.k, tc.sample, threads)
				if !approx(got.Trustworthiness, tc.t) || !approx(got.Continuity, tc.c) || !approx(got.Preservation, tc.p) {
					t.Errorf("threads %d: T, C, P = %v, %v, %v; want %v, %v, %v", threads,
						got.Trustworthiness, got.Continuity, got.Preservation, tc.t, tc.c, tc.p)
				}
			}
			if got := Trustworthiness(InputSpace(x), MapSpace(y, 2), tc.k, tc.sample, 0); !approx(got, tc.t) {
				t.Errorf("Trustworthiness = %v, want %v", got, tc.t)
			}
			if got := Continuity(InputSpace(x), MapSpace(y, 2), tc.k, tc.sample, 0); !approx(got, tc.c) {
				t.Errorf("Continuity = %v, want %v", got, tc.c)
			}
			if got := Preservation(InputSpace(x), MapSpace(y, 2), tc.k, tc.sample, 0); !approx(got, tc.p) {
				t.Errorf("Preservation = %v, want %v", got, tc.p)
			}
		})
	}
}

func approx(a, b float64) bool { return math.Abs(a-b) < 1e-12 }

func randomMatrix(n, d int, seed uint64) core.Matrix {
	rng := rand.New(rand.NewPCG(seed, 3))
	m := core.Matrix{N: n, D: d, Data: make([]float32, n*d)}
	for i := range m.Data {
		m.Data[i] = float32(rng.NormFloat64())
	}
	return m
}

// A map that is the input itself (or the input rotated and scaled: distances
// keep their order) has T = C = preservation = 1 (from the definitions:
// U_k and V_k are empty).
func TestNeighbourhoodPerfectMap(t *testing.T) {
	x := randomMatrix(500, 2, 1)
	same := make([]float64, 2*x.N)
	rotated := make([]float64, 2*x.N)
	c, s := math.Cos(0.7), math.Sin(0.7)
	for i := range x.N {
		a, b := float64(x.Data[2*i]), float64(x.Data[2*i+1])
		same[2*i], same[2*i+1] = a, b
		rotated[2*i], rotated[2*i+1] = 3*(c*a-s*b), 3*(s*a+c*b)
	}
	for _, y := range [][]float64{same, rotated} {
		for _, k := range []int{1, 5, 30} {
			got := Neighbourhood(InputSpace(x), MapSpace(y, 2), k, nil, 2)
			if got.Trustworthiness != 1 || got.Continuity != 1 || got.Preservation != 1 {
				t.Errorf("k=%d: %+v, want all 1", k, got)
			}
		}
	}
}

// A random map of random data scores T ≈ C ≈ 0.5 (common practice; expected
// rank of a stranger ≈ N/2 gives 1 − (N−2k)/(2N−3k) ≈ 0.5) and preservation
// ≈ k/N.
func TestNeighbourhoodRandomMap(t *testing.T) {
	n := 1000
	x := randomMatrix(n, 10, 2)
	rng := rand.New(rand.NewPCG(9, 9))
	y := make([]float64, 2*n)
	for i := range y {
		y[i] = rng.NormFloat64()
	}
	got := Neighbourhood(InputSpace(x), MapSpace(y, 2), 10, nil, 0)
	if math.Abs(got.Trustworthiness-0.5) > 0.03 || math.Abs(got.Continuity-0.5) > 0.03 {
		t.Errorf("random map: T = %v, C = %v, want about 0.5", got.Trustworthiness, got.Continuity)
	}
	if got.Preservation > 0.03 {
		t.Errorf("random map: preservation %v, want about k/N = 0.01", got.Preservation)
	}
}

// slowRanks is the independent reference: sort all rows by (distance, index)
// from i and read off the ranks (nearest = 1; i itself excluded).
func slowRanks(dist func(i, j int) float64, n, i int) (order []int, rank []int) {
	for j := range n {
		if j != i {
			order = append(order, j)
		}
	}
	sort.SliceStable(order, func(a, b int) bool { return dist(i, order[a]) < dist(i, order[b]) })
	rank = make([]int, n)
	for r, j := range order {
		rank[j] = r + 1
	}
	return order, rank
}

// Trustworthiness and continuity against the formula evaluated with full sorts,
// on data with many exact ties (integer grid) so the tie rule is exercised too.
func TestNeighbourhoodAgainstSortReference(t *testing.T) {
	n, d, dims := 300, 4, 2
	rng := rand.New(rand.NewPCG(4, 4))
	x := core.Matrix{N: n, D: d, Data: make([]float32, n*d)}
	for i := range x.Data {
		x.Data[i] = float32(rng.IntN(4)) // ties everywhere
	}
	y := make([]float64, n*dims)
	for i := range n { // a map that keeps some structure: first two features plus noise
		y[2*i] = float64(x.Data[i*d]) + 0.3*rng.NormFloat64()
		y[2*i+1] = float64(x.Data[i*d+1]) + 0.3*rng.NormFloat64()
	}
	din := func(i, j int) float64 {
		var s float64
		for f := range d {
			v := float64(x.Data[i*d+f] - x.Data[j*d+f])
			s += v * v
		}
		return s
	}
	dout := func(i, j int) float64 {
		a, b := y[2*i]-y[2*j], y[2*i+1]-y[2*j+1]
		return a*a + b*b
	}
	sample := Sample(n, 17, 5)
	for _, k := range []int{1, 7, 40} {
		var ut, vc, shared int
		for _, i32 := range sample {
			i := int(i32)
			oin, rin := slowRanks(din, n, i)
			oout, rout := slowRanks(dout, n, i)
			for _, j := range oout[:k] {
				if rin[j] > k {
					ut += rin[j] - k
				} else {
					shared++
				}
			}
			for _, j := range oin[:k] {
				if rout[j] > k {
					vc += rout[j] - k
				}
			}
		}
		norm := 2 / (float64(len(sample)) * float64(k) * float64(2*n-3*k-1))
		wantT, wantC := 1-norm*float64(ut), 1-norm*float64(vc)
		wantP := float64(shared) / float64(len(sample)*k)
		got := Neighbourhood(InputSpace(x), MapSpace(y, dims), k, sample, 2)
		if !approx(got.Trustworthiness, wantT) || !approx(got.Continuity, wantC) || !approx(got.Preservation, wantP) {
			t.Errorf("k=%d: got %+v, reference T %v C %v P %v", k, got, wantT, wantC, wantP)
		}
	}
}

// TestNeighbourhoodLabels: the label accuracies NeighbourhoodLabels takes
// from the neighbour lists it already has are those of LabelAccuracy (whose
// hand-worked test is below), on data with many exact ties, and its other
// scores are Neighbourhood's.
func TestNeighbourhoodLabels(t *testing.T) {
	n, d := 300, 4
	rng := rand.New(rand.NewPCG(6, 6))
	x := core.Matrix{N: n, D: d, Data: make([]float32, n*d)}
	for i := range x.Data {
		x.Data[i] = float32(rng.IntN(4))
	}
	y := make([]float64, 2*n)
	labels := make([]string, n)
	for i := range n {
		y[2*i] = float64(x.Data[i*d]) + 0.3*rng.NormFloat64()
		y[2*i+1] = float64(x.Data[i*d+1]) + 0.3*rng.NormFloat64()
		labels[i] = fmt.Sprint(x.Data[i*d+2] + x.Data[i*d]) // 7 labels
	}
	sample := Sample(n, 60, 3)
	for _, k := range []int{1, 7, 10} {
		in, out := InputSpace(x), MapSpace(y, 2)
		got := NeighbourhoodLabels(in, out, k, sample, 2, labels)
		plain := Neighbourhood(in, out, k, sample, 2)
		wantMap := LabelAccuracy(out, labels, k, sample, 2)
		wantIn := LabelAccuracy(in, labels, k, sample, 2)
		if wantMap <= 0 || wantMap >= 1 || wantIn <= 0 || wantIn >= 1 || wantMap == wantIn {
			t.Fatalf("k=%d: accuracies %v and %v do not tell the two spaces apart", k, wantMap, wantIn)
		}
		if got.LabelMap != wantMap || got.LabelInput != wantIn {
			t.Errorf("k=%d: label accuracy map %v input %v, LabelAccuracy %v %v", k, got.LabelMap, got.LabelInput, wantMap, wantIn)
		}
		got.LabelMap, got.LabelInput = 0, 0
		if got != plain {
			t.Errorf("k=%d: %+v, Neighbourhood %+v", k, got, plain)
		}
	}
}

func TestNeighbourhoodThreadsBitIdentical(t *testing.T) {
	x := randomMatrix(400, 6, 7)
	rng := rand.New(rand.NewPCG(1, 1))
	y := make([]float64, 3*400)
	for i := range y {
		y[i] = rng.NormFloat64()
	}
	ref := Neighbourhood(InputSpace(x), MapSpace(y, 3), 9, nil, 1)
	for _, th := range []int{2, 3, 8} {
		if got := Neighbourhood(InputSpace(x), MapSpace(y, 3), 9, nil, th); got != ref {
			t.Errorf("threads %d: %+v, threads 1: %+v", th, got, ref)
		}
	}
}

func TestNeighbourhoodPanics(t *testing.T) {
	x, y := line6()
	tests := []struct {
		name string
		f    func()
	}{
		{"k too big", func() { Neighbourhood(InputSpace(x), MapSpace(y, 2), 3, nil, 1) }},
		{"k zero", func() { Neighbourhood(InputSpace(x), MapSpace(y, 2), 0, nil, 1) }},
		{"map size", func() { Neighbourhood(InputSpace(x), MapSpace(y[:10], 2), 1, nil, 1) }},
		{"row out of range", func() { Neighbourhood(InputSpace(x), MapSpace(y, 2), 1, []int32{6}, 1) }},
		{"empty sample", func() { Neighbourhood(InputSpace(x), MapSpace(y, 2), 1, []int32{}, 1) }},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			defer func() {
				if recover() == nil {
					t.Error("no panic")
				}
			}()
			tc.f()
		})
	}
}

// Hand-worked label accuracy. Points on a line: 0 1 2 3 labelled a a b b, and
// 10 11 12 labelled c c a (rows 0..6).
//
// k = 2 (neighbours nearest first; equal distances by row index):
// r0 → 1(a) 2(b): tie, nearest is a → a ✓; r1 → 0(a) 2(b): tie → a ✓;
// r2 → 1(a) 3(b): tie → a ✗; r3 → 2(b) 1(a): tie → b ✓; r4 → 5(c) 6(a) → c ✓;
// r5 → 4(c) 6(a): tie → c ✓; r6 → 5(c) 4(c) → c ✗. Accuracy 5/7.
// k = 3: r0 → a b b → b ✗; r1 → a b b → b ✗; r2 → a b a → a ✗; r3 → b a a → a ✗;
// r4 → c a b → tie → c ✓; r5 → c a b → c ✓; r6 → c c b → c ✗. Accuracy 2/7.
func TestLabelAccuracyHandWorked(t *testing.T) {
	pos := []float64{0, 1, 2, 3, 10, 11, 12}
	labels := []string{"a", "a", "b", "b", "c", "c", "a"}
	mapY := make([]float64, 0, 14)
	for _, p := range pos {
		mapY = append(mapY, p, 0)
	}
	x := core.Matrix{N: 7, D: 1, Data: []float32{0, 1, 2, 3, 10, 11, 12}}
	tests := []struct {
		k      int
		sample []int32
		want   float64
	}{
		{2, nil, 5.0 / 7},
		{3, nil, 2.0 / 7},
		{2, []int32{2, 6}, 0},
		{2, []int32{0, 4, 5}, 1},
	}
	for _, tc := range tests {
		t.Run(fmt.Sprint(tc.k, tc.sample), func(t *testing.T) {
			for name, s := range map[string]Space{"map": MapSpace(mapY, 2), "input": InputSpace(x)} {
				if got := LabelAccuracy(s, labels, tc.k, tc.sample, 2); !approx(got, tc.want) {
					t.Errorf("%s space: accuracy %v, want %v", name, got, tc.want)
				}
			}
		})
	}
}

func TestSample(t *testing.T) {
	tests := []struct {
		n, size int
		seed    uint64
		want    int
	}{{10, 3, 1, 3}, {10, 10, 1, 10}, {10, 20, 1, 10}, {1_000_000, 1000, 7, 1000}, {5, 0, 1, 0}, {0, 5, 1, 0}}
	for _, tc := range tests {
		got := Sample(tc.n, tc.size, tc.seed)
		if len(got) != tc.want {
			t.Fatalf("Sample(%d, %d) has %d rows, want %d", tc.n, tc.size, len(got), tc.want)
		}
		for i, v := range got {
			if v < 0 || int(v) >= tc.n || (i > 0 && got[i-1] >= v) {
				t.Fatalf("Sample(%d, %d): not increasing distinct rows in range: %v", tc.n, tc.size, got[:min(len(got), 20)])
			}
		}
		if again := Sample(tc.n, tc.size, tc.seed); !slices.Equal(got, again) {
			t.Fatalf("Sample(%d, %d, %d) not deterministic", tc.n, tc.size, tc.seed)
		}
	}
	if slices.Equal(Sample(1000, 10, 1), Sample(1000, 10, 2)) {
		t.Fatal("different seeds gave the same sample")
	}
	// Uniformity (common practice: a χ²-free sanity check): over many draws of
	// 3 from 10, every row is picked about 30 % of the time.
	hits := make([]int, 10)
	for s := range uint64(3000) {
		for _, v := range Sample(10, 3, s) {
			hits[v]++
		}
	}
	for r, h := range hits {
		if h < 800 || h > 1000 {
			t.Errorf("row %d drawn %d times in 3000 samples of 3 from 10, want about 900", r, h)
		}
	}
}

func BenchmarkNeighbourhood100kSample100(b *testing.B) {
	x := randomMatrix(100_000, 50, 1)
	y := make([]float64, 2*x.N)
	for i := range x.N {
		y[2*i], y[2*i+1] = float64(x.Data[i*50]), float64(x.Data[i*50+1])
	}
	sample := Sample(x.N, 100, 1)
	for b.Loop() {
		Neighbourhood(InputSpace(x), MapSpace(y, 2), 30, sample, 2)
	}
}

func ExampleNeighbourhood() {
	// Six points on a line; the map swaps rows 2 and 3.
	x := core.Matrix{N: 6, D: 1, Data: []float32{0, 1, 3, 7, 12, 20}}
	y := []float64{0, 0, 1, 0, 7, 0, 3, 0, 12, 0, 20, 0}
	s := Neighbourhood(InputSpace(x), MapSpace(y, 2), 2, nil, 1)
	fmt.Printf("T=%.4f C=%.4f P=%.4f\n", s.Trustworthiness, s.Continuity, s.Preservation)
	// Output: T=0.6667 C=0.6667 P=0.3333
}

func ExampleLabelAccuracy() {
	// Two groups on a line and one "west" point among the "east" group. With
	// k = 3 every row is voted right except row 5 (at 12), whose three nearest
	// (11, 13, 10) are all "east": 6/7.
	y := []float64{0, 0, 1, 0, 2, 0, 10, 0, 11, 0, 12, 0, 13, 0}
	labels := []string{"west", "west", "west", "east", "east", "west", "east"}
	fmt.Printf("%.3f\n", LabelAccuracy(MapSpace(y, 2), labels, 3, nil, 1))
	// Output: 0.857
}

func ExampleSample() {
	s := Sample(1_000_000, 5, 1)
	fmt.Println(len(s), slices.IsSorted(s))
	// Output: 5 true
}

// plainSpace hides the block fast path of the Space it wraps, so that the scores
// see only the Space interface, as they would for a Space of another metric.
type plainSpace struct{ Space }

// The four-row distance pass of InputSpace gives DistRow's bits, and a Space
// reached only through the interface gives the same scores (common practice:
// the fast path is an implementation detail).
func TestInputSpaceFastPath(t *testing.T) {
	x := randomMatrix(300, 7, 11)
	in := InputSpace(x)
	rows := []int32{5, 0, 299, 5, 17}
	outs := make([][]float64, len(rows))
	for r := range outs {
		outs[r] = make([]float64, x.N)
	}
	distRows(in, rows, outs)
	one := make([]float64, x.N)
	for r, i := range rows {
		in.DistRow(int(i), one)
		if !slices.Equal(one, outs[r]) {
			t.Fatalf("row %d: DistRow and the four-row pass differ", i)
		}
	}
	y := make([]float64, 2*x.N)
	for i := range x.N {
		y[2*i], y[2*i+1] = float64(x.Data[i*7]), float64(x.Data[i*7+3])
	}
	labels := make([]string, x.N)
	for i := range labels {
		labels[i] = fmt.Sprint(i % 3)
	}
	sample := Sample(x.N, 40, 3)
	if a, b := Neighbourhood(in, MapSpace(y, 2), 8, sample, 2), Neighbourhood(plainSpace{in}, MapSpace(y, 2), 8, sample, 2); a != b {
		t.Errorf("fast path %+v, interface only %+v", a, b)
	}
	if a, b := LabelAccuracy(in, labels, 5, sample, 2), LabelAccuracy(plainSpace{in}, labels, 5, sample, 2); a != b {
		t.Errorf("label accuracy: fast path %v, interface only %v", a, b)
	}
}
