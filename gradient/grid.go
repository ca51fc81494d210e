package gradient

import (
	"math"

	"gonum.org/v1/gonum/dsp/fourier"

	"nightjar/internal/par"
)

// FFT-interpolated repulsion for 2-D maps with α = 1 (Linderman et al. 2019,
// Nature Methods 16; see the package documentation).
//
// The repulsion needs, for every point i, F_i = Σ_j K2(y_i − y_j)(y_i − y_j)
// with K2 = 1/(1+d²)², and the total Z = Σ_{i≠j} K1(y_i − y_j) with
// K1 = 1/(1+d²). A square of M×M equispaced nodes with spacing δ covers the
// map. Each point spreads a unit charge onto the p×p nodes around it
// (p = GridOrder) with Lagrange weights; the node-to-node sums with the
// vector kernel (Kx, Ky) = K2(d)·(d_x, d_y) are a 2-D Toeplitz convolution
// done by FFT on a 2M×2M zero-padded grid (gonum dsp/fourier: real FFTs
// along rows, complex FFTs along columns); the two node potentials are
// interpolated back to the points with the same weights. Kx(0) = 0, so a
// point exerts no force on itself. (Splitting F_i as
// y_i Σ_j K2 − Σ_j K2 y_j instead needs three charges and loses digits to
// cancellation far from the centre; measured, it is about twice as accurate
// on the test map below but costs twice the FFTs.)
//
// The p nodes of a point are centred on it: for even p the point lies
// between the two middle nodes, for odd p within half a spacing of the
// middle one. Interpolation error bounds carry the factor max|Π_k(u − t_k)|
// over the point's possible positions u; centred, it is 0.56 δ⁴ for p = 4
// (9/16), against 6.6 δ⁴ when each point uses the fixed nodes of the
// interval it falls in, which puts points outside the span of their nodes
// near interval edges. Measured on 10,000 points (TestGridAccuracy), the
// force error at p = 3, δ = 1/3 is 5.5e-3 with centred nodes and the direct
// kernel, against 1.1e-2 with fixed interval nodes and three charges.
//
// Z needs no per-point potential: Σ_i Σ_j K̃1(y_i, y_j) = Σ_a c(a)(K1 ⊛ c)(a)
// over the nodes, which by Parseval is (1/S) Σ_f |Ĉ(f)|² K̂1(f) (S = (2M)²
// and K̂1 real because the circulant kernel is even); the N self pairs,
// K1(0) = 1 each, are subtracted. That saves one inverse transform.
//
// Determinism: points are ordered by the first node row of their stencil
// with a stable counting sort; spreading runs over blocks of node rows,
// first the even blocks then the odd ones, so that blocks running at the same
// time never write the same node and every node receives its terms in a
// fixed order; FFT rows and columns are independent, Z is summed per fixed
// block of columns and the block sums added in order, and the gather writes
// per point, so results do not depend on the thread count.
//
// The kernel spectra depend only on M and δ. Both are kept on a discrete set
// (δ = GridSpacing once the map is wider than GridMin·GridSpacing, otherwise
// width/GridMin rounded up to a power of 2^(1/8); M rounded up to an
// FFT-friendly value), so the spectra are recomputed only when they change.

// Defaults of the grid (Params.GridMin, GridOrder, GridSpacing), chosen from
// the accuracy measured in TestGridAccuracy (force error 4e-3 at δ = 0.4,
// about Barnes–Hut's at θ = 0.5) and the speed measured side by side in
// BenchmarkGridSettings and, on real maps, BenchmarkSavedRun: the transforms
// cost about (width/δ)² log(width/δ), so δ = 0.4 needs 2.6 times fewer nodes
// than δ = 0.25. The minimum size only matters while the map is narrower
// than GridMin·δ (early in a run, or a small table): 64 nodes keep such maps
// finer than δ without the fixed cost of a larger grid.
const (
	DefaultGridMin     = 64  // minimum nodes per axis
	DefaultGridOrder   = 5   // interpolation nodes per axis around a point
	DefaultGridSpacing = 0.4 // largest node spacing, map units
	gridColBlock       = 8   // FFT columns per parallel block (also the Z reduction block)
	gridRowBlock       = 8   // FFT rows per parallel block
	gridSpreadRows     = 8   // node rows per spreading block (≥ GridOrder − 1)
)

