package gradient

import (
	"errors"
	"fmt"
	"math"
	"runtime/debug"

	"nightjar/internal/core"
	"nightjar/internal/par"
)

// ErrDone is returned by Step once all iterations have run.
var ErrDone = errors.New("gradient: optimisation already finished")

// State is a deep copy of everything the optimiser needs to continue:
// Y, Update and Gains are N×Dims row-major; Iteration counts the steps done;
// KL is the value Optimizer.KL reported when the state was taken.
type State struct {
	Iteration        int
	Y, Update, Gains []float64
	KL               float64
}

// Optimizer runs gradient descent with momentum and delta-bar-delta gains on
// the t-SNE objective (van der Maaten & Hinton 2008; Jacobs 1988 for the
// gains). Schedule, for iteration t counted from 0: while t < EarlyIterations
// the attractive term is multiplied by Exaggeration and the momentum is
// MomentumEarly; afterwards by MainExaggeration (default 1, none) with
// MomentumLate. KL is always reported without exaggeration. Each Step:
//
//	g      ← ∂L_ρ/∂Y (see Gradient; includes the constant 4)
//	gain   ← gain + 0.2 where sign(g) ≠ sign(update), else gain·0.8; gain ≥ MinGain
//	         (sign(0) = 0, so on the first step, where update = 0, every gain with g ≠ 0 grows)
//	update ← momentum·update − (η/4)·gain⊙g   (η = Params.EffectiveLearningRate, which is
//	         stated for a gradient without the 4)
//	Y      ← Y + update, then Y ← Y − mean(Y)
//
// An Optimizer is not safe for concurrent use; it parallelises internally.
type Optimizer struct {
	params Params
	eng    *engine
	n, d   int
	step   float64 // η/4
	plogp  float64 // Σ p ln p
	psum   float64 // Σ p
	sym    bool    // P passed symmetric (KL reads half of it)

	// The optimiser works on rows in a locality order (order.go): row k of
	// y, update, gains, g and of the engine's P is input row perm[k].
	perm, inv []int32

	iter                int
	y, update, gains, g []float64
	sumBlock            []float64 // per-block sums for recentring, dims per block

	lastZ   float64
	klValid bool
	kl      float64
}

// New returns an optimiser for P starting from y0 (N×Dims row-major, copied).
// It validates params (Params.Validate) and P (core.CSR.Validate) and
// checks that y0 has N×Dims finite values.
//
// The optimiser keeps its own copy of P with the rows renumbered so that
// neighbours sit near each other in memory (8 bytes per non-zero; about 1 GB
// for 10^6 rows at perplexity 30). It does not keep p: a caller that has no
// further use for P should drop it to save that memory, or hand it to
// NewConsume. Y, State and Restore use the input row order.
func New(p core.CSR, y0 []float64, params Params) (*Optimizer, error) {
	return newOptimizer(&p, y0, params, false)
}

// NewConsume is New for a caller that hands P over: it renumbers P's rows
// in P's own memory where it can, so that 1.5 times P is held at once
// instead of twice (New keeps p intact beside its copy), and it scrambles
// p. The caller must not use p afterwards and must hold no other reference
// to its Cols or Vals (that memory is to be reclaimed). Between the two
// halves of the renumbering it collects garbage and hands the freed pages
// back to the operating system (debug.FreeOSMemory): without that, the
// new values may be placed elsewhere in the heap while P's old columns
// stay resident, and the process holds twice P after all. The optimiser
// is the same as New's, bit for bit.
func NewConsume(p core.CSR, y0 []float64, params Params) (*Optimizer, error) {
	return newOptimizer(&p, y0, params, true)
}

// newOptimizer builds the optimiser; with consume it takes *p over and
// clears it (permuteRowsConsume).
//
// P is read through p, never copied into a variable of its own: with
// consume, no copy of its slices may outlive the renumbering.
func newOptimizer(p *core.CSR, y0 []float64, params Params, consume bool) (*Optimizer, error) {
	if err := params.Validate(p.N); err != nil {
		return nil, err
	}
	if err := p.Validate(); err != nil {
		return nil, err
	}
	nd := p.N * params.Dims
	if len(y0) != nd {
		return nil, fmt.Errorf("gradient: initial map has %d values, want N×Dims = %d×%d", len(y0), p.N, params.Dims)
	}
	if err := allFinite("initial map", y0); err != nil {
		return nil, err
	}
	perm := localityOrder(*p)
	inv := par.Inverse(perm)
	var q core.CSR
	if consume {
		q = permuteRowsConsume(p, perm, inv, params.threads(), debug.FreeOSMemory)
	} else {
		q = permuteRows(*p, perm, inv, params.threads())
	}
	e, err := newEngine(q, params)
	if err != nil {
		return nil, err
	}
	o := &Optimizer{
		params: params, eng: e, n: q.N, d: params.Dims,
		step: params.EffectiveLearningRate(q.N) / 4,
		perm: perm, inv: inv,
		y:      make([]float64, nd),
		update: make([]float64, nd),
		gains:  make([]float64, nd),
		g:      make([]float64, nd),
		lastZ:  math.NaN(),
	}
	par.Gather(o.y, y0, perm, o.d)
	for k := range o.gains {
		o.gains[k] = 1
	}
	o.plogp, o.psum = sumPLogP(q)
	o.sym = symmetric(q, params.threads())
	o.sumBlock = make([]float64, ((nd+elemBlock-1)/elemBlock)*params.Dims)
	return o, nil
}

