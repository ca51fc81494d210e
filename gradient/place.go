package gradient

import (
	"errors"
	"fmt"
	"math"

	"nightjar/internal/par"
)

// Placement of new points into a fixed map (Poličar, Stražar & Zupan,
// "Embedding to reference t-SNE space addresses batch effects in single-cell
// classification", Machine Learning 2023; see the package documentation for
// the objective). A Field holds the reference map's repulsion, built once;
// Place moves each new point on its own, with the reference held fixed.

// PlaceParams configure a Field and the optimisation of Place.
type PlaceParams struct {
	Dims int     // map dimensions: 2 or 3
	Dof  float64 // degrees of freedom α of the kernel, (0, 1e6]; 1 = Cauchy
	// Method is the reference's repulsion: Exact sums every reference point
	// (for small references and tests), Tree is a Barnes–Hut walk per point,
	// Grid interpolates node potentials computed once with the tree (2-D;
	// points outside the grid walk the tree). Auto picks Exact up to
	// AutoExactLimit reference points, else Grid in 2-D and Tree in 3-D.
	Method Method
	// Theta is the Barnes–Hut opening angle of the tree walks, [0, 2].
	Theta float64
	// GridSpacing is the largest node spacing of the grid in map units
	// (0 = placeGridSpacing, 0.25); GridOrder the interpolation nodes per axis
	// (0 = DefaultGridOrder).
	GridSpacing float64
	GridOrder   int
	// Steps is the number of gradient steps per point, ≥ 0.
	Steps int
	// LearningRate η: each step moves a point by update = μ·update −
	// η·gain⊙g, g being the gradient of the point's own cost.
	LearningRate float64
	Momentum     float64 // μ, [0, 1)
	// Exaggeration multiplies the attraction during the first
	// ExaggerationSteps steps, (0, 1e4].
	Exaggeration      float64
	ExaggerationSteps int
	// Gains turns on the per-coordinate delta-bar-delta gains of the
	// optimiser (with MinGain 0.01); off, every gain is 1.
	Gains bool
	// Threads is the number of goroutines; below 1 means 1. Results do not
	// depend on it.
	Threads int
}

// Validate checks p; errors name the parameter.
func (p PlaceParams) Validate() error {
	switch {
	case p.Dims != 2 && p.Dims != 3:
		return fmt.Errorf("placement: dims = %d, want 2 or 3", p.Dims)
	case !(p.Dof > 0 && p.Dof <= 1e6):
		return fmt.Errorf("placement: degrees of freedom %g outside (0, 1e6]", p.Dof)
	case !(p.Theta >= 0 && p.Theta <= 2):
		return fmt.Errorf("placement: theta %g outside [0, 2]", p.Theta)
	case p.Method == Grid && p.Dims != 2:
		return errors.New("placement: the grid repulsion needs a 2-D map")
	case p.Steps < 0 || p.ExaggerationSteps < 0:
		return fmt.Errorf("placement: steps (%d) and exaggeration steps (%d) must be ≥ 0", p.Steps, p.ExaggerationSteps)
	case !(p.LearningRate >= 0) || math.IsInf(p.LearningRate, 0):
		return fmt.Errorf("placement: learning rate %g must be finite and ≥ 0", p.LearningRate)
	case !(p.Momentum >= 0 && p.Momentum < 1):
		return fmt.Errorf("placement: momentum %g outside [0, 1)", p.Momentum)
	case !(p.Exaggeration > 0 && p.Exaggeration <= 1e4):
		return fmt.Errorf("placement: exaggeration %g outside (0, 1e4]", p.Exaggeration)
	case p.GridSpacing < 0 || p.GridSpacing > 10 || p.GridOrder < 0 || p.GridOrder > 8:
		return fmt.Errorf("placement: grid spacing %g or order %d out of range", p.GridSpacing, p.GridOrder)
	}
	return nil
}

