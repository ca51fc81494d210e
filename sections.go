package nightjar

import (
	"fmt"

	"nightjar/checkpoint"
	"nightjar/gradient"
)

// A run directory's binary files are checkpoint containers (see the
// checkpoint package for the byte layout). These functions map the
// neighbour graph, the affinities P and the optimiser state to named
// sections and back, checking on the way back that what was read fits the
// table it is for.

func graphSections(g *Graph, report []byte) []checkpoint.Section {
	return []checkpoint.Section{
		{Name: "report", Data: report},
		{Name: "shape", Data: checkpoint.EncodeValues([]int64{int64(g.N), int64(g.K)})},
		{Name: "index", Data: checkpoint.View(g.Index)},
		{Name: "dist2", Data: checkpoint.View(g.Dist2)},
	}
}

func csrSections(p *CSR, report []byte) []checkpoint.Section {
	return []checkpoint.Section{
		{Name: "report", Data: report},
		{Name: "shape", Data: checkpoint.EncodeValues([]int64{int64(p.N), int64(len(p.Vals))})},
		{Name: "offsets", Data: checkpoint.View(p.Offsets)},
		{Name: "cols", Data: checkpoint.View(p.Cols)},
		{Name: "vals", Data: checkpoint.View(p.Vals)},
	}
}

// graphFromSections rebuilds a neighbour graph and checks it was made for n
// rows and k neighbours.
func graphFromSections(secs []checkpoint.Section, n, k int) (*Graph, error) {
	shape, err := checkpoint.SectionValues[int64](secs, "shape")
	if err != nil {
		return nil, err
	}
	if len(shape) != 2 || shape[0] != int64(n) || shape[1] != int64(k) {
		return nil, fmt.Errorf("neighbour graph was made for another table or k (shape %v, want [%d %d])", shape, n, k)
	}
	g := &Graph{N: n, K: k}
	if g.Index, err = checkpoint.SharedSectionValues[int32](secs, "index"); err != nil {
		return nil, err
	}
	if g.Dist2, err = checkpoint.SharedSectionValues[float32](secs, "dist2"); err != nil {
		return nil, err
	}
	if err := g.Validate(); err != nil {
		return nil, err
	}
	return g, nil
}

// csrFromSections rebuilds P and checks its layout and that it was made for
// n rows.
func csrFromSections(secs []checkpoint.Section, n int) (*CSR, error) {
	shape, err := checkpoint.SectionValues[int64](secs, "shape")
	if err != nil {
		return nil, err
	}
	if len(shape) != 2 || shape[0] != int64(n) {
		return nil, fmt.Errorf("affinities were made for another table (shape %v, table has %d rows)", shape, n)
	}
	p := &CSR{N: n}
	if p.Offsets, err = checkpoint.SharedSectionValues[int64](secs, "offsets"); err != nil {
		return nil, err
	}
	if p.Cols, err = checkpoint.SharedSectionValues[int32](secs, "cols"); err != nil {
		return nil, err
	}
	if p.Vals, err = checkpoint.SharedSectionValues[float32](secs, "vals"); err != nil {
		return nil, err
	}
	if err := p.ValidateLayout(); err != nil {
		return nil, err
	}
	return p, nil
}

// stateSections stores the optimiser state. The optimiser itself draws no
// random numbers; the seed is stored so a state says which run it belongs to.
func stateSections(st gradient.State, seed uint64) []checkpoint.Section {
	return []checkpoint.Section{
		{Name: "iteration", Data: checkpoint.EncodeValues([]int64{int64(st.Iteration)})},
		{Name: "seed", Data: checkpoint.EncodeValues([]uint64{seed})},
		{Name: "kl", Data: checkpoint.EncodeValues([]float64{st.KL})},
		{Name: "y", Data: checkpoint.View(st.Y)},
		{Name: "update", Data: checkpoint.View(st.Update)},
		{Name: "gains", Data: checkpoint.View(st.Gains)},
	}
}

// stateFromSections rebuilds an optimiser state of n rows in dims dimensions.
func stateFromSections(secs []checkpoint.Section, n, dims int) (gradient.State, error) {
	var st gradient.State
	it, err := checkpoint.SectionValues[int64](secs, "iteration")
	if err != nil {
		return st, err
	}
	kl, err := checkpoint.SectionValues[float64](secs, "kl")
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
		v, err := checkpoint.SharedSectionValues[float64](secs, f.name)
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