// gridMaxNodes is the default cap on the nodes per axis, M (fftGrid.maxNodes):
// the grid's memory is about 176·M² bytes (0.74 GB at M = 2048; 0.1 GB at
// M = 760, about what a 10^6-row map needs). A map wider than
// maxNodes × GridSpacing gets a wider spacing, and so a coarser
// approximation.
const gridMaxNodes = 2048

type fftWorker struct {
	rfft *fourier.FFT
	cfft *fourier.CmplxFFT
	row  []float64
	cols []complex128 // 3 × gridColBlock × m2 gathered columns
	tmp  []complex128 // m2
}

type fftGrid struct {
	n, p, minNodes, threads int
	maxNodes                int     // cap on the nodes per axis: gridMaxNodes; tests lower it to reach the cap on small maps
	spacing                 float64 // largest node spacing

	m, m2       int // nodes per axis, padded FFT size
	lo          [2]float64
	delta       float64 // node spacing in use
	kernelStale bool    // kernel spectra must be recomputed

	denom []float64 // Lagrange denominators Π_{l≠k}(k − l)

	base     []int32   // first stencil node of each point, row·m + column, in the order of order
	wx, wy   []float64 // Lagrange weights, n×p, in the order of order
	order    []int32   // points sorted (stably) by stencil row
	rowStart []int     // m+1 offsets into order

	charge []float64       // m×m nodes
	spec   [3][]complex128 // m2 rows × (m+1) columns: charges, then the two products
	ks     [3][]float64    // spectra of K1 (real parts), Kx, Ky (imaginary parts), m2 × (m+1)
	pot    []float64       // m×m nodes × 2 potentials (Kx ⊛ c, Ky ⊛ c), interleaved

	workers []fftWorker
	zBlock  []float64
}

func newFFTGrid(n int, params Params) (*fftGrid, error) {
	g := &fftGrid{
		n: n, p: params.GridOrder, minNodes: params.GridMin, maxNodes: gridMaxNodes,
		spacing: params.GridSpacing, threads: params.threads(),
	}
	if g.p == 0 {
		g.p = DefaultGridOrder
	}
	if g.minNodes == 0 {
		g.minNodes = DefaultGridMin
	}
	if g.spacing == 0 {
		g.spacing = DefaultGridSpacing
	}
	p := g.p
	g.denom = make([]float64, p)
	for k := range p {
		d := 1.0
		for l := range p {
			if l != k {
				d *= float64(k - l)
			}
		}
		g.denom[k] = d
	}
	g.base = make([]int32, n)
	g.wx, g.wy = make([]float64, n*p), make([]float64, n*p)
	g.order = make([]int32, n)
	g.workers = make([]fftWorker, g.threads)
	return g, nil
}

// smooth reports whether x has no prime factor above 5.
func smooth(x int) bool {
	for _, f := range []int{2, 3, 5} {
		for x%f == 0 {
			x /= f
		}
	}
	return x == 1
}

// lagrange writes the p interpolation weights at u for nodes at 0, 1, …, p−1.
//
// The default order 5 has its own straight-line form, four times faster than
// the loop (it is computed for every point twice a step); it multiplies the
// same factors in the same order as the loop, so the weights have the same
// bits (TestLagrangeFive).
func (g *fftGrid) lagrange(u float64, w []float64) {
	if g.p == 5 {
		lagrange5(u, g.denom, w)
		return
	}
	lagrangeLoop(u, g.denom, w)
}

