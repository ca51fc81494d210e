package gradient

import (
	"math"

	"gonum.org/v1/gonum/dsp/fourier"
)

// FFT-interpolated repulsion for 2-D maps with α = 1 (Linderman et al. 2019,
// Nature Methods; MATH.md).
//
// The repulsion needs, for every point i, Σ_j K2(y_i, y_j)·[1, ỹ_j] with
// K2 = 1/(1+d²)², ỹ = y − c (c the centre of the box, for conditioning), and
// the total Z = Σ_{i≠j} K1(y_i, y_j) with K1 = 1/(1+d²). The bounding square
// of Y is cut into n×n intervals of side h; each interval carries p×p
// equispaced nodes (at (k+½)h/p), so all nodes form one equispaced grid of
// M = n·p nodes per axis. Charges [1, ỹ_x, ỹ_y] are spread onto the nodes of
// each point's interval with Lagrange weights; the node-to-node kernel sums
// are a 2-D Toeplitz convolution done by FFT on a 2M×2M zero-padded grid
// (gonum dsp/fourier: real FFTs along rows, complex FFTs along columns); the
// node potentials are interpolated back to the points with the same weights.
// In the force F_i = ỹ_i Σ_j K2 − Σ_j K2 ỹ_j the self term cancels.
//
// Z needs no per-point potential: Σ_i Σ_j K̃1(y_i, y_j) = Σ_a c0(a)(K1 ⊛ c0)(a)
// over the nodes, which by Parseval is (1/S) Σ_f |Ĉ0(f)|² K̂1(f) (S = (2M)²
// and K̂1 real because the circulant kernel is even); the N self pairs,
// K1(0) = 1 each, are subtracted. That saves one inverse transform.
//
// Determinism: points are ordered by interval with a stable counting sort;
// spreading runs over interval rows (each writes only its own p node rows),
// FFT rows and columns are independent, Z is summed per fixed block of
// columns and the block sums added in order, and the gather writes per
// point, so results do not depend on the thread count.
//
// The kernel spectra depend only on the grid size and spacing. Both are kept
// on a discrete set (interval side h = GridSide once the map is wider than
// GridIntervals·GridSide, otherwise L/GridIntervals rounded up to a power of
// 2^(1/8); interval count rounded up to an FFT-friendly value), so the
// spectra are recomputed only when the grid changes.

// Defaults of the grid (Params.GridIntervals, GridNodes, GridSide).
const (
	DefaultGridIntervals = 50  // minimum intervals per axis (Linderman et al. 2019, from memory)
	DefaultGridNodes     = 3   // nodes per interval per axis (Linderman et al. 2019, from memory)
	DefaultGridSide      = 1.0 // largest interval side, map units (Linderman et al. 2019, from memory)
	gridColBlock         = 8   // FFT columns per parallel block (also the Z reduction block)
	gridRowBlock         = 8   // FFT rows per parallel block
	gridSpreadBlock      = 2   // interval rows per parallel block when spreading
)

// gridMaxNodes caps the nodes per axis, M: the grid's memory is about
// 176·M² bytes (0.74 GB at M = 2048; 0.14 GB at M = 900, about what a
// 10^6-row map needs). A map wider than gridMaxNodes/p × GridSide gets wider
// intervals, and so a coarser approximation. A variable so that tests can
// reach the cap on small maps.
var gridMaxNodes = 2048

type fftWorker struct {
	rfft *fourier.FFT
	cfft *fourier.CmplxFFT
	row  []float64
	cols []complex128 // 3 × gridColBlock × m2 gathered columns
	tmp  []complex128 // m2
}

type fftGrid struct {
	n, p, minInt, threads int
	side                  float64 // largest interval side

	nInt, m, m2 int // intervals per axis, nodes per axis, padded FFT size
	lo          [2]float64
	centre      [2]float64
	h           float64 // interval side in use
	kernelStale bool    // kernel spectra must be recomputed

	tnode []float64 // local node positions (k+½)/p
	denom []float64 // Lagrange denominators Π_{l≠k}(t_k − t_l)

	cell      []int32   // interval of each point: by·nInt + bx
	wx, wy    []float64 // Lagrange weights, n×p
	order     []int32   // points sorted (stably) by interval
	cellStart []int     // nInt²+1 offsets into order

	charge []float64       // m×m nodes × 3 charges, interleaved
	spec   [3][]complex128 // m2 rows × (m+1) columns
	kre    [2][]float64    // real parts of the spectra of K1 and K2, m2 × (m+1)
	pot    []float64       // m×m nodes × 3 potentials (K2 ⊛ c0, c1, c2), interleaved

	workers []fftWorker
	zBlock  []float64
}