// Field is the repulsion of a fixed reference map of N points, evaluated at
// any point q of the map's space:
//
//	Z(q) = Σ_l w(q, y_l),   F(q) = Σ_l w(q, y_l)^(1+1/α) (q − y_l).
//
// It is built once (NewField) and only read afterwards, so one Field serves
// any number of goroutines.
type Field struct {
	n, dims int
	alpha   float64
	theta2  float64
	method  Method
	ref     []float64 // the reference map, N×dims (Exact)
	tree    *bhTree   // Tree, and Grid outside the grid
	grid    *nodeGrid // Grid
	params  PlaceParams
}

// NewField builds the field of the reference map ref (N×dims, row-major,
// N ≥ 1, finite). It returns an error for invalid params or sizes.
func NewField(ref []float64, params PlaceParams) (*Field, error) {
	if err := params.Validate(); err != nil {
		return nil, err
	}
	d := params.Dims
	if len(ref) == 0 || len(ref)%d != 0 {
		return nil, fmt.Errorf("placement: reference map of %d values is not N×%d with N ≥ 1", len(ref), d)
	}
	if err := allFinite("reference map", ref); err != nil {
		return nil, err
	}
	n := len(ref) / d
	f := &Field{n: n, dims: d, alpha: params.Dof, theta2: params.Theta * params.Theta, method: params.Method, ref: ref, params: params}
	if f.method == Auto {
		switch {
		case n <= AutoExactLimit:
			f.method = Exact
		case d == 2:
			f.method = Grid
		default:
			f.method = Tree
		}
	}
	if f.method == Exact {
		return f, nil
	}
	f.tree = newBHTree(n, d, 1)
	f.tree.build(ref)
	if f.method == Grid {
		f.grid = newNodeGrid(f, params)
	}
	return f, nil
}

// Method returns the repulsion method in use (Auto resolved).
func (f *Field) Method() Method { return f.method }

// N returns the number of reference points.
func (f *Field) N() int { return f.n }

// walker is one goroutine's scratch for evaluating a Field.
type walker struct {
	f     *Field
	stack []int32
}

func (f *Field) walker() *walker { return &walker{f: f, stack: make([]int32, 0, 256)} }

// at returns Z(q) and writes F(q) into force (len dims).
func (w *walker) at(q, force []float64) float64 {
	f := w.f
	switch f.method {
	case Exact:
		return f.exactAt(q, force)
	case Grid:
		if z, ok := f.grid.at(q, force); ok {
			return z
		}
	}
	var z float64
	z, w.stack = f.tree.pointField(q, f.alpha, f.theta2, w.stack, force)
	return z
}

// exactAt sums every reference point.
func (f *Field) exactAt(q, force []float64) float64 {
	d, invA := f.dims, 1/f.alpha
	var z float64
	var fs [3]float64
	for l := 0; l < f.n; l++ {
		y := f.ref[l*d : l*d+d]
		var d2 float64
		var diff [3]float64
		for c := 0; c < d; c++ {
			diff[c] = q[c] - y[c]
			d2 += diff[c] * diff[c]
		}
		wl, wq := kernel(d2, f.alpha, invA)
		z += wl
		for c := 0; c < d; c++ {
			fs[c] += wq * diff[c]
		}
	}
	copy(force, fs[:d])
	return z
}

