package gradient

import (
	"fmt"
	"math"
	"slices"

	"nightjar/internal/core"
	"nightjar/internal/par"
)

// Block sizes of the parallel loops. They fix the order of every reduction,
// so they are part of the numerical definition of a result: changing one
// changes low-order bits (never the thread-independence).
const (
	rowBlock  = 1024 // rows per block in the attractive pass and the KL pass
	elemBlock = 4096 // embedding elements per block in the optimiser update
	exBlock   = 64   // rows per block in the exact O(N²) repulsion
)

// kernel returns w = (1 + d2/α)^(−α) and w^(1+1/α) = w/(1 + d2/α) for the
// squared distance d2; invA = 1/α.
func kernel(d2, alpha, invA float64) (w, wq float64) {
	t := 1 + d2*invA
	if alpha == 1 {
		w = 1 / t
	} else {
		w = powNeg(t, alpha)
	}
	return w, w / t
}

// powNeg returns t^(−α) for t ≥ 1. math.Pow is general and slow; the kernel
// is evaluated for every pair, so the common heavy-tail choices get exact
// short cuts (α = 1/2, small integers) and the rest exp(−α ln t), whose
// relative error is a few ulps for the t of a map.
func powNeg(t, alpha float64) float64 {
	switch alpha {
	case 1:
		return 1 / t
	case 0.5:
		return 1 / math.Sqrt(t)
	case 2:
		return 1 / (t * t)
	case 3:
		return 1 / (t * t * t)
	}
	return math.Exp(-alpha * math.Log(t))
}

// engine computes gradients for one P and one set of parameters, keeping its
// scratch space between calls.
type engine struct {
	p       core.CSR
	n, dims int
	alpha   float64
	theta   float64
	threads int
	method  Method

	rep    []float64   // unnormalised repulsive sums Σ_j w^(1+1/α)(y_i − y_j), N×dims
	zBlock []float64   // per-block partial sums of Z
	kBlock []float64   // per-block partial sums of Σ p ln w
	dist   [][]float64 // each worker's squared distances of a row (sumPLogW)
	tree   *bhTree
	grid   *fftGrid
}

func newEngine(p core.CSR, params Params) (*engine, error) {
	e := &engine{
		p: p, n: p.N, dims: params.Dims, alpha: params.Dof, theta: params.Theta,
		threads: params.threads(), method: params.Resolve(p.N),
		rep: make([]float64, p.N*params.Dims),
	}
	switch e.method {
	case Tree:
		e.tree = newBHTree(p.N, params.Dims, e.threads)
	case Grid:
		g, err := newFFTGrid(p.N, params)
		if err != nil {
			return nil, err
		}
		e.grid = g
	}
	return e, nil
}

// gradient writes ∂L_ρ/∂y into grad for the objective with the attractive term
// multiplied by exag (see Gradient) and returns Z.
func (e *engine) gradient(y []float64, exag float64, grad []float64) float64 {
	z := e.repulsion(y)
	e.attraction(y, 4*exag, -4/z, grad)
	return z
}

// repulsion fills e.rep with Σ_{j≠i} w_ij^(1+1/α)(y_i − y_j) (approximated by
// the method) and returns Z = Σ_{i≠j} w_ij.
func (e *engine) repulsion(y []float64) float64 {
	switch e.method {
	case Exact:
		return e.exactRepulsion(y)
	case Tree:
		return e.tree.repulsion(y, e.alpha, e.theta, e.rep)
	case Grid:
		return e.grid.repulsion(y, e.rep)
	}
	panic(fmt.Sprintf("gradient: unresolved method %v", e.method))
}

