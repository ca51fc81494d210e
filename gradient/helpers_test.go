package gradient

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"nightjar/internal/core"
)

// Test inputs are invented (random graphs and point clouds); the checks
// against them use outside references named at each test.

// symmetricP builds a symmetric affinity matrix from directed edges: each
// edge (i, j, v) adds v to p_ij and to p_ji; duplicates are summed; the
// result is normalised to sum 1. Self-loops are dropped.
func symmetricP(n int, from, to []int32, val []float64) core.CSR {
	deg := make([]int64, n+1)
	for e := range from {
		if from[e] == to[e] {
			continue
		}
		deg[from[e]+1]++
		deg[to[e]+1]++
	}
	for i := 1; i <= n; i++ {
		deg[i] += deg[i-1]
	}
	nnz := deg[n]
	cols := make([]int32, nnz)
	vals := make([]float64, nnz)
	pos := slices.Clone(deg[:n])
	for e := range from {
		i, j := from[e], to[e]
		if i == j {
			continue
		}
		cols[pos[i]], vals[pos[i]] = j, val[e]
		pos[i]++
		cols[pos[j]], vals[pos[j]] = i, val[e]
		pos[j]++
	}
	// sort each row by column, merge duplicates
	off := make([]int64, n+1)
	outC := make([]int32, 0, nnz)
	outV := make([]float64, 0, nnz)
	idx := make([]int, 0, 64)
	var total float64
	for i := 0; i < n; i++ {
		lo, hi := deg[i], deg[i+1]
		idx = idx[:0]
		for k := lo; k < hi; k++ {
			idx = append(idx, int(k))
		}
		slices.SortFunc(idx, func(a, b int) int { return int(cols[a]) - int(cols[b]) })
		for _, k := range idx {
			if l := len(outC); l > int(off[i]) && outC[l-1] == cols[k] {
				outV[l-1] += vals[k]
			} else {
				outC = append(outC, cols[k])
				outV = append(outV, vals[k])
			}
			total += vals[k]
		}
		off[i+1] = int64(len(outC))
	}
	v32 := make([]float32, len(outV))
	for k, v := range outV {
		v32[k] = float32(v / total)
	}
	return core.CSR{N: n, Offsets: off, Cols: outC, Vals: v32}
}

// randomP joins each row to k random other rows with random positive weights.
func randomP(n, k int, rng *rand.Rand) core.CSR {
	var from, to []int32
	var val []float64
	for i := 0; i < n; i++ {
		for m := 0; m < k; m++ {
			j := rng.IntN(n - 1)
			if j >= i {
				j++
			}
			from = append(from, int32(i))
			to = append(to, int32(j))
			val = append(val, 0.1+rng.Float64())
		}
	}
	return symmetricP(n, from, to, val)
}

// clusteredY draws n points in dims dimensions around `clusters` centres
// uniform in [−spread, spread], with unit-sd Gaussian scatter times sd.
func clusteredY(n, dims, clusters int, spread, sd float64, rng *rand.Rand) []float64 {
	centres := make([]float64, clusters*dims)
	for k := range centres {
		centres[k] = (2*rng.Float64() - 1) * spread
	}
	y := make([]float64, n*dims)
	for i := 0; i < n; i++ {
		c := rng.IntN(clusters)
		for a := 0; a < dims; a++ {
			y[i*dims+a] = centres[c*dims+a] + sd*rng.NormFloat64()
		}
	}
	return y
}

// dense returns P as a dense N×N matrix.
func dense(p core.CSR) []float64 {
	m := make([]float64, p.N*p.N)
	for i := 0; i < p.N; i++ {
		for k := p.Offsets[i]; k < p.Offsets[i+1]; k++ {
			m[i*p.N+int(p.Cols[k])] = float64(p.Vals[k])
		}
	}
	return m
}

// directObjective evaluates, by a plain double loop written independently of
// the package, L_ρ(Y) = Σ_{i≠j} [ρ p_ij ln p_ij − ρ p_ij ln w_ij] + ln Z with
// w_ij = (1 + d²_ij/α)^(−α) (Kobak et al. 2019). For ρ = 1 it is
// KL(P‖Q) = Σ p ln(p/q) (van der Maaten & Hinton 2008, eq. 2 with the
// symmetric P of section 3.1).
func directObjective(pd []float64, n int, y []float64, dims int, alpha, rho float64) float64 {
	var z, s float64
	for i := 0; i < n; i++ {
		for j := 0; j < n; j++ {
			if i == j {
				continue
			}
			var d2 float64
			for a := 0; a < dims; a++ {
				t := y[i*dims+a] - y[j*dims+a]
				d2 += t * t
			}
			w := math.Pow(1+d2/alpha, -alpha)
			z += w
			if p := pd[i*n+j]; p > 0 {
				s += rho * p * (math.Log(p) - math.Log(w))
			}
		}
	}
	return s + math.Log(z)
}

// relErr returns ‖a − b‖ / ‖b‖.
func relErr(a, b []float64) float64 {
	var num, den float64
	for k := range a {
		num += (a[k] - b[k]) * (a[k] - b[k])
		den += b[k] * b[k]
	}
	return math.Sqrt(num / den)
}

// repulsiveForces returns rep_i / Z (the repulsive part of the gradient
// without the 4) and Z, with the given method.
func repulsiveForces(t testing.TB, y []float64, dims int, alpha, theta float64, m Method, threads int) ([]float64, float64) {
	t.Helper()
	n := len(y) / dims
	p := core.CSR{N: n, Offsets: make([]int64, n+1)}
	e, err := newEngine(p, Params{Dims: dims, Dof: alpha, Theta: theta, Method: m, Threads: threads})
	if err != nil {
		t.Fatal(err)
	}
	z := e.repulsion(y)
	f := make([]float64, len(y))
	for k := range f {
		f[k] = e.rep[k] / z
	}
	return f, z
}

func sameBits(a, b []float64) int {
	if len(a) != len(b) {
		return 0
	}
	for k := range a {
		if math.Float64bits(a[k]) != math.Float64bits(b[k]) {
			return k
		}
	}
	return -1
}

// cloneCSR returns a copy of p with storage of its own.
func cloneCSR(p core.CSR) core.CSR {
	return core.CSR{N: p.N, Offsets: slices.Clone(p.Offsets), Cols: slices.Clone(p.Cols), Vals: slices.Clone(p.Vals)}
}