func allFinite(what string, v []float64) error {
	for k, x := range v {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return fmt.Errorf("gradient: %s has a non-finite value %v at position %d", what, x, k)
		}
	}
	return nil
}

// Method returns the repulsion method in use (Auto resolved).
func (o *Optimizer) Method() Method { return o.eng.method }

// LearningRate returns η in the units of Params.LearningRate (Auto resolved).
func (o *Optimizer) LearningRate() float64 { return 4 * o.step }

// Iteration returns the number of steps done.
func (o *Optimizer) Iteration() int { return o.iter }

// Done reports whether Iteration has reached Params.Iterations.
func (o *Optimizer) Done() bool { return o.iter >= o.params.Iterations }

// Y returns a copy of the current embedding, N×Dims row-major, rows in input
// order.
func (o *Optimizer) Y() []float64 { return o.inputOrder(o.y) }

// inputOrder returns a copy of v (rows in the optimiser's order) with rows in
// input order.
func (o *Optimizer) inputOrder(v []float64) []float64 {
	out := make([]float64, len(v))
	par.Scatter(out, v, o.perm, o.d)
	return out
}

// Step runs one iteration (see Optimizer). It returns ErrDone after the last
// iteration, and an error (leaving the state at the failed iterate) if Z or
// the new embedding is not finite.
func (o *Optimizer) Step() error {
	if o.Done() {
		return ErrDone
	}
	exag, mom := o.params.MainExaggeration, o.params.MomentumLate
	if exag == 0 {
		exag = 1
	}
	if o.iter < o.params.EarlyIterations {
		exag, mom = o.params.Exaggeration, o.params.MomentumEarly
	}
	z := o.eng.gradient(o.y, exag, o.g)
	if !(z > 0) || math.IsInf(z, 0) {
		return fmt.Errorf("gradient: iteration %d: normalisation Z = %v is not finite and positive", o.iter, z)
	}
	d := o.d
	nd := len(o.y)
	nb := (nd + elemBlock - 1) / elemBlock
	step, minGain := o.step, o.params.MinGain
	// Element k belongs to column k mod d; column sums are kept per block.
	par.Blocks(nd, elemBlock, o.params.threads(), func(_, b, lo, hi int) {
		var s [3]float64
		for k := lo; k < hi; k++ {
			g, u := o.g[k], o.update[k]
			gain := o.gains[k]
			if sign(g) != sign(u) {
				gain += 0.2
			} else {
				gain *= 0.8
			}
			if gain < minGain {
				gain = minGain
			}
			o.gains[k] = gain
			u = mom*u - step*gain*g
			o.update[k] = u
			v := o.y[k] + u
			o.y[k] = v
			s[k%d] += v
		}
		copy(o.sumBlock[b*d:b*d+d], s[:d])
	})
	var mean [3]float64
	for b := 0; b < nb; b++ {
		for c := 0; c < d; c++ {
			mean[c] += o.sumBlock[b*d+c]
		}
	}
	for c := 0; c < d; c++ {
		mean[c] /= float64(o.n)
		if math.IsNaN(mean[c]) || math.IsInf(mean[c], 0) {
			return fmt.Errorf("gradient: iteration %d: the embedding diverged (non-finite coordinates); try a smaller learning rate", o.iter)
		}
	}
	par.Blocks(nd, elemBlock, o.params.threads(), func(_, _, lo, hi int) {
		for k := lo; k < hi; k++ {
			o.y[k] -= mean[k%d]
		}
	})
	o.iter++
	o.lastZ = z
	o.klValid = false
	return nil
}

func sign(x float64) int {
	switch {
	case x > 0:
		return 1
	case x < 0:
		return -1
	}
	return 0
}

