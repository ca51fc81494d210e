package knn

import (
	"cmp"
	"fmt"
	"math"
	"slices"
	"sync/atomic"

	"nightjar/internal/core"
	"nightjar/internal/par"
)

// Neighbours returns the number of neighbours to compute for a perplexity on
// n rows: k = min(n−1, ⌊3·perplexity⌋) (van der Maaten 2014, JMLR 15, §4.1),
// and at least 1 when n ≥ 2. It returns 0 for n < 2.
func Neighbours(perplexity float64, n int) int {
	if n < 2 {
		return 0
	}
	k := n - 1
	if f := math.Floor(3 * perplexity); f < float64(k) {
		k = int(f)
	}
	return max(k, 1)
}

// PerplexityError reports a perplexity too large for the number of rows. The
// rule is 3·perplexity ≤ N−1 (each row needs ⌊3·perplexity⌋ neighbours, van der
// Maaten 2014), so the largest perplexity that works is Max = (N−1)/3.
type PerplexityError struct {
	Rows       int
	Perplexity float64
	Max        float64
}

// Error says which perplexity would work, rounded down to two decimals so
// that the value shown is itself accepted.
func (e *PerplexityError) Error() string {
	return fmt.Sprintf("perplexity %g is too large for %d rows (it needs 3·perplexity ≤ rows−1): use a perplexity of at most %.2f",
		e.Perplexity, e.Rows, math.Floor(e.Max*100)/100)
}

// CheckPerplexity returns nil if perplexity can be used on n rows: it must be
// finite and at least 1 (the entropy ln(perplexity) of a distribution is ≥ 0),
// else a plain error; and 3·perplexity ≤ n−1, else a *PerplexityError.
func CheckPerplexity(perplexity float64, n int) error {
	if math.IsNaN(perplexity) || math.IsInf(perplexity, 0) || perplexity < 1 {
		return fmt.Errorf("perplexity %g must be a number ≥ 1", perplexity)
	}
	if 3*perplexity > float64(n-1) {
		return &PerplexityError{Rows: n, Perplexity: perplexity, Max: float64(n-1) / 3}
	}
	return nil
}

// TooFewRowsError reports a table with too few rows for the number of
// neighbours asked of each row: a row has at most Rows−1 others.
type TooFewRowsError struct {
	Rows       int
	Neighbours int
}

// Error says how many neighbours would work.
func (e *TooFewRowsError) Error() string {
	return fmt.Sprintf("%d neighbours per row need at least %d rows, the table has %d: use at most %d neighbours",
		e.Neighbours, e.Neighbours+1, e.Rows, max(e.Rows-1, 0))
}

// CheckNeighbours returns nil if each of n rows can have k neighbours
// (1 ≤ k ≤ n−1), else a *TooFewRowsError (or a plain error for k < 1).
func CheckNeighbours(k, n int) error {
	if k < 1 {
		return fmt.Errorf("%d neighbours per row: at least 1 is needed", k)
	}
	if k > n-1 {
		return &TooFewRowsError{Rows: n, Neighbours: k}
	}
	return nil
}

// Calibration constants (van der Maaten & Hinton 2008, JMLR 9, §2: σ_i found by
// binary search to match the perplexity; the tolerance and step cap are
// common practice).
const (
	// EntropyTolerance is the largest accepted |H_i − ln(perplexity)|.
	EntropyTolerance = 1e-5
	// MaxCalibrationSteps caps the bisection on β.
	MaxCalibrationSteps = 200
)