// lagrange5 is lagrangeLoop for p = 5: each product runs over l = 0…4 in
// order, skipping l = k, and shares its leading factors with the others.
func lagrange5(u float64, denom, w []float64) {
	_, _ = denom[4], w[4]
	t0, t1, t2, t3, t4 := u, u-1, u-2, u-3, u-4
	t01 := t0 * t1
	t012 := t01 * t2
	w[0] = t1 * t2 * t3 * t4 / denom[0]
	w[1] = t0 * t2 * t3 * t4 / denom[1]
	w[2] = t01 * t3 * t4 / denom[2]
	w[3] = t012 * t4 / denom[3]
	w[4] = t012 * t3 / denom[4]
}

// lagrangeLoop writes the len(w) interpolation weights at u for nodes at
// 0, 1, …, len(w)−1: w_k = Π_{l≠k} (u − l) / denom_k.
func lagrangeLoop(u float64, denom, w []float64) {
	p := len(w)
	for k := range p {
		num := 1.0
		for l := range p {
			if l != k {
				num *= u - float64(l)
			}
		}
		w[k] = num / denom[k]
	}
}

// stencil returns the first of the p nodes around s (a position in node
// units) and the position of s relative to that node.
func (g *fftGrid) stencil(s float64) (int, float64) {
	var b int
	if g.p%2 == 0 {
		b = int(math.Floor(s)) - (g.p/2 - 1)
	} else {
		b = int(math.Floor(s+0.5)) - (g.p-1)/2
	}
	b = max(0, min(b, g.m-g.p))
	return b, s - float64(b)
}

// setup fixes the grid geometry for y and sizes the buffers.
func (g *fftGrid) setup(y []float64) {
	xmin, xmax, ymin, ymax := bounds(y, g.n, g.threads)
	L := math.Max(xmax-xmin, ymax-ymin)
	if L < 1e-3 {
		L = 1e-3
	}
	centre := [2]float64{(xmin + xmax) / 2, (ymin + ymax) / 2}
	delta := g.spacing
	if L < float64(g.minNodes)*delta {
		delta = math.Exp2(math.Ceil(8*math.Log2(L/float64(g.minNodes))) / 8)
	}
	// Nodes to span L plus a margin of p/2 + 1 spacings on each side, so
	// every stencil fits.
	m := int(math.Ceil(L/delta)) + g.p + 2
	if m > g.maxNodes {
		m = g.maxNodes
		delta = L / float64(m-g.p-2)
	}
	for !smooth(2 * m) {
		m++
	}
	g.lo = [2]float64{centre[0] - float64(m-1)*delta/2, centre[1] - float64(m-1)*delta/2}
	g.resize(m, delta)
}

// bounds returns the smallest and largest of each coordinate of the first n
// points of the 2-D map y. The blocks run in parallel (at 10^7 points the
// loop alone took a tenth of a second a step on one core); minima and
// maxima do not depend on the order they are combined in, so the result
// is the same for any thread count.
func bounds(y []float64, n, threads int) (xmin, xmax, ymin, ymax float64) {
	parts := par.Map(n, rowBlock*16, threads, func() func(lo, hi int) [4]float64 {
		return func(lo, hi int) [4]float64 {
			b := [4]float64{math.Inf(1), math.Inf(-1), math.Inf(1), math.Inf(-1)}
			for i := lo; i < hi; i++ {
				b[0], b[1] = math.Min(b[0], y[2*i]), math.Max(b[1], y[2*i])
				b[2], b[3] = math.Min(b[2], y[2*i+1]), math.Max(b[3], y[2*i+1])
			}
			return b
		}
	})
	xmin, xmax, ymin, ymax = math.Inf(1), math.Inf(-1), math.Inf(1), math.Inf(-1)
	for _, b := range parts {
		xmin, xmax = math.Min(xmin, b[0]), math.Max(xmax, b[1])
		ymin, ymax = math.Min(ymin, b[2]), math.Max(ymax, b[3])
	}
	return xmin, xmax, ymin, ymax
}