// KL returns KL(P‖Q) (without exaggeration) at the embedding where the last
// Step evaluated its gradient — one step behind Y — computed as
// Σp ln p − Σp ln w + ln Z with the Z of that Step (approximate for the Tree
// and Grid methods) and the distances of that embedding recovered as
// Y − Update (recentring shifts all points alike, so distances are kept up to
// rounding). The first call after a Step costs one pass over P with a
// logarithm per entry; for a symmetric P (checked once by New, see
// symmetric) it reads only the entries right of the diagonal, counted
// twice, which takes half the time of reading all (BenchmarkSavedKL on
// the 10^6-row demo). The value is cached until the next Step. Before
// the first Step it returns NaN; after Restore it returns State.KL until the
// next Step.
func (o *Optimizer) KL() float64 {
	if o.klValid {
		return o.kl
	}
	if math.IsNaN(o.lastZ) {
		return math.NaN()
	}
	// The gradient's scratch is free until the next Step: it takes the
	// embedding of the last Step, recovered once rather than pair by pair.
	prev := o.g
	par.Blocks(len(prev), elemBlock, o.params.threads(), func(_, _, lo, hi int) {
		for k := lo; k < hi; k++ {
			prev[k] = o.y[k] - o.update[k]
		}
	})
	plogw := o.eng.sumPLogW(prev, o.sym)
	o.kl = o.plogp - plogw + o.psum*math.Log(o.lastZ)
	o.klValid = true
	return o.kl
}

// State returns a deep copy of the optimiser state (it calls KL).
func (o *Optimizer) State() State {
	return State{
		Iteration: o.iter,
		Y:         o.inputOrder(o.y),
		Update:    o.inputOrder(o.update),
		Gains:     o.inputOrder(o.gains),
		KL:        o.KL(),
	}
}

// Restore replaces the optimiser state by s (copied). Continuing from a
// restored state gives the same bits as continuing the run that produced it.
// It checks lengths (N×Dims), the iteration range [0, Iterations], finite
// values and positive gains, and leaves the optimiser unchanged on error.
func (o *Optimizer) Restore(s State) error {
	nd := o.n * o.d
	if len(s.Y) != nd || len(s.Update) != nd || len(s.Gains) != nd {
		return fmt.Errorf("gradient: state has %d/%d/%d values for Y/Update/Gains, want N×Dims = %d",
			len(s.Y), len(s.Update), len(s.Gains), nd)
	}
	if s.Iteration < 0 || s.Iteration > o.params.Iterations {
		return fmt.Errorf("gradient: state iteration %d outside [0, %d]", s.Iteration, o.params.Iterations)
	}
	for _, c := range []struct {
		what string
		v    []float64
	}{{"state Y", s.Y}, {"state Update", s.Update}, {"state Gains", s.Gains}} {
		if err := allFinite(c.what, c.v); err != nil {
			return err
		}
	}
	for k, g := range s.Gains {
		if !(g > 0) {
			return fmt.Errorf("gradient: state gain %v at position %d, want > 0", g, k)
		}
	}
	o.iter = s.Iteration
	par.Gather(o.y, s.Y, o.perm, o.d)
	par.Gather(o.update, s.Update, o.perm, o.d)
	par.Gather(o.gains, s.Gains, o.perm, o.d)
	o.kl, o.klValid = s.KL, true
	o.lastZ = math.NaN()
	if s.Iteration == 0 {
		o.klValid = false
	}
	return nil
}

// InitScale multiplies every column of y (N×dims row-major) by the same
// factor so that column 1 (the first) has standard deviation sd (divisor
// N−1); Kobak & Berens 2019 scale the PCA initialisation to sd = 1e-4. If
// column 1 has zero spread, y is left unchanged. It panics if dims < 1 or
// len(y) is not a multiple of dims.
func InitScale(y []float64, dims int, sd float64) {
	if dims < 1 || len(y)%dims != 0 {
		panic("gradient: InitScale needs dims ≥ 1 and len(y) a multiple of dims")
	}
	n := len(y) / dims
	if n < 2 {
		return
	}
	var mean float64
	for i := 0; i < n; i++ {
		mean += y[i*dims]
	}
	mean /= float64(n)
	var ss float64
	for i := 0; i < n; i++ {
		dv := y[i*dims] - mean
		ss += dv * dv
	}
	cur := math.Sqrt(ss / float64(n-1))
	if cur == 0 || math.IsNaN(cur) || math.IsInf(cur, 0) {
		return
	}
	f := sd / cur
	for k := range y {
		y[k] *= f
	}
}
