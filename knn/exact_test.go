package knn

import (
	"errors"
	"math"
	"math/rand/v2"
	"slices"
	"sort"
	"strings"
	"testing"

	"nightjar/internal/core"
)

// randMatrix returns an n×d matrix of standard normal values (invented test
// data), shifted by offset and scaled by spread.
func randMatrix(n, d int, seed uint64, offset, spread float64) core.Matrix {
	r := rand.New(rand.NewPCG(seed, 1))
	x := core.Matrix{N: n, D: d, Data: make([]float32, n*d)}
	for i := range x.Data {
		x.Data[i] = float32(offset + spread*r.NormFloat64())
	}
	return x
}

// withDuplicates overwrites every third row with a copy of an earlier row.
func withDuplicates(x core.Matrix) core.Matrix {
	for i := 3; i < x.N; i += 3 {
		src := (i * 7) % i
		copy(x.Data[i*x.D:(i+1)*x.D], x.Data[src*x.D:(src+1)*x.D])
	}
	return x
}

// naiveKNN is the O(N²·D) reference: every pair's distance summed in float64
// in the plainest way, for Cosine 2 − 2·cos(a, b) from the raw rows, sorted by
// (distance rounded to float32, index).
func naiveKNN(x core.Matrix, k int, m Metric) ([]int32, []float64) {
	idx := make([]int32, 0, x.N*k)
	dist := make([]float64, 0, x.N*k)
	type pair struct {
		d float64
		j int
	}
	for i := 0; i < x.N; i++ {
		var ps []pair
		for j := 0; j < x.N; j++ {
			if j == i {
				continue
			}
			var d, aa, bb, ab float64
			for l := 0; l < x.D; l++ {
				a, b := float64(x.Data[i*x.D+l]), float64(x.Data[j*x.D+l])
				d += (a - b) * (a - b)
				aa += a * a
				bb += b * b
				ab += a * b
			}
			if m == Cosine {
				d = 2 - 2*ab/math.Sqrt(aa*bb)
				if d < 0 {
					d = 0
				}
			}
			ps = append(ps, pair{d, j})
		}
		sort.Slice(ps, func(a, b int) bool {
			da, db := float32(ps[a].d), float32(ps[b].d)
			return da < db || (da == db && ps[a].j < ps[b].j)
		})
		for _, p := range ps[:k] {
			idx = append(idx, int32(p.j))
			dist = append(dist, p.d)
		}
	}
	return idx, dist
}

// TestExactMatchesNaive checks Exact against the O(N²·D) double loop above
// (an exact reference, as the project rules ask).
func TestExactMatchesNaive(t *testing.T) {
	tests := []struct {
		name   string
		x      core.Matrix
		k      int
		metric Metric
	}{
		{"gaussian", randMatrix(300, 7, 1, 0, 1), 10, Euclidean},
		{"D>64 (several gonum blocks)", randMatrix(203, 70, 2, 0, 1), 5, Euclidean},
		{"duplicates", withDuplicates(randMatrix(250, 5, 3, 0, 1)), 6, Euclidean},
		{"all rows identical", randMatrix(70, 3, 4, 5, 0), 4, Euclidean},
		// Far from the origin and tightly spread: the screened distance
		// ‖a‖²+‖b‖²−2a·b would cancel catastrophically without centring and
		// the error bound.
		{"offset 1000, spread 1e-3", randMatrix(200, 10, 5, 1000, 1e-3), 8, Euclidean},
		{"k = N-1", randMatrix(40, 4, 6, 0, 1), 39, Euclidean},
		{"k = 1", randMatrix(130, 4, 7, 0, 1), 1, Euclidean},
		{"cosine", randMatrix(180, 6, 8, 0.3, 1), 7, Cosine},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			g, err := Exact(tc.x, tc.k, ExactOptions{Options: Options{Threads: 2, Metric: tc.metric}})
			if err != nil {
				t.Fatal(err)
			}
			if g.N != tc.x.N || g.K != tc.k || len(g.Index) != g.N*g.K || len(g.Dist2) != g.N*g.K {
				t.Fatalf("graph shape N=%d K=%d len=%d,%d", g.N, g.K, len(g.Index), len(g.Dist2))
			}
			wantIdx, wantD := naiveKNN(tc.x, tc.k, tc.metric)
			for p := range wantIdx {
				i := p / tc.k
				if g.Index[p] != wantIdx[p] {
					t.Fatalf("row %d position %d: neighbour %d (d²=%g), naive %d (d²=%g)",
						i, p%tc.k, g.Index[p], g.Dist2[p], wantIdx[p], wantD[p])
				}
				if math.Abs(float64(g.Dist2[p])-wantD[p]) > 1e-6*(1+wantD[p]) {
					t.Fatalf("row %d position %d: d² %g, naive %g", i, p%tc.k, g.Dist2[p], wantD[p])
				}
				if g.Index[p] == int32(i) {
					t.Fatalf("row %d is its own neighbour", i)
				}
			}
		})
	}
}

