package main

import (
	"fmt"

	"nightjar/checkpoint"
	"nightjar/gradient"
	"nightjar/knn"
)

// The run directory's binary files are checkpoint containers; these functions
// map the graph, P and the optimiser state to named sections and back.

func graphSections(g *knn.Graph, report []byte) []checkpoint.Section {
	return []checkpoint.Section{
		{Name: "report", Data: report},
		{Name: "shape", Data: checkpoint.Int64Bytes([]int64{int64(g.N), int64(g.K)})},
		{Name: "index", Data: checkpoint.View(g.Index)},
		{Name: "dist2", Data: checkpoint.View(g.Dist2)},
	}
}

func csrSections(p *knn.CSR, report []byte) []checkpoint.Section {
	return []checkpoint.Section{
		{Name: "report", Data: report},
		{Name: "shape", Data: checkpoint.Int64Bytes([]int64{int64(p.N), int64(len(p.Vals))})},
		{Name: "offsets", Data: checkpoint.View(p.Offsets)},
		{Name: "cols", Data: checkpoint.View(p.Cols)},
		{Name: "vals", Data: checkpoint.View(p.Vals)},
	}
}

// graphFromSections rebuilds a neighbour graph and checks it was made for n
// rows and k neighbours.
func graphFromSections(secs []checkpoint.Section, n, k int) (*knn.Graph, error) {
	shape, err := int64s(secs, "shape")
	if err != nil {
		return nil, err
	}
	if len(shape) != 2 || shape[0] != int64(n) || shape[1] != int64(k) {
		return nil, fmt.Errorf("neighbour graph was made for another table or k (shape %v, want [%d %d])", shape, n, k)
	}
	g := &knn.Graph{N: n, K: k}
	if g.Index, err = decoded(secs, "index", checkpoint.BytesInt32); err != nil {
		return nil, err
	}
	if g.Dist2, err = decoded(secs, "dist2", checkpoint.BytesFloat32); err != nil {
		return nil, err
	}
	if len(g.Index) != n*k || len(g.Dist2) != n*k {
		return nil, fmt.Errorf("neighbour graph: inconsistent sizes")
	}
	for _, c := range g.Index {
		if c < 0 || int(c) >= n {
			return nil, fmt.Errorf("neighbour graph: row %d out of range", c)
		}
	}
	return g, nil
}

// csrFromSections rebuilds P and checks it is consistent and made for n rows.
func csrFromSections(secs []checkpoint.Section, n int) (*knn.CSR, error) {
	var p knn.CSR
	shape, err := int64s(secs, "shape")
	if err != nil {
		return nil, err
	}
	if len(shape) != 2 || shape[0] != int64(n) {
		return nil, fmt.Errorf("affinities were made for another table (shape %v, table has %d rows)", shape, n)
	}
	p.N = n
	if p.Offsets, err = int64s(secs, "offsets"); err != nil {
		return nil, err
	}
	if p.Cols, err = decoded(secs, "cols", checkpoint.BytesInt32); err != nil {
		return nil, err
	}
	if p.Vals, err = decoded(secs, "vals", checkpoint.BytesFloat32); err != nil {
		return nil, err
	}
	if len(p.Offsets) != n+1 || p.Offsets[0] != 0 || p.Offsets[n] != int64(len(p.Vals)) || len(p.Cols) != len(p.Vals) {
		return nil, fmt.Errorf("affinities: inconsistent sizes")
	}
	for i := 0; i < n; i++ {
		if p.Offsets[i] > p.Offsets[i+1] {
			return nil, fmt.Errorf("affinities: row offsets decrease at row %d", i)
		}
	}
	for _, c := range p.Cols {
		if c < 0 || int(c) >= n {
			return nil, fmt.Errorf("affinities: column %d out of range", c)
		}
	}
	return &p, nil
}

// decoded looks up section name and decodes it with decode (one of the
// checkpoint.BytesX functions).
func decoded[T any](secs []checkpoint.Section, name string, decode func([]byte) ([]T, error)) ([]T, error) {
	b, err := checkpoint.Lookup(secs, name)
	if err != nil {
		return nil, err
	}
	return decode(b)
}

func int64s(secs []checkpoint.Section, name string) ([]int64, error) {
	return decoded(secs, name, checkpoint.BytesInt64)
}

func float64s(secs []checkpoint.Section, name string) ([]float64, error) {
	return decoded(secs, name, checkpoint.BytesFloat64)
}

// stateSections stores the optimiser state. The optimiser itself draws no
// random numbers; the seed is stored so a state says which run it belongs to.
func stateSections(st gradient.State, seed uint64) []checkpoint.Section {
	return []checkpoint.Section{
		{Name: "iteration", Data: checkpoint.Int64Bytes([]int64{int64(st.Iteration)})},
		{Name: "seed", Data: checkpoint.Uint64Bytes([]uint64{seed})},
		{Name: "kl", Data: checkpoint.Float64Bytes([]float64{st.KL})},
		{Name: "y", Data: checkpoint.View(st.Y)},
		{Name: "update", Data: checkpoint.View(st.Update)},
		{Name: "gains", Data: checkpoint.View(st.Gains)},
	}
}

func stateFromSections(secs []checkpoint.Section, n, dims int) (gradient.State, error) {
	var st gradient.State
	it, err := int64s(secs, "iteration")
	if err != nil {
		return st, err
	}
	kl, err := float64s(secs, "kl")
	if err != nil {
		return st, err
	}
	if len(it) != 1 || len(kl) != 1 {
		return st, fmt.Errorf("state: malformed iteration or kl section")
	}
	st.Iteration, st.KL = int(it[0]), kl[0]
	for _, f := range []struct {
		name string
		dst  *[]float64
	}{{"y", &st.Y}, {"update", &st.Update}, {"gains", &st.Gains}} {
		v, err := float64s(secs, f.name)
		if err != nil {
			return st, err
		}
		if len(v) != n*dims {
			return st, fmt.Errorf("state: section %q has %d values, want %d×%d", f.name, len(v), n, dims)
		}
		*f.dst = v
	}
	return st, nil
}