// pointField walks the tree for a point q that is not one of its points:
// a cell is taken as one body at its centre of mass when its size² <
// θ²·‖q − centre‖² (the per-point test of van der Maaten 2014), leaves are
// summed point by point. It returns Z(q), writes F(q) into force, and
// returns the (grown) stack for reuse.
func (t *bhTree) pointField(q []float64, alpha, theta2 float64, stack []int32, force []float64) (float64, []int32) {
	d := t.dims
	invA := 1 / alpha
	var z float64
	var fs [3]float64
	stack = append(stack[:0], 0)
	for len(stack) > 0 {
		ni := stack[len(stack)-1]
		stack = stack[:len(stack)-1]
		nd := &t.nodes[ni]
		var d2 float64
		var diff [3]float64
		for c := 0; c < d; c++ {
			diff[c] = q[c] - nd.com[c]
			d2 += diff[c] * diff[c]
		}
		if nd.width2 < theta2*d2 {
			w, wq := kernel(d2, alpha, invA)
			cnt := float64(nd.count)
			z += cnt * w
			for c := 0; c < d; c++ {
				fs[c] += cnt * wq * diff[c]
			}
			continue
		}
		if nd.nchild > 0 {
			for c := nd.child; c < nd.child+nd.nchild; c++ {
				stack = append(stack, c)
			}
			continue
		}
		for p := int(nd.start); p < int(nd.start+nd.count); p++ {
			var pd2 float64
			for c := 0; c < d; c++ {
				diff[c] = q[c] - t.ys[p*d+c]
				pd2 += diff[c] * diff[c]
			}
			w, wq := kernel(pd2, alpha, invA)
			z += w
			for c := 0; c < d; c++ {
				fs[c] += wq * diff[c]
			}
		}
	}
	copy(force, fs[:d])
	return z, stack
}

// nodeGrid holds Z and F at the nodes of an equispaced square grid over the
// reference map and a margin around it, computed once with the tree at
// half the opening angle of the walks (the nodes are few); a
// point inside is evaluated by Lagrange interpolation of the node values
// over the p×p nodes around it (the stencil and weights of the FFT grid).
type nodeGrid struct {
	g   *fftGrid  // geometry, stencil and Lagrange weights
	val []float64 // m×m nodes × 3 values (Z, Fx, Fy)
}

// placeGridSpacing is the default node spacing of the placement's node grid.
// It is finer than the optimiser's (DefaultGridSpacing): its node values are
// computed once, by the tree, so fine nodes cost little there.
const placeGridSpacing = 0.25

// nodeGridMargin is the margin added on every side of the reference's
// bounding square, as a fraction of its side: new points lie among their
// reference neighbours, and the few pushed out beyond it walk the tree.
const nodeGridMargin = 0.05

// newNodeGrid computes the node values of f's 2-D reference map.
func newNodeGrid(f *Field, params PlaceParams) *nodeGrid {
	spacing := params.GridSpacing
	if spacing == 0 {
		spacing = placeGridSpacing
	}
	g, _ := newFFTGrid(0, Params{GridOrder: params.GridOrder, GridSpacing: spacing})
	g.maxNodes = gridMaxNodes
	lo := [2]float64{math.Inf(1), math.Inf(1)}
	hi := [2]float64{math.Inf(-1), math.Inf(-1)}
	for i := 0; i < f.n; i++ {
		for c := 0; c < 2; c++ {
			lo[c] = math.Min(lo[c], f.ref[2*i+c])
			hi[c] = math.Max(hi[c], f.ref[2*i+c])
		}
	}
	L := math.Max(math.Max(hi[0]-lo[0], hi[1]-lo[1]), 1e-3)
	L *= 1 + 2*nodeGridMargin
	delta := g.spacing
	m := int(math.Ceil(L/delta)) + g.p + 2
	if m > g.maxNodes {
		m = g.maxNodes
		delta = L / float64(m-g.p-2)
	}
	g.m, g.delta = m, delta
	g.lo = [2]float64{(lo[0]+hi[0])/2 - float64(m-1)*delta/2, (lo[1]+hi[1])/2 - float64(m-1)*delta/2}
	ng := &nodeGrid{g: g, val: make([]float64, 3*m*m)}
	threads := max(1, params.Threads)
	walkers := make([]*walker, threads)
	par.Blocks(m, 1, threads, func(w, r, _, _ int) {
		if walkers[w] == nil {
			walkers[w] = &walker{f: f, stack: make([]int32, 0, 256)}
		}
		wk := walkers[w]
		var q, force [2]float64
		q[1] = g.lo[1] + float64(r)*delta
		for a := 0; a < m; a++ {
			q[0] = g.lo[0] + float64(a)*delta
			var z float64
			z, wk.stack = f.tree.pointField(q[:], f.alpha, f.theta2/4, wk.stack, force[:])
			v := ng.val[3*(r*m+a):]
			v[0], v[1], v[2] = z, force[0], force[1]
		}
	})
	return ng
}