// attraction writes grad_i = ca·Σ_j p_ij w_ij^(1/α)(y_i − y_j) + cr·rep_i.
// w^(1/α) = 1/(1 + d²/α) for every α, so no power is needed here.
func (e *engine) attraction(y []float64, ca, cr float64, grad []float64) {
	off, cols, vals := e.p.Offsets, e.p.Cols, e.p.Vals
	invA := 1 / e.alpha
	rep := e.rep
	switch e.dims {
	case 2:
		par.Blocks(e.n, rowBlock, e.threads, func(_, _, lo, hi int) {
			for i := lo; i < hi; i++ {
				fx, fy := attractRow(y, cols[off[i]:off[i+1]], vals[off[i]:off[i+1]], y[2*i], y[2*i+1], invA)
				grad[2*i] = float64(ca*fx) + float64(cr*rep[2*i])
				grad[2*i+1] = float64(ca*fy) + float64(cr*rep[2*i+1])
			}
		})
	case 3:
		par.Blocks(e.n, rowBlock, e.threads, func(_, _, lo, hi int) {
			for i := lo; i < hi; i++ {
				yx, yy, yz := y[3*i], y[3*i+1], y[3*i+2]
				var fx, fy, fz float64
				for k := off[i]; k < off[i+1]; k++ {
					j := int(cols[k])
					dx, dy, dz := yx-y[3*j], yy-y[3*j+1], yz-y[3*j+2]
					s := float64(vals[k]) / (1 + (dx*dx+dy*dy+dz*dz)*invA)
					fx += s * dx
					fy += s * dy
					fz += s * dz
				}
				grad[3*i] = ca*fx + cr*rep[3*i]
				grad[3*i+1] = ca*fy + cr*rep[3*i+1]
				grad[3*i+2] = ca*fz + cr*rep[3*i+2]
			}
		})
	default:
		panic("gradient: dims must be 2 or 3")
	}
}

// exactRepulsion is the O(N²) reference: every ordered pair, parallel over
// blocks of rows, Z summed per block then in block order.
func (e *engine) exactRepulsion(y []float64) float64 {
	n, d := e.n, e.dims
	alpha, invA := e.alpha, 1/e.alpha
	nb := (n + exBlock - 1) / exBlock
	e.zBlock = growFloats(e.zBlock, nb)
	par.Blocks(n, exBlock, e.threads, func(_, b, lo, hi int) {
		var zb float64
		var f [3]float64
		for i := lo; i < hi; i++ {
			yi := y[i*d : i*d+d]
			f = [3]float64{}
			var zi float64
			for j := 0; j < n; j++ {
				if j == i {
					continue
				}
				yj := y[j*d : j*d+d]
				var diff [3]float64
				var d2 float64
				for c := 0; c < d; c++ {
					diff[c] = yi[c] - yj[c]
					d2 += diff[c] * diff[c]
				}
				w, wq := kernel(d2, alpha, invA)
				zi += w
				for c := 0; c < d; c++ {
					f[c] += wq * diff[c]
				}
			}
			copy(e.rep[i*d:i*d+d], f[:d])
			zb += zi
		}
		e.zBlock[b] = zb
	})
	return par.Sum(e.zBlock[:nb])
}

// sumPLogW returns Σ_ij p_ij ln w_ij at y. With half, P must be symmetric
// (see symmetric): it reads in each row only the entries right of the
// diagonal and counts them twice — p_ij = p_ji, and w_ij = w_ji to the last
// bit, since y_j − y_i is exactly −(y_i − y_j) — which reads half of P,
// takes half the logarithms, and gives the whole sum up to rounding.
func (e *engine) sumPLogW(y []float64, half bool) float64 {
	off, cols, vals := e.p.Offsets, e.p.Cols, e.p.Vals
	d := e.dims
	invA := 1 / e.alpha
	nb := (e.n + rowBlock - 1) / rowBlock
	e.kBlock = growFloats(e.kBlock, nb)
	if len(e.dist) < e.threads {
		e.dist = make([][]float64, e.threads)
	}
	par.Blocks(e.n, rowBlock, e.threads, func(w, b, lo, hi int) {
		var s float64
		for i := lo; i < hi; i++ {
			a, z := off[i], off[i+1]
			if half {
				k0, _ := slices.BinarySearch(cols[a:z], int32(i))
				a += int64(k0)
			}
			// The distances first, in a loop of their own: its reads of
			// scattered positions do not wait on each other, where a
			// logarithm between two of them keeps few in flight.
			if int64(cap(e.dist[w])) < z-a {
				e.dist[w] = make([]float64, 2*(z-a))
			}
			dist := e.dist[w][:z-a]
			for k := range dist {
				j := int(cols[a+int64(k)])
				var d2 float64
				for c := 0; c < d; c++ {
					diff := y[i*d+c] - y[j*d+c]
					d2 += diff * diff
				}
				dist[k] = d2
			}
			for k, d2 := range dist {
				s += float64(vals[a+int64(k)]) * math.Log1p(d2*invA)
			}
		}
		e.kBlock[b] = s
	})
	// ln w = −α ln(1 + d²/α)
	sum := -e.alpha * par.Sum(e.kBlock[:nb])
	if half {
		return 2 * sum
	}
	return sum
}