// TestExactDuplicatesAtZero: an exact copy of a row is its neighbour at
// distance exactly 0 (not a small rounding residue), ahead of all others.
func TestExactDuplicatesAtZero(t *testing.T) {
	x := randMatrix(100, 9, 11, 3, 2)
	copy(x.Data[57*9:58*9], x.Data[12*9:13*9])
	g, err := Exact(x, 3, ExactOptions{})
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct{ row, dup int32 }{{12, 57}, {57, 12}} {
		if g.Index[int(c.row)*3] != c.dup || g.Dist2[int(c.row)*3] != 0 {
			t.Errorf("row %d: first neighbour %d at %g, want %d at 0", c.row, g.Index[int(c.row)*3], g.Dist2[int(c.row)*3], c.dup)
		}
	}
}

// TestExactThreadsBitIdentical: the project promises the same bits whatever
// the thread count (fixed-size blocks, see the package doc).
func TestExactThreadsBitIdentical(t *testing.T) {
	x := withDuplicates(randMatrix(2000, 12, 21, 0, 1))
	for _, m := range []Metric{Euclidean, Cosine} {
		g1, err := Exact(x, 15, ExactOptions{Options: Options{Threads: 1, Metric: m}})
		if err != nil {
			t.Fatal(err)
		}
		g3, err := Exact(x, 15, ExactOptions{Options: Options{Threads: 3, Metric: m}})
		if err != nil {
			t.Fatal(err)
		}
		if !slices.Equal(g1.Index, g3.Index) || !slices.Equal(g1.Dist2, g3.Dist2) {
			t.Errorf("%v: graphs differ between 1 and 3 threads", m)
		}
	}
}

// TestExactRowsMatchesExact: ExactRows on a subset, in any order and with
// repeats, gives those rows of Exact.
func TestExactRowsMatchesExact(t *testing.T) {
	x := randMatrix(400, 6, 31, 0, 1)
	g, err := Exact(x, 9, ExactOptions{})
	if err != nil {
		t.Fatal(err)
	}
	rows := []int32{399, 0, 17, 17, 250, 64, 63, 128}
	for i := int32(0); i < 90; i++ { // more than one query block
		rows = append(rows, (i*37)%400)
	}
	idx, d2, err := ExactRows(x, rows, 9, ExactOptions{Options: Options{Threads: 2}})
	if err != nil {
		t.Fatal(err)
	}
	for q, r := range rows {
		if !slices.Equal(idx[q*9:(q+1)*9], g.Index[int(r)*9:(int(r)+1)*9]) ||
			!slices.Equal(d2[q*9:(q+1)*9], g.Dist2[int(r)*9:(int(r)+1)*9]) {
			t.Fatalf("row %d differs from Exact", r)
		}
	}
}

// TestCosineIsEuclideanOnNormalisedRows: by definition of the Cosine metric
// (‖a/‖a‖ − b/‖b‖‖² = 2 − 2cos), Cosine on raw rows and Euclidean on
// L2-normalised rows give the same neighbour sets.
func TestCosineIsEuclideanOnNormalisedRows(t *testing.T) {
	x := randMatrix(300, 8, 41, 0.5, 1)
	// Scale rows by different factors: cosine must not care.
	for i := 0; i < x.N; i++ {
		for j := 0; j < x.D; j++ {
			x.Data[i*x.D+j] *= float32(1 + i%5)
		}
	}
	nx := core.Matrix{N: x.N, D: x.D, Data: make([]float32, len(x.Data))}
	for i := 0; i < x.N; i++ {
		var s float64
		for j := 0; j < x.D; j++ {
			s += float64(x.Data[i*x.D+j]) * float64(x.Data[i*x.D+j])
		}
		for j := 0; j < x.D; j++ {
			nx.Data[i*x.D+j] = float32(float64(x.Data[i*x.D+j]) / math.Sqrt(s))
		}
	}
	gc, err := Exact(x, 10, ExactOptions{Options: Options{Metric: Cosine}})
	if err != nil {
		t.Fatal(err)
	}
	ge, err := Exact(nx, 10, ExactOptions{Options: Options{Metric: Euclidean}})
	if err != nil {
		t.Fatal(err)
	}
	for i := 0; i < x.N; i++ {
		a := slices.Clone(gc.Index[i*10 : (i+1)*10])
		b := slices.Clone(ge.Index[i*10 : (i+1)*10])
		if countCommon(a, b) != 10 {
			t.Fatalf("row %d: cosine %v, euclidean on normalised rows %v", i, gc.Index[i*10:(i+1)*10], ge.Index[i*10:(i+1)*10])
		}
		for j := 0; j < 10; j++ {
			if d := gc.Dist2[i*10+j]; d < 0 || d > 4 {
				t.Fatalf("row %d: cosine distance² %g outside [0, 4]", i, d)
			}
		}
	}
}