// Calibrate finds, for one row with squared neighbour distances d2 (k = len(d2)
// values), the precision β = 1/(2σ²) at which the conditional probabilities
//
//	p_j = exp(−β·d2_j) / Σ_l exp(−β·d2_l)
//
// have entropy H = −Σ p_j ln p_j equal to ln(perplexity) within
// EntropyTolerance, by bisection on β (at most MaxCalibrationSteps steps; van
// der Maaten & Hinton 2008, JMLR 9). It writes p into dst and returns β, the
// entropy H reached (natural log) and the number of steps taken. All arithmetic
// is float64; the row's smallest d2 is subtracted before exponentiating (it
// cancels in p) so that nothing underflows to a zero sum.
//
// If all d2 are equal (e.g. a row whose neighbours are all exact duplicates)
// p is uniform whatever β: Calibrate returns β = 0, H = ln k, 0 steps. If the
// target is out of reach (perplexity > k, or < the number of neighbours tied
// at the smallest distance) it returns the closest it got after the step cap.
//
// Preconditions: len(dst) == len(d2) ≥ 1, d2 values finite, perplexity > 0.
// It panics if the lengths differ.
func Calibrate(dst []float64, d2 []float32, perplexity float64) (beta, entropy float64, iters int) {
	if len(dst) != len(d2) {
		panic(fmt.Sprintf("knn: Calibrate: len(dst) = %d, len(d2) = %d", len(dst), len(d2)))
	}
	k := len(d2)
	dmin, dmax := d2[0], d2[0]
	for _, v := range d2 {
		dmin = min(dmin, v)
		dmax = max(dmax, v)
	}
	if dmin == dmax {
		for j := range dst {
			dst[j] = 1 / float64(k)
		}
		return 0, math.Log(float64(k)), 0
	}
	var mean float64
	for _, v := range d2 {
		mean += float64(v) - float64(dmin)
	}
	mean /= float64(k)
	target := math.Log(perplexity)
	// eval sets dst to p(β) and returns H(β) = ln Z + β·Σ p_j s_j, s = d2 − min.
	eval := func(b float64) float64 {
		var z, ws float64
		for j, v := range d2 {
			s := float64(v) - float64(dmin)
			w := math.Exp(-b * s)
			dst[j] = w
			z += w
			ws += w * s
		}
		for j := range dst {
			dst[j] /= z
		}
		return math.Log(z) + b*ws/z
	}
	lo, hi := 0.0, math.Inf(1)
	beta = 1 / mean // scale-free start: β·s is O(1) for typical s
	for iters = 1; ; iters++ {
		entropy = eval(beta)
		diff := entropy - target
		if math.Abs(diff) < EntropyTolerance || iters == MaxCalibrationSteps {
			return beta, entropy, iters
		}
		if diff > 0 { // too flat: sharpen
			lo = beta
			if math.IsInf(hi, 1) {
				beta *= 2
			} else {
				beta = (lo + hi) / 2
			}
		} else {
			hi = beta
			beta = (lo + hi) / 2
		}
	}
}

// affinityBlock is the number of rows per unit of parallel work in Affinity.
const affinityBlock = 1024

// Affinity turns a neighbour graph into the t-SNE input affinities
//
//	p_ij = (p_{j|i} + p_{i|j}) / 2N
//
// (van der Maaten & Hinton 2008, JMLR 9, §3), where p_{j|i} is Calibrate's
// conditional probability over row i's K neighbours for the given perplexity
// and p_{j|i} = 0 for j not among them. The result is an N×N CSR with columns
// ascending in each row, exactly symmetric (P_ij and P_ji are computed by the
// same float64 expression), non-negative, with between N·K and 2·N·K entries.
// Σ P = 1 in float64 before storage; the stored float32 values sum to 1
// within 2⁻²³ (two roundings of relative size ≤ 2⁻²⁴).
// Probabilities are computed in float64 and stored as float32. The work is
// spread over threads goroutines (below 1 means 1); the result is
// bit-identical for any threads.
//
// Preconditions: g.N ≥ 2, 1 ≤ g.K ≤ N−1, every row's neighbours distinct, in
// [0, N) and not the row itself, distances finite and ≥ 0; the perplexity passes
// CheckPerplexity(perplexity, g.N) (a *PerplexityError when 3·perplexity > N−1)
// and is ≤ g.K. Otherwise an error is returned.
//
// Memory beyond the result: 8·N·K bytes of row-sorted neighbour lists with
// their conditional probabilities, and 4·N bytes of counters. At N = 10⁶,
// K = 90 that is 720 MB, and P itself 8 bytes per entry, at most 1.44 GB.
func Affinity(g *core.Graph, perplexity float64, threads int) (*core.CSR, error) {
	cal, err := perplexityRows(g, perplexity)
	if err != nil {
		return nil, err
	}
	return affinity(g, cal, threads, false)
}

// AffinityConsume is Affinity for a graph that is no longer needed: it keeps
// the conditional probabilities in g's own Index and Dist2 storage instead of
// new lists, which saves 8·N·K bytes at the peak (720 MB at N = 10⁶,
// K = 90), and leaves g with nil Index and Dist2, on success and on error.
// The result is the same as Affinity's, bit for bit.
func AffinityConsume(g *core.Graph, perplexity float64, threads int) (*core.CSR, error) {
	cal, err := perplexityRows(g, perplexity)
	if err != nil {
		consumed(g)
		return nil, err
	}
	return affinityConsume(g, cal, threads)
}