// at interpolates Z and F at q; ok is false when q's stencil leaves the grid.
func (ng *nodeGrid) at(q, force []float64) (float64, bool) {
	g := ng.g
	p, m := g.p, g.m
	inv := 1 / g.delta
	sx, sy := (q[0]-g.lo[0])*inv, (q[1]-g.lo[1])*inv
	bx, ux, okx := ng.base(sx)
	by, uy, oky := ng.base(sy)
	if !okx || !oky {
		return 0, false
	}
	var wx, wy [8]float64
	g.lagrange(ux, wx[:p])
	g.lagrange(uy, wy[:p])
	var z, fx, fy float64
	for ky := 0; ky < p; ky++ {
		row := ng.val[3*((by+ky)*m+bx):]
		var rz, rx, ry float64
		for kx := 0; kx < p; kx++ {
			rz += wx[kx] * row[3*kx]
			rx += wx[kx] * row[3*kx+1]
			ry += wx[kx] * row[3*kx+2]
		}
		z += wy[ky] * rz
		fx += wy[ky] * rx
		fy += wy[ky] * ry
	}
	force[0], force[1] = fx, fy
	return z, true
}

// base returns the first stencil node for s (node units) and s relative to
// it, centred as fftGrid.stencil does, and whether the stencil fits.
func (ng *nodeGrid) base(s float64) (int, float64, bool) {
	p := ng.g.p
	if !(s >= 0) || s > float64(ng.g.m) {
		return 0, 0, false
	}
	var b int
	if p%2 == 0 {
		b = int(math.Floor(s)) - (p/2 - 1)
	} else {
		b = int(math.Floor(s+0.5)) - (p-1)/2
	}
	if b < 0 || b > ng.g.m-p {
		return 0, 0, false
	}
	return b, s - float64(b), true
}

// placeBlock is the number of points per unit of parallel work in Place.
const placeBlock = 256

// Place optimises the positions of n new points, each on its own, against
// the fixed reference map of f. Point i starts at y[i·dims:(i+1)·dims] and
// ends there; its reference neighbours are nb[i·k:(i+1)·k] (indices into the
// reference map) with conditional probabilities p[i·k:(i+1)·k] summing to 1.
// Its cost is the KL divergence of its own row,
//
//	C_i = Σ_j p_j ln(p_j / q_j),   q_j = w(y_i, y_j) / Z(y_i),
//
// whose gradient is 2 Σ_j p_j w_j^(1/α)(y_i − y_j) − 2 F(y_i)/Z(y_i); during
// the first ExaggerationSteps steps the attraction (first sum) is
// multiplied by Exaggeration. A point's result depends only on its own
// inputs and the reference, never on the other points placed with it, and
// not on Threads.
//
// cost0 and cost1, when non-nil (length n), receive each point's C_i (with
// the field's Z) at its start and at its end. Place returns an error for
// mismatched sizes, an index outside the reference or a non-finite start.
func (f *Field) Place(y []float64, nb []int32, p []float64, k int, cost0, cost1 []float64) error {
	d := f.dims
	if k < 1 || len(y)%d != 0 || len(nb) != len(y)/d*k || len(p) != len(nb) {
		return fmt.Errorf("placement: sizes do not match (y %d values, %d neighbours, %d probabilities, k = %d)", len(y), len(nb), len(p), k)
	}
	n := len(y) / d
	if (cost0 != nil && len(cost0) != n) || (cost1 != nil && len(cost1) != n) {
		return fmt.Errorf("placement: cost slices must have %d values", n)
	}
	for _, j := range nb {
		if j < 0 || int(j) >= f.n {
			return fmt.Errorf("placement: neighbour %d outside the %d reference points", j, f.n)
		}
	}
	if err := allFinite("placement start", y); err != nil {
		return err
	}
	threads := max(1, f.params.Threads)
	walkers := make([]*walker, threads)
	par.Blocks(n, placeBlock, threads, func(w, _, lo, hi int) {
		if walkers[w] == nil {
			walkers[w] = f.walker()
		}
		for i := lo; i < hi; i++ {
			row, nbi, pi := y[i*d:(i+1)*d], nb[i*k:(i+1)*k], p[i*k:(i+1)*k]
			if cost0 != nil {
				cost0[i] = walkers[w].cost(row, nbi, pi)
			}
			walkers[w].optimise(row, nbi, pi)
			if cost1 != nil {
				cost1[i] = walkers[w].cost(row, nbi, pi)
			}
		}
	})
	return nil
}

