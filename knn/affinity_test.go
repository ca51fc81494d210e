package knn

import (
	"errors"
	"math"
	"slices"
	"strings"
	"testing"

	"nightjar/internal/core"
)

// TestCalibrateHandExample is worked by hand (the formulas of van der Maaten &
// Hinton 2008, JMLR 9, §2; see the package doc):
//
//	three neighbours at d² = 0, 1, 2 and β = ln 2:
//	weights e^{−β d²} = 1, 1/2, 1/4;  Z = 7/4;  p = 4/7, 2/7, 1/7.
//	H = ln Z + β·Σ p d² = ln(7/4) + ln2·(2/7 + 2/7) = ln(7/4) + (4/7)·ln 2
//	  = 0.559616 + 0.396087 = 0.955703   (check: −Σ p ln p gives the same)
//	perplexity = e^H = (7/4)·2^{4/7} = 2.600515.
//
// Calibrate at that perplexity must recover β = ln 2 and those p. Near the
// answer dH/dβ = −β·Var_p(d²) = −ln2·(6/7 − 16/49) = −0.3678, so an entropy
// within 1e-5 puts β within 1e-5/0.3678 ≈ 2.7e-5 of ln 2.
func TestCalibrateHandExample(t *testing.T) {
	perp := 7.0 / 4 * math.Pow(2, 4.0/7)
	tests := []struct {
		name string
		d2   []float32
	}{
		{"0,1,2", []float32{0, 1, 2}},
		{"shifted by 5 (the row minimum cancels)", []float32{5, 6, 7}},
		{"order 2,0,1", []float32{2, 0, 1}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			p := make([]float64, 3)
			beta, h, iters := Calibrate(p, tc.d2, perp)
			if math.Abs(beta-math.Ln2) > 3e-5 {
				t.Errorf("β = %.8f, want ln 2 = %.8f", beta, math.Ln2)
			}
			if math.Abs(h-0.955703) > 1e-5 {
				t.Errorf("H = %.7f, want 0.955703", h)
			}
			for j, d := range tc.d2 {
				want := map[float32]float64{0: 4.0 / 7, 1: 2.0 / 7, 2: 1.0 / 7}[d-slices.Min(tc.d2)]
				if math.Abs(p[j]-want) > 1e-5 {
					t.Errorf("p[%d] = %.7f, want %.7f", j, p[j], want)
				}
			}
			if iters < 1 || iters > MaxCalibrationSteps {
				t.Errorf("iterations %d", iters)
			}
		})
	}
}

// TestCalibrateEntropy: every row's entropy equals ln(perplexity) within 1e-5
// (van der Maaten & Hinton 2008, JMLR 9, §2), the returned H agrees with
// −Σ p ln p recomputed from p, and p sums to 1.
func TestCalibrateEntropy(t *testing.T) {
	x := randMatrix(400, 5, 71, 0, 1)
	g, err := Exact(x, 90, ExactOptions{})
	if err != nil {
		t.Fatal(err)
	}
	tests := []struct {
		name  string
		scale float32 // multiplies all distances: β must follow, H not
		perp  float64
	}{
		{"perplexity 30", 1, 30},
		{"perplexity 5", 1, 5},
		{"perplexity 2", 1, 2},
		{"perplexity 89.5 (nearly uniform)", 1, 89.5},
		{"distances ×1e6", 1e6, 30},
		{"distances ×1e-6", 1e-6, 30},
	}
	p := make([]float64, 90)
	d2 := make([]float32, 90)
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			for i := 0; i < g.N; i++ {
				for j := range d2 {
					d2[j] = g.Dist2[i*90+j] * tc.scale
				}
				_, h, _ := Calibrate(p, d2, tc.perp)
				if math.Abs(h-math.Log(tc.perp)) > 1e-5 {
					t.Fatalf("row %d: H = %.8f, ln(perplexity) = %.8f", i, h, math.Log(tc.perp))
				}
				var sum, hp float64
				for _, v := range p {
					sum += v
					if v > 0 {
						hp -= v * math.Log(v)
					}
				}
				if math.Abs(sum-1) > 1e-12 || math.Abs(hp-h) > 1e-9 {
					t.Fatalf("row %d: Σp = %.15f, −Σ p ln p = %.10f vs H = %.10f", i, sum, hp, h)
				}
			}
		})
	}
}

// TestCalibrateUniform: rows of exact duplicates (all d² equal) give uniform p:
// with equal d² every weight exp(−β·d²) is the same, whatever β (van der
// Maaten & Hinton 2008, JMLR 9, §2).
func TestCalibrateUniform(t *testing.T) {
	for _, d2 := range [][]float32{{0, 0, 0, 0}, {3.5, 3.5, 3.5}, {0}} {
		p := make([]float64, len(d2))
		beta, h, _ := Calibrate(p, d2, 2)
		for _, v := range p {
			if v != 1/float64(len(d2)) {
				t.Errorf("%v: p = %v, want uniform", d2, p)
			}
		}
		if beta != 0 || math.Abs(h-math.Log(float64(len(d2)))) > 1e-15 {
			t.Errorf("%v: β = %g, H = %g", d2, beta, h)
		}
	}
}