func newFFTGrid(n int, params Params) (*fftGrid, error) {
	g := &fftGrid{n: n, p: params.GridNodes, minInt: params.GridIntervals, side: params.GridSide, threads: params.Threads}
	if g.p == 0 {
		g.p = DefaultGridNodes
	}
	if g.minInt == 0 {
		g.minInt = DefaultGridIntervals
	}
	if g.side == 0 {
		g.side = DefaultGridSide
	}
	p := g.p
	g.tnode = make([]float64, p)
	g.denom = make([]float64, p)
	for k := range p {
		g.tnode[k] = (float64(k) + 0.5) / float64(p)
	}
	for k := range p {
		d := 1.0
		for l := range p {
			if l != k {
				d *= g.tnode[k] - g.tnode[l]
			}
		}
		g.denom[k] = d
	}
	g.cell = make([]int32, n)
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

// lagrange writes the p interpolation weights of local coordinate u ∈ [0, 1].
func (g *fftGrid) lagrange(u float64, w []float64) {
	for k := range g.p {
		num := 1.0
		for l := range g.p {
			if l != k {
				num *= u - g.tnode[l]
			}
		}
		w[k] = num / g.denom[k]
	}
}

// setup fixes the grid geometry for y and sizes the buffers.
func (g *fftGrid) setup(y []float64) {
	n := g.n
	xmin, xmax := math.Inf(1), math.Inf(-1)
	ymin, ymax := math.Inf(1), math.Inf(-1)
	for i := 0; i < n; i++ {
		xmin, xmax = math.Min(xmin, y[2*i]), math.Max(xmax, y[2*i])
		ymin, ymax = math.Min(ymin, y[2*i+1]), math.Max(ymax, y[2*i+1])
	}
	L := math.Max(xmax-xmin, ymax-ymin)
	if L < 1e-3 {
		L = 1e-3
	}
	g.centre = [2]float64{(xmin + xmax) / 2, (ymin + ymax) / 2}
	h := g.side
	if L < float64(g.minInt)*g.side {
		h = math.Exp2(math.Ceil(8*math.Log2(L/float64(g.minInt))) / 8)
	}
	nInt := max(g.minInt, int(math.Ceil(L/h)))
	if maxInt := gridMaxNodes / g.p; nInt > maxInt {
		nInt = maxInt
		h = L / float64(nInt)
	}
	for !smooth(2 * nInt * g.p) {
		nInt++
	}
	side := float64(nInt) * h
	g.lo = [2]float64{g.centre[0] - side/2, g.centre[1] - side/2}
	if nInt == g.nInt && h == g.h {
		return
	}
	g.h = h
	g.kernelStale = true
	if nInt == g.nInt {
		return
	}
	g.nInt, g.m, g.m2 = nInt, nInt*g.p, 2*nInt*g.p
	m, m2, mc := g.m, g.m2, g.m+1
	g.charge = growFloats(g.charge, 3*m*m)
	g.pot = growFloats(g.pot, 3*m*m)
	for k := range g.spec {
		g.spec[k] = growComplex(g.spec[k], m2*mc)
	}
	for k := range g.kre {
		g.kre[k] = growFloats(g.kre[k], m2*mc)
	}
	if cap(g.cellStart) < nInt*nInt+1 {
		g.cellStart = make([]int, nInt*nInt+1)
	}
	g.cellStart = g.cellStart[:nInt*nInt+1]
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

// kernelSpectra samples K1 and K2 on node offsets (circulant embedding:
// offset u and u − 2M are the same sample; offset M is never needed and set
// to 0) and keeps the real parts of their 2-D spectra.
func (g *fftGrid) kernelSpectra() {
	m, m2, mc := g.m, g.m2, g.m+1
	delta := g.h / float64(g.p)
	scratch := g.spec[0] // overwritten by every convolve anyway
	for k := range g.kre {
		forBlocks(m2, gridRowBlock, g.threads, func(w, _, lo, hi int) {
			wk := &g.workers[w]
			for v := lo; v < hi; v++ {
				dv := min(v, m2-v)
				for u := 0; u < m2; u++ {
					du := min(u, m2-u)
					var val float64
					if v != m && u != m {
						val = 1 / (1 + float64(du*du+dv*dv)*delta*delta)
						if k == 1 {
							val *= val
						}
					}
					wk.row[u] = val
				}
				wk.rfft.Coefficients(scratch[v*mc:(v+1)*mc], wk.row)
			}
		})
		forBlocks(mc, 1, g.threads, func(w, _, c, _ int) {
			wk := &g.workers[w]
			col := wk.cols[:m2]
			for r := 0; r < m2; r++ {
				col[r] = scratch[r*mc+c]
			}
			wk.cfft.Coefficients(wk.tmp, col)
			for r := 0; r < m2; r++ {
				g.kre[k][r*mc+c] = real(wk.tmp[r])
			}
		})
	}
}

// spread computes the interval and Lagrange weights of every point, orders
// the points by interval, and spreads the charges onto the node grid.
func (g *fftGrid) spread(y []float64) {
	n, p, m := g.n, g.p, g.m
	nInt := g.nInt
	inv := 1 / g.h
	cell := func(v, lo float64) (int, float64) {
		s := (v - lo) * inv
		b := int(s)
		b = max(0, min(b, nInt-1))
		return b, s - float64(b)
	}
	forBlocks(n, rowBlock, g.threads, func(_, _, lo, hi int) {
		for i := lo; i < hi; i++ {
			bx, ux := cell(y[2*i], g.lo[0])
			by, uy := cell(y[2*i+1], g.lo[1])
			g.cell[i] = int32(by*nInt + bx)
			g.lagrange(ux, g.wx[i*p:(i+1)*p])
			g.lagrange(uy, g.wy[i*p:(i+1)*p])
		}
	})
	cs := g.cellStart
	clear(cs)
	for _, c := range g.cell {
		cs[c+1]++
	}
	for c := 1; c < len(cs); c++ {
		cs[c] += cs[c-1]
	}
	for i, c := range g.cell { // stable: cs[c] is used as the cursor, then restored
		g.order[cs[c]] = int32(i)
		cs[c]++
	}
	for c := len(cs) - 1; c > 0; c-- {
		cs[c] = cs[c-1]
	}
	cs[0] = 0
	clear(g.charge)
	cx, cy := g.centre[0], g.centre[1]
	forBlocks(nInt, gridSpreadBlock, g.threads, func(_, _, lo, hi int) {
		for _, i32 := range g.order[cs[lo*nInt]:cs[hi*nInt]] {
			i := int(i32)
			qx, qy := y[2*i]-cx, y[2*i+1]-cy
			wx, wy := g.wx[i*p:(i+1)*p], g.wy[i*p:(i+1)*p]
			c := int(g.cell[i])
			base := ((c/nInt)*p*m + (c%nInt)*p) * 3
			for ky := 0; ky < p; ky++ {
				node := g.charge[base+ky*m*3 : base+ky*m*3+3*p]
				for kx := 0; kx < p; kx++ {
					w := wy[ky] * wx[kx]
					node[3*kx] += w
					node[3*kx+1] += w * qx
					node[3*kx+2] += w * qy
				}
			}
		}
	})
}

// convolve transforms the charges, multiplies by the kernel spectra, returns
// Σ_f |Ĉ0|² K̂1 (block-ordered sum) and transforms the three K2 products back
// to node potentials.
func (g *fftGrid) convolve() float64 {
	m, m2, mc := g.m, g.m2, g.m+1
	// Rows: real FFTs of the m non-zero rows of each charge; rows ≥ m are 0.
	forBlocks(m2, gridRowBlock, g.threads, func(w, _, lo, hi int) {
		wk := &g.workers[w]
		for r := lo; r < hi; r++ {
			for k := 0; k < 3; k++ {
				dst := g.spec[k][r*mc : (r+1)*mc]
				if r >= m {
					clear(dst)
					continue
				}
				src := g.charge[r*m*3 : (r+1)*m*3]
				for a := 0; a < m; a++ {
					wk.row[a] = src[3*a+k]
				}
				clear(wk.row[m:])
				wk.rfft.Coefficients(dst, wk.row)
			}
		}
	})
	// Columns, gridColBlock at a time: forward FFTs, Parseval sum for Z,
	// products with K̂2, inverse FFTs.
	nb := (mc + gridColBlock - 1) / gridColBlock
	forBlocks(mc, gridColBlock, g.threads, func(w, b, lo, hi int) {
		wk := &g.workers[w]
		nc := hi - lo
		col := func(k, cc int) []complex128 { return wk.cols[(k*gridColBlock+cc)*m2 : (k*gridColBlock+cc+1)*m2] }
		for r := 0; r < m2; r++ {
			for k := 0; k < 3; k++ {
				row := g.spec[k][r*mc+lo : r*mc+hi]
				for cc := 0; cc < nc; cc++ {
					col(k, cc)[r] = row[cc]
				}
			}
		}
		var zb float64
		for cc := 0; cc < nc; cc++ {
			c := lo + cc
			wgt := 2.0 // the half spectrum stands for columns c and 2M−c
			if c == 0 || c == m {
				wgt = 1
			}
			for k := 0; k < 3; k++ {
				wk.cfft.Coefficients(wk.tmp, col(k, cc))
				copy(col(k, cc), wk.tmp)
			}
			c0, c1, c2 := col(0, cc), col(1, cc), col(2, cc)
			var zc float64
			for r := 0; r < m2; r++ {
				k1, k2 := g.kre[0][r*mc+c], g.kre[1][r*mc+c]
				a := c0[r]
				zc += (real(a)*real(a) + imag(a)*imag(a)) * k1
				c0[r] = a * complex(k2, 0)
				c1[r] *= complex(k2, 0)
				c2[r] *= complex(k2, 0)
			}
			zb += wgt * zc
			for k := 0; k < 3; k++ {
				wk.cfft.Sequence(wk.tmp, col(k, cc))
				copy(col(k, cc), wk.tmp)
			}
		}
		for r := 0; r < m; r++ { // only rows < m are needed back
			for k := 0; k < 3; k++ {
				row := g.spec[k][r*mc+lo : r*mc+hi]
				for cc := 0; cc < nc; cc++ {
					row[cc] = col(k, cc)[r]
				}
			}
		}
		g.zBlock[b] = zb
	})
	zsum := sumBlocks(g.zBlock[:nb])
	norm := 1 / (float64(m2) * float64(m2))
	forBlocks(m, gridRowBlock, g.threads, func(w, _, lo, hi int) {
		wk := &g.workers[w]
		for r := lo; r < hi; r++ {
			dst := g.pot[r*m*3 : (r+1)*m*3]
			for k := 0; k < 3; k++ {
				wk.rfft.Sequence(wk.row, g.spec[k][r*mc:(r+1)*mc])
				for a := 0; a < m; a++ {
					dst[3*a+k] = wk.row[a] * norm
				}
			}
		}
	})
	return zsum * norm
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
	n, p, m := g.n, g.p, g.m
	nInt := g.nInt
	cx, cy := g.centre[0], g.centre[1]
	forBlocks(n, rowBlock, g.threads, func(_, _, lo, hi int) {
		for _, i32 := range g.order[lo:hi] {
			i := int(i32)
			wx, wy := g.wx[i*p:(i+1)*p], g.wy[i*p:(i+1)*p]
			c := int(g.cell[i])
			base := ((c/nInt)*p*m + (c%nInt)*p) * 3
			var s0, s1, s2 float64
			for ky := 0; ky < p; ky++ {
				node := g.pot[base+ky*m*3 : base+ky*m*3+3*p]
				for kx := 0; kx < p; kx++ {
					w := wy[ky] * wx[kx]
					s0 += w * node[3*kx]
					s1 += w * node[3*kx+1]
					s2 += w * node[3*kx+2]
				}
			}
			qx, qy := y[2*i]-cx, y[2*i+1]-cy
			rep[2*i] = qx*s0 - s1
			rep[2*i+1] = qy*s0 - s2
		}
	})
	return z
}