// UniformAffinity is Affinity with the uniform conditional probabilities
//
//	p_{j|i} = 1/K for the K neighbours j of row i, 0 otherwise,
//
// symmetrised as there, p_ij = (p_{j|i} + p_{i|j}) / 2N: every entry is
// 1/(2NK) (one-way edge) or 1/(NK) (mutual neighbours). Böhm, Berens & Kobak
// ("Attraction-repulsion spectrum in neighbor embeddings", JMLR 23, 2022)
// show that t-SNE maps made with such affinities over a small K (K = 15
// there, from memory) are close to those calibrated by perplexity; with K = 15 instead of
// ⌊3·30⌋ = 90 the graph and P hold about a sixth of the entries. Distances
// are checked as in Affinity but not used; duplicate rows are neighbours
// like any other. The preconditions, the result's layout and its
// bit-identity for any threads are Affinity's, without the perplexity.
func UniformAffinity(g *core.Graph, threads int) (*core.CSR, error) {
	return affinity(g, UniformRow, threads, false)
}

// UniformAffinityConsume is UniformAffinity for a graph that is no longer
// needed, as AffinityConsume is for Affinity.
func UniformAffinityConsume(g *core.Graph, threads int) (*core.CSR, error) {
	return affinityConsume(g, UniformRow, threads)
}

// affinityConsume is affinity on g's own storage, leaving g empty.
func affinityConsume(g *core.Graph, cal rowCalibration, threads int) (*core.CSR, error) {
	p, err := affinity(g, cal, threads, true)
	consumed(g)
	return p, err
}

// consumed leaves g (if any) without its lists, as the Consume functions
// promise on success and on error.
func consumed(g *core.Graph) {
	if g != nil {
		g.Index, g.Dist2 = nil, nil
	}
}

// A rowCalibration writes the conditional probabilities p_{j|i} of one row
// into p, given the row's squared neighbour distances d2.
type rowCalibration func(p []float64, d2 []float32)

// perplexityRows checks a perplexity against g and returns the calibration
// by Calibrate.
func perplexityRows(g *core.Graph, perplexity float64) (rowCalibration, error) {
	if err := checkGraph(g); err != nil {
		return nil, err
	}
	if err := CheckPerplexity(perplexity, g.N); err != nil {
		return nil, err
	}
	if perplexity > float64(g.K) {
		return nil, fmt.Errorf("affinities: perplexity %g exceeds the %d neighbours per row of the graph", perplexity, g.K)
	}
	return func(p []float64, d2 []float32) { Calibrate(p, d2, perplexity) }, nil
}

// UniformRow writes the uniform conditional probabilities 1/len(p) into p
// (the distances d2 are not used): UniformAffinity's p_{j|i}, for a row
// outside the graph such as a new row placed into a finished map.
func UniformRow(p []float64, d2 []float32) {
	w := 1 / float64(len(p))
	for j := range p {
		p[j] = w
	}
}

func checkGraph(g *core.Graph) error {
	if g == nil || g.N < 2 || g.K < 1 || g.K >= g.N || len(g.Index) != g.N*g.K || len(g.Dist2) != g.N*g.K {
		return fmt.Errorf("affinities: malformed neighbour graph")
	}
	return nil
}

func affinity(g *core.Graph, cal rowCalibration, threads int, reuse bool) (*core.CSR, error) {
	if err := checkGraph(g); err != nil {
		return nil, err
	}
	threads = max(1, threads)
	// With reuse the conditional probabilities overwrite the graph row by
	// row: a row is read in full before it is written.
	c := conditionals{n: g.N, k: g.K}
	if reuse {
		c.cols, c.vals = g.Index, g.Dist2
	} else {
		c.cols, c.vals = make([]int32, g.N*g.K), make([]float32, g.N*g.K)
	}
	if err := c.fill(g, cal, threads); err != nil {
		return nil, err
	}
	P := c.layout(threads)
	c.symmetrise(P, threads)
	return P, nil
}

// conditionals are the conditional probabilities p_{j|i} of every row i,
// the row's K entries sorted by column j: cols[i·K+t], vals[i·K+t].
type conditionals struct {
	n, k int
	cols []int32
	vals []float32
}

// colVal is one sparse entry while building P.
type colVal struct {
	c int32
	v float32
}