// sumPLogP returns Σ p ln p over the non-zeros of P (0 ln 0 = 0) and Σ p.
// KL = Σ p ln p − Σ p ln w + (Σ p) ln Z is then exactly Σ p ln(p/q) for the
// P given, even when its float32 values do not sum to 1 to the last bit.
func sumPLogP(p core.CSR) (plogp, sum float64) {
	for _, v := range p.Vals {
		if v > 0 {
			x := float64(v)
			plogp += x * math.Log(x)
			sum += x
		}
	}
	return plogp, sum
}

func growFloats(s []float64, n int) []float64 {
	if cap(s) < n {
		return make([]float64, n)
	}
	return s[:n]
}

// Gradient writes into grad (length N×Dims, row-major like y) the gradient of
// the t-SNE objective at y with the attractive term multiplied by
// exaggeration ρ:
//
//	L_ρ(Y) = −ρ Σ_ij p_ij ln w_ij + ln Z   (+ the constant ρ Σ p ln p),
//	∂L_ρ/∂y_i = 4 Σ_j (ρ p_ij − q_ij) w_ij^(1/α) (y_i − y_j),
//
// which is ∂KL(P‖Q)/∂y_i for ρ = 1. The repulsion uses params.Method
// (resolved for N by Params.Resolve). It returns KL(P‖Q) at y (without
// exaggeration), computed from the same, possibly approximated, Z. Errors
// report invalid parameters, an invalid P, mismatched lengths or a
// non-finite Z. It allocates its scratch space on every call; use an
// Optimizer for repeated evaluations.
func Gradient(p core.CSR, y []float64, params Params, exaggeration float64, grad []float64) (kl float64, err error) {
	if err := params.Validate(p.N); err != nil {
		return 0, err
	}
	if err := p.Validate(); err != nil {
		return 0, err
	}
	nd := p.N * params.Dims
	if len(y) != nd || len(grad) != nd {
		return 0, fmt.Errorf("gradient: len(y) = %d, len(grad) = %d, want N×Dims = %d", len(y), len(grad), nd)
	}
	if !(exaggeration > 0) || math.IsInf(exaggeration, 0) {
		return 0, fmt.Errorf("gradient: exaggeration = %v, want a finite positive number", exaggeration)
	}
	e, err := newEngine(p, params)
	if err != nil {
		return 0, err
	}
	z := e.gradient(y, exaggeration, grad)
	if !(z > 0) || math.IsInf(z, 0) {
		return 0, fmt.Errorf("gradient: normalisation Z = %v is not finite and positive", z)
	}
	plogp, psum := sumPLogP(p)
	return plogp - e.sumPLogW(y, false) + psum*math.Log(z), nil
}

// KLExact returns KL(P‖Q) at y (N×dims, row-major) with the kernel of dof
// degrees of freedom, computing Z over all N(N−1) ordered pairs: an O(N²)
// reference. It panics if len(y) != p.N×dims, dims is not 2 or 3, or
// N > ExactLimit.
func KLExact(p core.CSR, y []float64, dims int, dof float64) float64 {
	if dims != 2 && dims != 3 {
		panic("gradient: KLExact dims must be 2 or 3")
	}
	if len(y) != p.N*dims {
		panic("gradient: KLExact len(y) != N×dims")
	}
	if p.N > ExactLimit {
		panic(fmt.Sprintf("gradient: KLExact refuses N = %d > ExactLimit", p.N))
	}
	params := Params{Dims: dims, Dof: dof, Method: Exact, Threads: 1}
	e, _ := newEngine(p, params)
	z := e.exactRepulsion(y)
	plogp, psum := sumPLogP(p)
	return plogp - e.sumPLogW(y, false) + psum*math.Log(z)
}