// optimise runs the steps of one point.
func (w *walker) optimise(q []float64, nb []int32, p []float64) {
	prm := w.f.params
	d := w.f.dims
	var update, grad [3]float64
	gains := [3]float64{1, 1, 1}
	for t := 0; t < prm.Steps; t++ {
		exag := 1.0
		if t < prm.ExaggerationSteps {
			exag = prm.Exaggeration
		}
		w.gradient(q, nb, p, exag, grad[:d])
		for c := 0; c < d; c++ {
			if prm.Gains {
				if (grad[c] > 0) != (update[c] > 0) {
					gains[c] += 0.2
				} else {
					gains[c] = math.Max(gains[c]*0.8, 0.01)
				}
			}
			update[c] = prm.Momentum*update[c] - prm.LearningRate*gains[c]*grad[c]
			q[c] += update[c]
		}
	}
}

// gradient writes the gradient of the point's cost at q, with the
// attraction multiplied by exag, and returns Z(q).
func (w *walker) gradient(q []float64, nb []int32, p []float64, exag float64, grad []float64) float64 {
	f := w.f
	d, alpha := f.dims, f.alpha
	invA := 1 / alpha
	var force, attr [3]float64
	z := w.at(q, force[:d])
	for j, l := range nb {
		y := f.ref[int(l)*d : int(l)*d+d]
		var d2 float64
		var diff [3]float64
		for c := 0; c < d; c++ {
			diff[c] = q[c] - y[c]
			d2 += diff[c] * diff[c]
		}
		s := p[j] / (1 + d2*invA) // p_j w_j^(1/α)
		for c := 0; c < d; c++ {
			attr[c] += s * diff[c]
		}
	}
	for c := 0; c < d; c++ {
		grad[c] = 2 * (exag*attr[c] - force[c]/z)
	}
	return z
}

// cost returns C_i = Σ p_j ln p_j − Σ p_j ln w_j + (Σ p_j) ln Z at q.
func (w *walker) cost(q []float64, nb []int32, p []float64) float64 {
	f := w.f
	d, alpha := f.dims, f.alpha
	var force [3]float64
	z := w.at(q, force[:d])
	var c, sum float64
	for j, l := range nb {
		y := f.ref[int(l)*d : int(l)*d+d]
		var d2 float64
		for a := 0; a < d; a++ {
			diff := q[a] - y[a]
			d2 += diff * diff
		}
		if p[j] > 0 {
			c += p[j] * math.Log(p[j])
		}
		c += p[j] * alpha * math.Log1p(d2/alpha) // −p ln w
		sum += p[j]
	}
	return c + sum*math.Log(z)
}

// PointCost returns the cost C_i of one point at q (len dims) with reference
// neighbours nb and probabilities p (see Place), with the field's Z.
func (f *Field) PointCost(q []float64, nb []int32, p []float64) float64 {
	return f.walker().cost(q, nb, p)
}

// PointGradient writes the gradient of C_i at q into grad (len dims), with
// the attraction multiplied by exag, and returns Z(q) (see Place).
func (f *Field) PointGradient(q []float64, nb []int32, p []float64, exag float64, grad []float64) float64 {
	return f.walker().gradient(q, nb, p, exag, grad)
}

// At returns Z(q) and writes F(q) into force (len dims); see Field.
func (f *Field) At(q, force []float64) float64 { return f.walker().at(q, force) }