// resize sets M and δ, marks the kernel spectra stale if either changed and
// sizes the buffers for M.
func (g *fftGrid) resize(m int, delta float64) {
	if m == g.m && delta == g.delta {
		return
	}
	g.delta = delta
	g.kernelStale = true
	if m == g.m {
		return
	}
	g.m, g.m2 = m, 2*m
	m2, mc := g.m2, m+1
	g.charge = growFloats(g.charge, m*m)
	g.pot = growFloats(g.pot, 2*m*m)
	for k := range g.spec {
		g.spec[k] = growComplex(g.spec[k], m2*mc)
	}
	for k := range g.ks {
		g.ks[k] = growFloats(g.ks[k], m2*mc)
	}
	if cap(g.rowStart) < m+1 {
		g.rowStart = make([]int, m+1)
	}
	g.rowStart = g.rowStart[:m+1]
	g.zBlock = growFloats(g.zBlock, (mc+gridColBlock-1)/gridColBlock)
	for w := range g.workers {
		wk := &g.workers[w]
		if wk.rfft == nil {
			wk.rfft, wk.cfft = fourier.NewFFT(m2), fourier.NewCmplxFFT(m2)
		} else {
			wk.rfft.Reset(m2)
			wk.cfft.Reset(m2)
		}
		wk.row = growFloats(wk.row, m2)
		wk.cols = growComplex(wk.cols, 3*gridColBlock*m2)
		wk.tmp = growComplex(wk.tmp, m2)
	}
}

func growComplex(s []complex128, n int) []complex128 {
	if cap(s) < n {
		return make([]complex128, n)
	}
	return s[:n]
}

// kernelSpectra samples the kernels on node offsets and keeps their 2-D
// spectra: K1 = 1/(1+d²), which is even, so its spectrum is real, and
// Kx = K2·d_x, Ky = K2·d_y (K2 = K1²), which are odd, so their spectra are
// imaginary. Circulant embedding: offset u and u − 2M are the same sample;
// offset M is never needed and set to 0, which keeps the symmetry exact.
//
// Two symmetries halve the work: K1 and Kx are even in the row offset, so
// only rows 0…M are transformed and the others copied; and on a square grid
// Ky is Kx transposed, so K̂y(f, g) = K̂x(g, f), with K̂x odd in its first
// argument giving the rows of the half spectrum beyond M.
func (g *fftGrid) kernelSpectra() {
	m, m2, mc := g.m, g.m2, g.m+1
	delta := g.delta
	signed := func(u int) int {
		if u > m {
			return u - m2
		}
		return u
	}
	scratch := g.spec[0] // overwritten by every convolve anyway
	for k := range 2 {
		par.Blocks(mc, gridRowBlock, g.threads, func(w, _, lo, hi int) {
			wk := &g.workers[w]
			for v := lo; v < hi; v++ {
				dv := v
				for u := 0; u < m2; u++ {
					du := signed(u)
					var val float64
					if v != m && u != m {
						k1 := 1 / (1 + float64(du*du+dv*dv)*delta*delta)
						if k == 0 {
							val = k1
						} else {
							val = k1 * k1 * float64(du) * delta
						}
					}
					wk.row[u] = val
				}
				wk.rfft.Coefficients(scratch[v*mc:(v+1)*mc], wk.row)
			}
		})
		for v := mc; v < m2; v++ {
			copy(scratch[v*mc:(v+1)*mc], scratch[(m2-v)*mc:(m2-v+1)*mc])
		}
		par.Blocks(mc, 1, g.threads, func(w, _, c, _ int) {
			wk := &g.workers[w]
			col := wk.cols[:m2]
			for r := 0; r < m2; r++ {
				col[r] = scratch[r*mc+c]
			}
			wk.cfft.Coefficients(wk.tmp, col)
			for r := 0; r < m2; r++ {
				if k == 0 {
					g.ks[k][r*mc+c] = real(wk.tmp[r])
				} else {
					g.ks[k][r*mc+c] = imag(wk.tmp[r])
				}
			}
		})
	}
	kx, ky := g.ks[1], g.ks[2]
	par.Blocks(m2, gridRowBlock, g.threads, func(_, _, lo, hi int) {
		for r := lo; r < hi; r++ {
			for c := 0; c < mc; c++ {
				if r <= m {
					ky[r*mc+c] = kx[c*mc+r]
				} else {
					ky[r*mc+c] = -kx[c*mc+m2-r]
				}
			}
		}
	})
}

