package knn

import (
	"cmp"
	"slices"
	"testing"

	"nightjar/internal/core"
)

// TestRecall: the exact graph has recall 1; a graph damaged in a known number
// of positions has recall exactly (hits)/(rows·k) (the definition of
// recall@k in the package doc).
func TestRecall(t *testing.T) {
	x := randMatrix(600, 5, 111, 0, 1)
	const k = 10
	g, err := Exact(x, k, ExactOptions{})
	if err != nil {
		t.Fatal(err)
	}
	for _, sample := range []int{600, 5000, 137} {
		r, rows, err := Recall(g, x, sample, 7, Options{Threads: 2})
		if err != nil {
			t.Fatal(err)
		}
		if r != 1 || rows != min(sample, 600) {
			t.Errorf("exact graph, sample %d: recall %g on %d rows", sample, r, rows)
		}
	}

	// Damage: in every fourth row replace the last 3 neighbours by the row's
	// 3 farthest rows (certainly not among its 10 nearest).
	bad := &core.Graph{N: g.N, K: k, Index: slices.Clone(g.Index), Dist2: slices.Clone(g.Dist2)}
	damaged := 0
	for i := 0; i < 600; i += 4 {
		copy(bad.Index[i*k+7:(i+1)*k], farthest(x, i, 3))
		damaged++
	}
	r, rows, err := Recall(bad, x, 600, 7, Options{})
	if err != nil {
		t.Fatal(err)
	}
	want := 1 - float64(damaged*3)/float64(600*k)
	if r != want || rows != 600 {
		t.Errorf("damaged graph: recall %g on %d rows, want %g", r, rows, want)
	}
	// On a sample, the recall counts only the sampled rows' damage.
	sel := SampleRows(600, 100, 9)
	hit := 0
	for _, i := range sel {
		if i%4 == 0 {
			hit++
		}
	}
	r, _, err = Recall(bad, x, 100, 9, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if want := 1 - float64(hit*3)/float64(100*k); r != want {
		t.Errorf("damaged graph, sample 100: recall %g, want %g", r, want)
	}
}

// farthest returns the m rows farthest from row i, by brute force in float64.
func farthest(x core.Matrix, i, m int) []int32 {
	rows := seq(x.N)
	d := func(j int32) float64 {
		var s float64
		for l := 0; l < x.D; l++ {
			v := float64(x.Data[i*x.D+l]) - float64(x.Data[int(j)*x.D+l])
			s += v * v
		}
		return s
	}
	slices.SortFunc(rows, func(a, b int32) int { return cmp.Compare(d(b), d(a)) })
	return rows[:m]
}

func seq(n int) []int32 {
	s := make([]int32, n)
	for i := range s {
		s[i] = int32(i)
	}
	return s
}

func TestSampleRows(t *testing.T) {
	tests := []struct{ n, sample, want int }{
		{10, 3, 3}, {10, 10, 10}, {10, 50, 10}, {1000, 999, 999}, {5, 0, 0}, {5, -1, 0},
	}
	for _, tc := range tests {
		s := SampleRows(tc.n, tc.sample, 42)
		if len(s) != tc.want {
			t.Fatalf("SampleRows(%d, %d): %d rows", tc.n, tc.sample, len(s))
		}
		for i, v := range s {
			if v < 0 || int(v) >= tc.n || (i > 0 && s[i-1] >= v) {
				t.Fatalf("SampleRows(%d, %d) = %v: not distinct ascending in range", tc.n, tc.sample, s)
			}
		}
		if !slices.Equal(s, SampleRows(tc.n, tc.sample, 42)) {
			t.Errorf("SampleRows(%d, %d) not reproducible", tc.n, tc.sample)
		}
	}
	// Uniformity (Floyd's algorithm draws every subset with equal
	// probability, Bentley & Floyd 1987): over 20,000 seeds each of 10 rows is
	// picked with probability 3/10, so about 6000 times, σ ≈ 65; allow 5σ.
	count := make([]int, 10)
	for seed := uint64(0); seed < 20000; seed++ {
		for _, v := range SampleRows(10, 3, seed) {
			count[v]++
		}
	}
	for i, c := range count {
		if c < 6000-325 || c > 6000+325 {
			t.Errorf("row %d picked %d times, want 6000 ± 325", i, c)
		}
	}
}