func TestNeighbours(t *testing.T) {
	// k = min(N−1, ⌊3·perplexity⌋), van der Maaten 2014, JMLR 15.
	tests := []struct {
		perp float64
		n    int
		want int
	}{
		{30, 1_000_000, 90},
		{30, 50, 49},
		{10.5, 1000, 31},
		{5, 16, 15},
		{5, 17, 15},
		{0.2, 10, 1},
		{30, 1, 0},
	}
	for _, tc := range tests {
		if got := Neighbours(tc.perp, tc.n); got != tc.want {
			t.Errorf("Neighbours(%g, %d) = %d, want %d", tc.perp, tc.n, got, tc.want)
		}
	}
}

// TestPerplexityError: the rule 3·perplexity ≤ N−1 gives Max = (N−1)/3; the
// value the message suggests must itself pass.
func TestPerplexityError(t *testing.T) {
	tests := []struct {
		n    int
		perp float64
		max  float64
		msg  string
	}{
		{50, 30, 49.0 / 3, "at most 16.33"},
		{91, 30.5, 30, "at most 30.00"},
		{11, 4, 10.0 / 3, "at most 3.33"},
	}
	for _, tc := range tests {
		err := CheckPerplexity(tc.perp, tc.n)
		var pe *PerplexityError
		if !errors.As(err, &pe) || pe.Rows != tc.n || pe.Perplexity != tc.perp || math.Abs(pe.Max-tc.max) > 1e-12 {
			t.Fatalf("CheckPerplexity(%g, %d) = %#v", tc.perp, tc.n, err)
		}
		if !strings.Contains(err.Error(), tc.msg) {
			t.Errorf("message %q lacks %q", err.Error(), tc.msg)
		}
		if err := CheckPerplexity(math.Floor(pe.Max*100)/100, tc.n); err != nil {
			t.Errorf("suggested perplexity refused: %v", err)
		}
	}
	for _, p := range []float64{30, 1} {
		if err := CheckPerplexity(p, 91); err != nil {
			t.Errorf("CheckPerplexity(%g, 91): %v", p, err)
		}
	}
	for _, p := range []float64{0.5, math.NaN(), math.Inf(1)} {
		if err := CheckPerplexity(p, 1000); err == nil {
			t.Errorf("CheckPerplexity(%g) accepted", p)
		}
	}
	// Affinity applies the same rule.
	x := randMatrix(20, 3, 72, 0, 1)
	g, _ := Exact(x, 19, ExactOptions{})
	var pe *PerplexityError
	if _, err := Affinity(g, 7, 1); !errors.As(err, &pe) {
		t.Errorf("Affinity(perplexity 7, 20 rows) = %v", err)
	}
}

// denseP is the reference for Affinity: the N×N matrix built literally from
// its definition p_ij = (p_{j|i} + p_{i|j}) / 2N (van der Maaten & Hinton 2008,
// eq. of §3), with p_{j|i} from Calibrate.
func denseP(g *core.Graph, perp float64) []float64 {
	n, k := g.N, g.K
	c := make([]float64, n*n)
	p := make([]float64, k)
	for i := 0; i < n; i++ {
		Calibrate(p, g.Dist2[i*k:(i+1)*k], perp)
		for t, j := range g.Index[i*k : (i+1)*k] {
			c[i*n+int(j)] = p[t]
		}
	}
	out := make([]float64, n*n)
	for i := 0; i < n; i++ {
		for j := 0; j < n; j++ {
			out[i*n+j] = (c[i*n+j] + c[j*n+i]) / (2 * float64(n))
		}
	}
	return out
}

