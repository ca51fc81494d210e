package core

import (
	"strings"
	"testing"
)

func TestMatrixRow(t *testing.T) {
	m := Matrix{N: 2, D: 3, Data: []float32{1, 2, 3, 4, 5, 6}}
	r := m.Row(1)
	if len(r) != 3 || r[0] != 4 || r[2] != 6 || cap(r) != 3 {
		t.Fatalf("Row(1) = %v (cap %d), want [4 5 6] with cap 3", r, cap(r))
	}
}

func TestGraphValidate(t *testing.T) {
	good := func() Graph {
		return Graph{N: 3, K: 1, Index: []int32{1, 0, 1}, Dist2: []float32{1, 1, 2}}
	}
	cases := []struct {
		name  string
		edit  func(*Graph)
		fault string // "" = valid
	}{
		{"valid", func(*Graph) {}, ""},
		{"short", func(g *Graph) { g.Dist2 = g.Dist2[:2] }, "distances"},
		{"range", func(g *Graph) { g.Index[0] = 3 }, "outside"},
		{"self", func(g *Graph) { g.Index[2] = 2 }, "own neighbour"},
		{"empty", func(g *Graph) { g.N = 0 }, "at least 1"},
	}
	for _, c := range cases {
		g := good()
		c.edit(&g)
		err := g.Validate()
		if c.fault == "" && err != nil || c.fault != "" && (err == nil || !strings.Contains(err.Error(), c.fault)) {
			t.Errorf("%s: Validate() = %v, want fault %q", c.name, err, c.fault)
		}
	}
}

func TestCSRValidate(t *testing.T) {
	// A 3-row symmetric P: p01 = p10 = 0.25, p12 = p21 = 0.25 (sums to 1).
	good := func() CSR {
		return CSR{N: 3, Offsets: []int64{0, 1, 3, 4}, Cols: []int32{1, 0, 2, 1}, Vals: []float32{0.25, 0.25, 0.25, 0.25}}
	}
	cases := []struct {
		name  string
		edit  func(*CSR)
		fault string
	}{
		{"valid", func(*CSR) {}, ""},
		{"offsets", func(p *CSR) { p.Offsets = p.Offsets[:3] }, "row offsets"},
		{"end", func(p *CSR) { p.Offsets[3] = 3 }, "offsets run"},
		{"decreasing", func(p *CSR) { p.Offsets[2] = 0 }, "decreasing"},
		{"range", func(p *CSR) { p.Cols[3] = 5 }, "outside"},
		{"order", func(p *CSR) { p.Cols[1], p.Cols[2] = 2, 0 }, "ascending"},
		{"diagonal", func(p *CSR) { p.Cols[0] = 0 }, "diagonal"},
		{"negative", func(p *CSR) { p.Vals[0] = -0.25 }, "finite"},
		{"sum", func(p *CSR) { p.Vals[0] = 0.5 }, "sum"},
		{"tiny", func(p *CSR) { p.N = 1 }, "at least 2"},
	}
	for _, c := range cases {
		p := good()
		c.edit(&p)
		err := p.Validate()
		if c.fault == "" && err != nil || c.fault != "" && (err == nil || !strings.Contains(err.Error(), c.fault)) {
			t.Errorf("%s: Validate() = %v, want fault %q", c.name, err, c.fault)
		}
	}
}