// spread computes the stencil and Lagrange weights of every point, orders
// the points by stencil row, and spreads the unit charges onto the nodes.
//
// The stencils and weights are stored in that order (slot s holds point
// order[s]), so spreading and gathering read them front to back and touch
// the nodes a band of rows at a time, instead of jumping between points
// (a gain too small to separate from this machine's noise at 10^6 points,
// kept because it costs nothing and gives the same bits).
func (g *fftGrid) spread(y []float64) {
	n, p, m := g.n, g.p, g.m
	inv := 1 / g.delta
	rows := g.base // the stencil row of each point by point index, for the sort; overwritten below with the stencils in slot order
	par.Blocks(n, rowBlock, g.threads, func(_, _, lo, hi int) {
		for i := lo; i < hi; i++ {
			by, _ := g.stencil((y[2*i+1] - g.lo[1]) * inv)
			rows[i] = int32(by)
		}
	})
	rs := g.rowStart
	clear(rs)
	for _, r := range rows {
		rs[r+1]++
	}
	for r := 1; r < len(rs); r++ {
		rs[r] += rs[r-1]
	}
	for i, r := range rows { // stable: rs[r] is used as the cursor, then restored
		g.order[rs[r]] = int32(i)
		rs[r]++
	}
	for r := len(rs) - 1; r > 0; r-- {
		rs[r] = rs[r-1]
	}
	rs[0] = 0
	par.Blocks(n, rowBlock, g.threads, func(_, _, lo, hi int) {
		// The points' positions are gathered into the first weight of their
		// slots in a loop of their own: the reads jump across the map, and
		// in a tight loop many of them are in flight at once (within the
		// weights' loop they cost two fifths of the spreading at 10^6
		// points, one cache miss after another).
		for s := lo; s < hi; s++ {
			i := int(g.order[s])
			g.wx[s*p], g.wy[s*p] = y[2*i], y[2*i+1]
		}
		for s := lo; s < hi; s++ {
			bx, ux := g.stencil((g.wx[s*p] - g.lo[0]) * inv)
			by, uy := g.stencil((g.wy[s*p] - g.lo[1]) * inv)
			g.base[s] = int32(by*m + bx)
			g.lagrange(ux, g.wx[s*p:(s+1)*p])
			g.lagrange(uy, g.wy[s*p:(s+1)*p])
		}
	})
	clear(g.charge)
	// A block of gridSpreadRows stencil rows writes node rows up to p − 1
	// beyond its end, so only blocks two apart may run together.
	nb := (m + gridSpreadRows - 1) / gridSpreadRows
	for parity := range 2 {
		par.Blocks((nb+1-parity)/2, 1, g.threads, func(_, b, _, _ int) {
			r0 := (2*b + parity) * gridSpreadRows
			r1 := min(m, r0+gridSpreadRows)
			if p == 5 {
				g.chargeFive(rs[r0], rs[r1])
			} else {
				g.charges(rs[r0], rs[r1])
			}
		})
	}
}