func TestExactErrors(t *testing.T) {
	small := randMatrix(10, 3, 51, 0, 1)
	zero := randMatrix(10, 3, 52, 0, 1)
	clear(zero.Data[4*3 : 5*3])
	tests := []struct {
		name  string
		x     core.Matrix
		k     int
		opt   Options
		check func(error) bool
	}{
		{"k = N", small, 10, Options{}, func(e error) bool { return e != nil }},
		{"k = 0", small, 0, Options{}, func(e error) bool { return e != nil }},
		{"one row", randMatrix(1, 3, 53, 0, 1), 1, Options{}, func(e error) bool { return e != nil }},
		{"bad length", core.Matrix{N: 5, D: 3, Data: make([]float32, 14)}, 2, Options{}, func(e error) bool { return e != nil }},
		{"unknown metric", small, 2, Options{Metric: 7}, func(e error) bool { return e != nil }},
		{"too many rows", core.Matrix{N: ExactLimit + 1, D: 1, Data: make([]float32, ExactLimit+1)}, 5, Options{},
			func(e error) bool { var te *TooLargeError; return errors.As(e, &te) && te.Rows == ExactLimit+1 }},
		{"cosine zero row", zero, 2, Options{Metric: Cosine},
			func(e error) bool { var ze *ZeroRowError; return errors.As(e, &ze) && ze.Row == 4 }},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Exact(tc.x, tc.k, ExactOptions{Options: tc.opt})
			if !tc.check(err) {
				t.Errorf("got error %v", err)
			}
		})
	}
	if _, _, err := ExactRows(small, []int32{3, 10}, 2, ExactOptions{}); err == nil {
		t.Error("ExactRows accepted row 10 of 10")
	}
	// A euclidean zero row is fine.
	if _, err := Exact(zero, 2, ExactOptions{}); err != nil {
		t.Errorf("euclidean with a zero row: %v", err)
	}
}

func TestZeroRowErrorMessage(t *testing.T) {
	// The message is 1-based, like the ingest package's row numbers.
	if got, want := (&ZeroRowError{Row: 4}).Error(), "row 5: all values are zero, so the cosine metric is undefined for it"; got != want {
		t.Errorf("got %q, want %q", got, want)
	}
}

func TestExactProgress(t *testing.T) {
	x := randMatrix(300, 4, 61, 0, 1)
	var last, calls int64
	_, err := Exact(x, 3, ExactOptions{Options: Options{Threads: 2}, Progress: func(done, total int64) {
		if total != 300 || done <= last {
			t.Errorf("progress (%d, %d) after %d", done, total, last)
		}
		last = done
		calls++
	}})
	if err != nil {
		t.Fatal(err)
	}
	if last != 300 || calls != (300+queryBlock-1)/queryBlock {
		t.Errorf("progress ended at %d after %d calls", last, calls)
	}
}

func TestParseMetric(t *testing.T) {
	tests := []struct {
		in   string
		want Metric
		ok   bool
	}{
		{"euclidean", Euclidean, true},
		{"Cosine", Cosine, true},
		{" cosine ", Cosine, true},
		{"manhattan", 0, false},
		{"", 0, false},
	}
	for _, tc := range tests {
		got, err := ParseMetric(tc.in)
		if (err == nil) != tc.ok || (tc.ok && got != tc.want) {
			t.Errorf("ParseMetric(%q) = %v, %v", tc.in, got, err)
		}
		if tc.ok && got.String() != strings.ToLower(strings.TrimSpace(tc.in)) {
			t.Errorf("%v.String() = %q", got, got.String())
		}
	}
}