// TestAffinity checks P against the dense definition and its promised
// properties: symmetric (bit-exact), non-negative, columns ascending, Σ = 1.
// Σ P = 1 holds in float64 (the dense reference is checked to 1e-9). The
// stored values are float32 and went through two roundings of relative size
// ≤ 2⁻²⁴ each (the conditional probabilities are kept in float32 between
// steps, then P itself), so Σ of the stored values is within 2⁻²³ ≈ 1.2e-7 of
// 1 — the bound checked (standard rounding-error analysis). Random rounding
// usually lands near 1e-9; uniform rows (1/3, 1/15…) round one way and reach
// a few 1e-8.
func TestAffinity(t *testing.T) {
	tests := []struct {
		name string
		n, k int
		perp float64
		dup  bool
	}{
		{"random", 500, 30, 10, false},
		{"duplicates", 400, 15, 5, true},
		{"k = N−1", 40, 39, 13, false},
		{"k = 1 (perplexity 1)", 60, 1, 1, false},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			x := randMatrix(tc.n, 4, 81, 0, 1)
			if tc.dup {
				x = withDuplicates(x)
			}
			g, err := Exact(x, tc.k, ExactOptions{})
			if err != nil {
				t.Fatal(err)
			}
			P, err := Affinity(g, tc.perp, 2)
			if err != nil {
				t.Fatal(err)
			}
			n := tc.n
			if P.N != n || len(P.Offsets) != n+1 || P.Offsets[0] != 0 || int(P.Offsets[n]) != len(P.Cols) || len(P.Cols) != len(P.Vals) {
				t.Fatalf("malformed CSR")
			}
			if len(P.Vals) < n*tc.k || len(P.Vals) > 2*n*tc.k {
				t.Errorf("%d entries, want between N·k and 2·N·k", len(P.Vals))
			}
			ref := denseP(g, tc.perp)
			seen := make([]bool, n*n)
			var sum float64
			for i := 0; i < n; i++ {
				for pos := P.Offsets[i]; pos < P.Offsets[i+1]; pos++ {
					j, v := int(P.Cols[pos]), P.Vals[pos]
					if pos > P.Offsets[i] && P.Cols[pos-1] >= P.Cols[pos] {
						t.Fatalf("row %d: columns not ascending", i)
					}
					if !(v >= 0) {
						t.Fatalf("P[%d,%d] = %g", i, j, v)
					}
					if v != lookup(P, j, i) {
						t.Fatalf("P[%d,%d] = %g but P[%d,%d] = %g", i, j, v, j, i, lookup(P, j, i))
					}
					if math.Abs(float64(v)-ref[i*n+j]) > 1e-6*ref[i*n+j] {
						t.Fatalf("P[%d,%d] = %g, dense definition %g", i, j, v, ref[i*n+j])
					}
					seen[i*n+j] = true
					sum += float64(v)
				}
			}
			var refSum float64
			for p, v := range ref {
				refSum += v
				if v != 0 && !seen[p] {
					t.Fatalf("entry (%d,%d) = %g missing from P", p/n, p%n, v)
				}
			}
			if math.Abs(refSum-1) > 1e-9 {
				t.Errorf("dense Σ P = %.12f", refSum)
			}
			t.Logf("Σ P − 1 = %.3g (stored float32), dense %.3g", sum-1, refSum-1)
			if math.Abs(sum-1) > 0x1p-23+1e-12 {
				t.Errorf("Σ P = %.12f", sum)
			}
		})
	}
}

// lookup returns P[i,j] (0 if absent) by binary search in row i.
func lookup(P *core.CSR, i, j int) float32 {
	row := P.Cols[P.Offsets[i]:P.Offsets[i+1]]
	if t, ok := slices.BinarySearch(row, int32(j)); ok {
		return P.Vals[P.Offsets[i]+int64(t)]
	}
	return 0
}

// TestAffinityThreadsBitIdentical: same bits for 1 and 3 threads (the package
// promise, see the package doc), on more rows than one block so the one-way
// edges arrive out of order.
func TestAffinityThreadsBitIdentical(t *testing.T) {
	x := randMatrix(3000, 3, 91, 0, 1)
	g, err := Exact(x, 12, ExactOptions{})
	if err != nil {
		t.Fatal(err)
	}
	a, err := Affinity(g, 4, 1)
	if err != nil {
		t.Fatal(err)
	}
	b, err := Affinity(g, 4, 3)
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(a.Offsets, b.Offsets) || !slices.Equal(a.Cols, b.Cols) || !slices.Equal(a.Vals, b.Vals) {
		t.Error("P differs between 1 and 3 threads")
	}
	// AffinityConsume must give the same bits from the graph's own storage.
	c, err := AffinityConsume(&core.Graph{N: g.N, K: g.K, Index: slices.Clone(g.Index), Dist2: slices.Clone(g.Dist2)}, 4, 2)
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(a.Offsets, c.Offsets) || !slices.Equal(a.Cols, c.Cols) || !slices.Equal(a.Vals, c.Vals) {
		t.Error("AffinityConsume differs from Affinity")
	}
}