// fill calibrates every row of g and stores its probabilities sorted by
// column, checking distances and neighbour numbers on the way.
func (c *conditionals) fill(g *core.Graph, cal rowCalibration, threads int) error {
	n, k := c.n, c.k
	var errs par.FirstError
	par.Blocks(n, affinityBlock, threads, func(_, _, lo, hi int) {
		p := make([]float64, k)
		pairs := make([]colVal, k)
		for i := lo; i < hi; i++ {
			d2 := g.Dist2[i*k : (i+1)*k]
			for j, v := range d2 {
				if !(v >= 0) || math.IsInf(float64(v), 1) {
					errs.Set(lo, fmt.Errorf("affinities: row %d: neighbour %d has squared distance %g", i, j, v))
					return
				}
			}
			cal(p, d2)
			for j, col := range g.Index[i*k : (i+1)*k] {
				pairs[j] = colVal{col, float32(p[j])}
			}
			slices.SortFunc(pairs, func(a, b colVal) int { return cmp.Compare(a.c, b.c) })
			for j, pr := range pairs {
				if pr.c < 0 || int(pr.c) >= n || int(pr.c) == i || (j > 0 && pairs[j-1].c == pr.c) {
					errs.Set(lo, fmt.Errorf("affinities: row %d: neighbour list has an invalid or repeated row %d", i, pr.c))
					return
				}
				c.cols[i*k+j] = pr.c
				c.vals[i*k+j] = pr.v
			}
		}
	})
	return errs.Err()
}

// has returns the position of j in row i's list, and whether it is there.
func (c *conditionals) has(i int, j int32) (int, bool) {
	return slices.BinarySearch(c.cols[i*c.k:(i+1)*c.k], j)
}

// layout returns P with its offsets and, in the tail of each row j after
// its first K slots, the one-way edges i→j (i ∉ kNN(j)) with p_{j|i}, in an
// order that depends on scheduling (symmetrise sorts them).
func (c *conditionals) layout(threads int) *core.CSR {
	n, k := c.n, c.k
	// Count the one-way edges i→j: they add an entry to row j.
	extra := make([]int32, n)
	par.Blocks(n, affinityBlock, threads, func(_, _, lo, hi int) {
		for i := lo; i < hi; i++ {
			for _, j := range c.cols[i*k : (i+1)*k] {
				if _, ok := c.has(int(j), int32(i)); !ok {
					atomic.AddInt32(&extra[j], 1)
				}
			}
		}
	})
	P := &core.CSR{N: n, Offsets: make([]int64, n+1)}
	for i := 0; i < n; i++ {
		P.Offsets[i+1] = P.Offsets[i] + int64(k) + int64(extra[i])
	}
	P.Cols = make([]int32, P.Offsets[n])
	P.Vals = make([]float32, P.Offsets[n])

	// Drop each one-way edge i→j, with p_{j|i}, into the tail of row j.
	clear(extra)
	par.Blocks(n, affinityBlock, threads, func(_, _, lo, hi int) {
		for i := lo; i < hi; i++ {
			for t, j := range c.cols[i*k : (i+1)*k] {
				if _, ok := c.has(int(j), int32(i)); !ok {
					pos := P.Offsets[j] + int64(k) + int64(atomic.AddInt32(&extra[j], 1)-1)
					P.Cols[pos] = int32(i)
					P.Vals[pos] = c.vals[i*k+t]
				}
			}
		}
	})
	return P
}

// symmetrise fills each row of P: it sorts the row's tail (whose order
// depended on scheduling), then merges it with the row's own list into
// ascending columns, p_ij = (p_{j|i} + p_{i|j}) / 2N.
func (c *conditionals) symmetrise(P *core.CSR, threads int) {
	n, k := c.n, c.k
	scale := 1 / (2 * float64(n))
	par.Blocks(n, affinityBlock, threads, func(_, _, lo, hi int) {
		var tail []colVal
		for i := lo; i < hi; i++ {
			off, end := P.Offsets[i], P.Offsets[i+1]
			tail = tail[:0]
			for pos := off + int64(k); pos < end; pos++ {
				tail = append(tail, colVal{P.Cols[pos], P.Vals[pos]})
			}
			slices.SortFunc(tail, func(a, b colVal) int { return cmp.Compare(a.c, b.c) })
			own := c.cols[i*k : (i+1)*k]
			ownV := c.vals[i*k : (i+1)*k]
			pos, a, b := off, 0, 0
			for a < k || b < len(tail) {
				if b == len(tail) || (a < k && own[a] < tail[b].c) {
					j := own[a]
					var back float64 // p_{i|j}
					if t, ok := c.has(int(j), int32(i)); ok {
						back = float64(c.vals[int(j)*k+t])
					}
					P.Cols[pos] = j
					P.Vals[pos] = float32((float64(ownV[a]) + back) * scale)
					a++
				} else {
					P.Cols[pos] = tail[b].c
					P.Vals[pos] = float32((0 + float64(tail[b].v)) * scale)
					b++
				}
				pos++
			}
		}
	})
}