// convolve transforms the charges, returns Σ_f |Ĉ|² K̂1/S (block-ordered
// sum; S = (2M)²) and writes the node potentials Kx ⊛ c and Ky ⊛ c.
func (g *fftGrid) convolve() float64 {
	m, m2, mc := g.m, g.m2, g.m+1
	// Rows: real FFTs of the m non-zero rows of the charges; rows ≥ m are 0.
	par.Blocks(m2, gridRowBlock, g.threads, func(w, _, lo, hi int) {
		wk := &g.workers[w]
		for r := lo; r < hi; r++ {
			dst := g.spec[0][r*mc : (r+1)*mc]
			if r >= m {
				clear(dst)
				continue
			}
			copy(wk.row, g.charge[r*m:(r+1)*m])
			clear(wk.row[m:])
			wk.rfft.Coefficients(dst, wk.row)
		}
	})
	// Columns, gridColBlock at a time (columnBlock).
	nb := (mc + gridColBlock - 1) / gridColBlock
	par.Blocks(mc, gridColBlock, g.threads, func(w, b, lo, hi int) {
		g.zBlock[b] = g.columnBlock(&g.workers[w], lo, hi)
	})
	zsum := par.Sum(g.zBlock[:nb])
	norm := 1 / (float64(m2) * float64(m2))
	par.Blocks(m, gridRowBlock, g.threads, func(w, _, lo, hi int) {
		wk := &g.workers[w]
		for r := lo; r < hi; r++ {
			dst := g.pot[r*m*2 : (r+1)*m*2]
			for k := 1; k < 3; k++ {
				wk.rfft.Sequence(wk.row, g.spec[k][r*mc:(r+1)*mc])
				for a := 0; a < m; a++ {
					dst[2*a+k-1] = wk.row[a] * norm
				}
			}
		}
	})
	return zsum * norm
}

// columnBlock transforms the spectrum columns [lo, hi) of the charges: a
// forward FFT, the Parseval sum for Z, the products with K̂x and K̂y
// (i·s: (a+ib)·is = −bs + ias) and the inverse FFTs, whose rows below m it
// writes back to spec[1] and spec[2]. It returns the block's share of
// Σ_f |Ĉ|² K̂1 (not yet divided by S).
func (g *fftGrid) columnBlock(wk *fftWorker, lo, hi int) float64 {
	m, m2, mc := g.m, g.m2, g.m+1
	nc := hi - lo
	col := func(k, cc int) []complex128 { return wk.cols[(k*gridColBlock+cc)*m2 : (k*gridColBlock+cc+1)*m2] }
	for r := 0; r < m2; r++ {
		row := g.spec[0][r*mc+lo : r*mc+hi]
		for cc := 0; cc < nc; cc++ {
			col(0, cc)[r] = row[cc]
		}
	}
	var zb float64
	for cc := 0; cc < nc; cc++ {
		c := lo + cc
		wgt := 2.0 // the half spectrum stands for columns c and 2M−c
		if c == 0 || c == m {
			wgt = 1
		}
		wk.cfft.Coefficients(wk.tmp, col(0, cc))
		cx, cy := col(1, cc), col(2, cc)
		var zc float64
		for r, a := range wk.tmp {
			e := r*mc + c
			re, im := real(a), imag(a)
			zc += (re*re + im*im) * g.ks[0][e]
			sx, sy := g.ks[1][e], g.ks[2][e]
			cx[r] = complex(-im*sx, re*sx)
			cy[r] = complex(-im*sy, re*sy)
		}
		zb += wgt * zc
		for k := 1; k < 3; k++ {
			wk.cfft.Sequence(wk.tmp, col(k, cc))
			copy(col(k, cc), wk.tmp)
		}
	}
	for r := 0; r < m; r++ { // only rows < m are needed back
		for k := 1; k < 3; k++ {
			row := g.spec[k][r*mc+lo : r*mc+hi]
			for cc := 0; cc < nc; cc++ {
				row[cc] = col(k, cc)[r]
			}
		}
	}
	return zb
}