func TestAffinityErrors(t *testing.T) {
	base := func() *core.Graph {
		g, err := Exact(randMatrix(30, 2, 101, 0, 1), 6, ExactOptions{})
		if err != nil {
			t.Fatal(err)
		}
		return g
	}
	tests := []struct {
		name   string
		damage func(g *core.Graph)
		perp   float64
	}{
		{"self neighbour", func(g *core.Graph) { g.Index[5*6+2] = 5 }, 2},
		{"repeated neighbour", func(g *core.Graph) { g.Index[7*6+3] = g.Index[7*6+1] }, 2},
		{"index out of range", func(g *core.Graph) { g.Index[0] = 30 }, 2},
		{"negative distance", func(g *core.Graph) { g.Dist2[4] = -1 }, 2},
		{"NaN distance", func(g *core.Graph) { g.Dist2[4] = float32(math.NaN()) }, 2},
		{"short index", func(g *core.Graph) { g.Index = g.Index[:10] }, 2},
		{"perplexity above k", func(g *core.Graph) {}, 7},
		{"perplexity below 1", func(g *core.Graph) {}, 0.5},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			g := base()
			tc.damage(g)
			if _, err := Affinity(g, tc.perp, 2); err == nil {
				t.Error("accepted")
			}
		})
	}
	if _, err := Affinity(base(), 2, 2); err != nil {
		t.Errorf("undamaged graph: %v", err)
	}
}

// TestUniformAffinity checks UniformAffinity against its dense definition
// (Böhm, Berens & Kobak, JMLR 23, 2022: p_{j|i} = 1/K over the K nearest
// neighbours, symmetrised as van der Maaten & Hinton 2008, JMLR 9, §3),
// built here from the neighbour lists alone: every entry is 1/(2NK) or
// 1/(NK). A second, independent route: the only distribution over K
// neighbours whose perplexity is K is the uniform one (its entropy ln K is
// the largest), so Affinity calibrated to perplexity K must come out
// uniform too, within the calibration's tolerance. Duplicate rows are
// valid neighbours here like any other.
func TestUniformAffinity(t *testing.T) {
	tests := []struct {
		name string
		n, k int
		dup  bool
	}{
		{"random", 500, 15, false},
		{"duplicates", 400, 7, true},
		{"k = N−1", 30, 29, false},
		{"k = 1", 60, 1, false},
		{"k = 30, calibrated too", 200, 30, false},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			x := randMatrix(tc.n, 4, 83, 0, 1)
			if tc.dup {
				x = withDuplicates(x)
			}
			g, err := Exact(x, tc.k, ExactOptions{})
			if err != nil {
				t.Fatal(err)
			}
			P, err := UniformAffinity(g, 2)
			if err != nil {
				t.Fatal(err)
			}
			n, k := tc.n, tc.k
			dense := make([]float64, n*n)
			for i := range n {
				for _, j := range g.Index[i*k : (i+1)*k] {
					dense[i*n+int(j)] += 1 / (2 * float64(n) * float64(k))
					dense[int(j)*n+i] += 1 / (2 * float64(n) * float64(k))
				}
			}
			var sum float64
			count := 0
			for i := range n {
				for pos := P.Offsets[i]; pos < P.Offsets[i+1]; pos++ {
					j, v := int(P.Cols[pos]), float64(P.Vals[pos])
					if want := dense[i*n+j]; math.Abs(v-want) > 0x1p-23*want {
						t.Fatalf("P[%d,%d] = %g, dense definition %g", i, j, v, want)
					}
					if float32(v) != lookup(P, j, i) {
						t.Fatalf("P[%d,%d] ≠ P[%d,%d]", i, j, j, i)
					}
					sum += v
				}
			}
			for _, v := range dense {
				if v != 0 {
					count++
				}
			}
			if len(P.Vals) != count {
				t.Errorf("%d entries, the dense definition has %d", len(P.Vals), count)
			}
			if math.Abs(sum-1) > 0x1p-23 {
				t.Errorf("Σ P = %.12f", sum)
			}
			// p_j = (1+ε_j)/K has entropy ln K − Σ ε_j²/2K to second
			// order, so the calibration's tolerance allows
			// |ε_j| ≤ √(2K·EntropyTolerance), and symmetrising averages two
			// such rows.
			if k >= 2 && 3*k <= n-1 {
				calibrated, err := Affinity(g, float64(k), 1)
				if err != nil {
					t.Fatal(err)
				}
				if !slices.Equal(calibrated.Cols, P.Cols) {
					t.Fatal("perplexity K: other entries than the uniform affinities")
				}
				worst := 0.0
				for e, v := range calibrated.Vals {
					worst = max(worst, math.Abs(float64(v)/float64(P.Vals[e])-1))
				}
				if bound := math.Sqrt(2 * float64(k) * EntropyTolerance); worst > bound {
					t.Errorf("perplexity K departs from uniform by %.3g relative, more than %.3g", worst, bound)
				}
				t.Logf("perplexity %d against uniform: largest relative difference %.2g", k, worst)
			}
			again, err := UniformAffinityConsume(g, 1)
			if err != nil {
				t.Fatal(err)
			}
			if !slices.Equal(again.Cols, P.Cols) || !slices.Equal(again.Vals, P.Vals) || g.Index != nil {
				t.Error("UniformAffinityConsume on 1 thread: other bits, or the graph kept")
			}
		})
	}
}