// repulsion writes into rep the interpolated Σ_j K2 (y_i − y_j) and returns
// the interpolated Z = Σ_{i≠j} K1.
func (g *fftGrid) repulsion(y, rep []float64) float64 {
	g.setup(y)
	if g.kernelStale {
		g.kernelSpectra()
		g.kernelStale = false
	}
	g.spread(y)
	z := g.convolve() - float64(g.n)
	n := g.n
	par.Blocks(n, rowBlock, g.threads, func(_, _, lo, hi int) {
		if g.p == 5 {
			g.gatherFive(rep, lo, hi)
		} else {
			g.gather(rep, lo, hi)
		}
	})
	return z
}

// gather interpolates the node potentials back to the points of slots
// [lo, hi) with their weights, and writes them to the points' rows of rep.
func (g *fftGrid) gather(rep []float64, lo, hi int) {
	p, m := g.p, g.m
	for s := lo; s < hi; s++ {
		wx, wy := g.wx[s*p:(s+1)*p], g.wy[s*p:(s+1)*p]
		base := int(g.base[s]) * 2
		var sx, sy float64
		for ky := 0; ky < p; ky++ {
			node := g.pot[base+ky*m*2 : base+ky*m*2+2*p]
			var rx, ry float64
			for kx := 0; kx < p; kx++ {
				rx += wx[kx] * node[2*kx]
				ry += wx[kx] * node[2*kx+1]
			}
			sx += wy[ky] * rx
			sy += wy[ky] * ry
		}
		i := g.order[s]
		rep[2*i] = sx
		rep[2*i+1] = sy
	}
}

// gatherFive is gather for the default order 5, written out: the same
// products added in the same order as gather, so the same bits
// (TestGridFiveSameBits), without the inner loop's bounds and counters:
// 0.58 of gather's time in a profile of BenchmarkRepulsion at 10^6 points.
func (g *fftGrid) gatherFive(rep []float64, lo, hi int) {
	m2 := 2 * g.m
	for s := lo; s < hi; s++ {
		wx, wy := g.wx[s*5:s*5+5], g.wy[s*5:s*5+5]
		base := int(g.base[s]) * 2
		var sx, sy float64
		for ky := 0; ky < 5; ky++ {
			node := g.pot[base+ky*m2 : base+ky*m2+10]
			var rx, ry float64
			rx += wx[0] * node[0]
			ry += wx[0] * node[1]
			rx += wx[1] * node[2]
			ry += wx[1] * node[3]
			rx += wx[2] * node[4]
			ry += wx[2] * node[5]
			rx += wx[3] * node[6]
			ry += wx[3] * node[7]
			rx += wx[4] * node[8]
			ry += wx[4] * node[9]
			sx += wy[ky] * rx
			sy += wy[ky] * ry
		}
		i := g.order[s]
		rep[2*i] = sx
		rep[2*i+1] = sy
	}
}

// charges adds the charges of the points of slots [lo, hi) to the nodes.
func (g *fftGrid) charges(lo, hi int) {
	p, m := g.p, g.m
	for s := lo; s < hi; s++ {
		wx, wy := g.wx[s*p:(s+1)*p], g.wy[s*p:(s+1)*p]
		base := int(g.base[s])
		for ky := 0; ky < p; ky++ {
			node := g.charge[base+ky*m : base+ky*m+p]
			for kx := range node {
				node[kx] += wy[ky] * wx[kx]
			}
		}
	}
}

// chargeFive is charges for the default order 5, written out like
// gatherFive: the same products added in the same order, so the same bits.
func (g *fftGrid) chargeFive(lo, hi int) {
	m := g.m
	for s := lo; s < hi; s++ {
		wx, wy := g.wx[s*5:s*5+5], g.wy[s*5:s*5+5]
		base := int(g.base[s])
		for ky := 0; ky < 5; ky++ {
			node := g.charge[base+ky*m : base+ky*m+5]
			w := wy[ky]
			node[0] += w * wx[0]
			node[1] += w * wx[1]
			node[2] += w * wx[2]
			node[3] += w * wx[3]
			node[4] += w * wx[4]
		}
	}
}
