package bench

import (
	"fmt"
	"io"
	"math"
	"math/rand/v2"

	"nightjar/ingest"
	"nightjar/internal/core"
	"nightjar/internal/par"
)

// Demo scenario constants. The latent space has demoLatent axes; the table has
// DemoFeatures columns.
const (
	// DemoFeatures is the number of feature columns of the Demo table.
	DemoFeatures = 50
	demoLatent   = 12
	demoBlock    = 8192 // rows per generation block (fixed: results do not depend on thread count)
)

// demoPop describes one labelled population of the survey: either a blob
// (Gaussian cloud with per-axis spread) or one segment of a branching lineage
// (points along a curved path, with a Gaussian tube around it).
type demoPop struct {
	name    string
	percent float64 // share of rows, in percent
	spread  float64 // blob: typical standard deviation; segment: tube width
	lineage int     // -1 for a blob; otherwise lineage number
	segment int     // 0 = stem, 1 and 2 = the two arms after the split
}

// demoPops is the cast of the Ostrel Sea survey. The shares add up to 100.
var demoPops = []demoPop{
	{"lanternmoss", 21, 2.2, -1, 0},
	{"saltbead", 14, 1.0, -1, 0},
	{"coilworm", 10, 3.0, -1, 0},
	{"glasshorn", 8, 0.7, -1, 0},
	{"duskmite", 6, 1.6, -1, 0},
	{"pebblejaw", 4.5, 0.5, -1, 0},
	{"reedlouse", 3, 4.0, -1, 0},
	{"frostspine", 1.5, 0.35, -1, 0},
	{"emberdrop", 0.3, 0.3, -1, 0}, // the rare one; placed far away below
	{"veilweed spore", 7, 0.6, 0, 0},
	{"veilweed ribbon", 6.5, 0.6, 0, 1},
	{"veilweed fan", 5, 0.6, 0, 2},
	{"sunthread bud", 5.2, 0.5, 1, 0},
	{"sunthread coil", 4.5, 0.5, 1, 1},
	{"sunthread whip", 3.5, 0.5, 1, 2},
}

// demoRare is the index in demoPops of the rare, isolated population.
const demoRare = 8

// DemoLabels returns the population names of the Demo scenario, in the order of
// their nominal shares in the scenario description (not sorted).
func DemoLabels() []string {
	out := make([]string, len(demoPops))
	for i, p := range demoPops {
		out[i] = p.name
	}
	return out
}

// DemoRareLabel is the label of the rare population of the Demo scenario.
const DemoRareLabel = "emberdrop"

// demoModel is everything about the scenario that depends on the seed but not on n.
type demoModel struct {
	centre [][demoLatent]float64 // blobs: centre; segments: unused
	axis   [][demoLatent]float64 // blobs: per-axis standard deviation
	// segments: quadratic Bézier from p0 through control c to p1
	p0, c, p1 [][demoLatent]float64
	mix       []float64 // DemoFeatures × demoLatent map, row-major
	noise     [DemoFeatures]float64
}

// Demo returns the built-in synthetic dataset of nightjar, a fictional survey:
// a drifting camera photographed n plankton organisms in the (imaginary) Ostrel
// Sea, and each photograph was reduced to 50 shape, colour and texture scores.
// Like principal-component scores, the features f01..f50 carry decreasing
// variance: the first dozen hold the structure, the tail is mostly small noise.
//
// The survey holds fifteen labelled groups that make a hard, honest test of a map:
//   - eight populations (Gaussian clouds in a 12-dimensional latent space) whose
//     shares range from 21 % of the rows down to 1.5 % and whose spreads differ by
//     a factor of ten, each stretched differently along its axes;
//   - two continuous lineages, "veilweed" and "sunthread": organisms caught at
//     every stage of growth, lying along a curved stem that splits into two curved
//     arms; each stem and arm is labelled separately (e.g. "veilweed spore",
//     "veilweed ribbon", "veilweed fan"), so a good map shows a branching shape
//     with the three colours joined end to end;
//   - one rare population, "emberdrop" (0.3 % of the rows), tight and placed far
//     from everything else in feature space, so that it should form an island of
//     its own.
//
// The latent points are mapped to 50 features by a near-orthogonal linear map
// (the identity with random mixing, orthonormalised) with decaying scales per
// latent axis, and every feature gets small Gaussian noise of decaying size.
//
// Row order is shuffled; the label column is named "population" (Strings), the
// id column "id" holds 1..n (Ints), Format is "demo" and Hash is the same
// fingerprint of the matrix that ingest computes for files. The rows are drawn in
// blocks of 8192, each from its own generator, on up to threads goroutines (below
// 1 means 1): the result is deterministic for (n, seed) and does not depend on
// threads. Memory
// is 200 bytes per row for the features and 24 for the label (strings shared)
// and id; a million rows take about a second on two cores. Group shares are exact
// up to rounding (largest remainder), so with n below a few hundred the rare
// group may be empty. Demo panics if n < 1.
func Demo(n int, seed uint64, threads int) *ingest.Table {
	if n < 1 {
		panic(fmt.Sprintf("bench.Demo: n = %d, need n ≥ 1", n))
	}
	g := newDemoGen(n, seed)
	t := g.table(0, n, threads)
	t.Hash = ingest.Fingerprint(t.Matrix)
	return t
}

// WriteDemo writes the rows of Demo(n, seed, threads) to w as Parquet, the
// bytes ingest.WriteTable writes for that table, but generated and written
// part by part (demoWriteRows rows at a time: 26 MB of features), so that
// ten million rows never sit in memory at once. w is not closed. It
// returns an error if n < 1.
func WriteDemo(w io.Writer, n int, seed uint64, threads int) error {
	if n < 1 {
		return fmt.Errorf("demo: %d rows, need at least 1", n)
	}
	g := newDemoGen(n, seed)
	tw, err := ingest.NewTableWriter(w, demoFeatureNames(), &ingest.Column{Name: "id", Ints: []int64{}}, &ingest.Column{Name: "population"})
	if err != nil {
		return err
	}
	for lo := 0; lo < n; lo += demoWriteRows {
		if err := tw.Write(g.table(lo, min(n, lo+demoWriteRows), threads)); err != nil {
			return err
		}
	}
	return tw.Close()
}

// demoWriteRows is the part WriteDemo generates at a time: a multiple of
// demoBlock (so that every block has the generator it has in Demo) and of
// ingest.WriteChunkRows (so that the row groups are WriteTable's). A
// variable so that tests can make it small.
var demoWriteRows = 2 * ingest.WriteChunkRows

// demoGen draws the rows of one demo table.
type demoGen struct {
	m    *demoModel
	pop  []uint8 // population of every row, 1 byte per row
	seed uint64
}

func newDemoGen(n int, seed uint64) *demoGen {
	// Population of every row: exact counts by largest remainder, then shuffled.
	counts := demoCounts(n)
	pop := make([]uint8, 0, n)
	for p, c := range counts {
		for range c {
			pop = append(pop, uint8(p))
		}
	}
	shuffle := rand.New(rand.NewPCG(seed, 0x6f737472656c)) // "ostrel"
	shuffle.Shuffle(n, func(i, j int) { pop[i], pop[j] = pop[j], pop[i] })
	return &demoGen{m: newDemoModel(seed), pop: pop, seed: seed}
}

// table returns rows [lo, hi) of the table (lo a multiple of demoBlock),
// without a hash.
func (g *demoGen) table(lo, hi, threads int) *ingest.Table {
	n := hi - lo
	data := make([]float32, n*DemoFeatures)
	labels := make([]string, n)
	ids := make([]int64, n)
	first := lo / demoBlock
	par.Blocks(n, demoBlock, threads, func(_, b, a, z int) {
		// One generator per block, seeded by (seed, block): the rows do not
		// depend on which goroutine takes the block, nor on the part.
		rng := rand.New(rand.NewPCG(g.seed^0x9e3779b97f4a7c15, uint64(first+b)))
		for r := a; r < z; r++ {
			i := lo + r
			g.m.row(int(g.pop[i]), rng, data[r*DemoFeatures:(r+1)*DemoFeatures])
			labels[r] = demoPops[g.pop[i]].name
			ids[r] = int64(i + 1)
		}
	})
	return &ingest.Table{
		Matrix:   core.Matrix{N: n, D: DemoFeatures, Data: data},
		Features: demoFeatureNames(),
		ID:       &ingest.Column{Name: "id", Ints: ids},
		Label:    &ingest.Column{Name: "population", Strings: labels},
		Format:   "demo",
	}
}

// demoFeatureNames returns "f01" … "f50".
func demoFeatureNames() []string {
	features := make([]string, DemoFeatures)
	for f := range features {
		features[f] = fmt.Sprintf("f%02d", f+1)
	}
	return features
}

// demoCounts splits n rows among demoPops by their shares, largest remainder
// first (ties to the earlier population), so the counts add up to n exactly.
func demoCounts(n int) []int {
	counts := make([]int, len(demoPops))
	rem := make([]float64, len(demoPops))
	total := 0
	for p, d := range demoPops {
		exact := float64(n) * d.percent / 100
		counts[p] = int(math.Floor(exact))
		rem[p] = exact - float64(counts[p])
		total += counts[p]
	}
	for ; total < n; total++ {
		best := 0
		for p := range rem {
			if rem[p] > rem[best] {
				best = p
			}
		}
		counts[best]++
		rem[best] = -1
	}
	return counts
}

// newDemoModel draws the scenario's geometry from the seed: the blobs, the
// lineages and the feature map, in that order from one generator.
func newDemoModel(seed uint64) *demoModel {
	rng := rand.New(rand.NewPCG(seed, 0x67656f6d65747279)) // "geometry"
	np := len(demoPops)
	m := &demoModel{
		centre: make([][demoLatent]float64, np),
		axis:   make([][demoLatent]float64, np),
		p0:     make([][demoLatent]float64, np),
		c:      make([][demoLatent]float64, np),
		p1:     make([][demoLatent]float64, np),
		mix:    make([]float64, DemoFeatures*demoLatent),
	}
	m.placeBlobs(rng)
	m.placeLineages(rng)
	m.drawMix(rng)
	for f := range m.noise {
		m.noise[f] = 0.12 * math.Pow(0.97, float64(f))
	}
	return m
}

// gauss returns a latent vector of independent normal values times scale.
func gauss(rng *rand.Rand, scale float64) (v [demoLatent]float64) {
	for l := range v {
		v[l] = scale * rng.NormFloat64()
	}
	return v
}

// unit returns a random direction of the latent space.
func unit(rng *rand.Rand) [demoLatent]float64 {
	v := gauss(rng, 1)
	s := math.Sqrt(dot(v, v))
	for l := range v {
		v[l] /= s
	}
	return v
}

// add returns a + s·b.
func add(a, b [demoLatent]float64, s float64) (v [demoLatent]float64) {
	for l := range v {
		v[l] = a[l] + s*b[l]
	}
	return v
}

// placeBlobs draws the centre and per-axis spreads of every blob population.
func (m *demoModel) placeBlobs(rng *rand.Rand) {
	for p, d := range demoPops {
		if d.lineage >= 0 {
			continue
		}
		m.centre[p] = gauss(rng, 9)
		for l := range m.axis[p] {
			// anisotropic: each axis between 0.4 and 1.6 times the typical spread
			m.axis[p][l] = d.spread * (0.4 + 1.2*rng.Float64())
		}
	}
	// The rare population sits 60 latent units out along a fresh direction,
	// beyond every other group (their centres are about 9·√12 ≈ 31 from the origin).
	m.centre[demoRare] = add([demoLatent]float64{}, unit(rng), 60)
}

// placeLineages draws the two lineages: root → split (stem), split → two tips
// (arms). Each segment is bent by a control point pushed sideways from its
// midpoint.
func (m *demoModel) placeLineages(rng *rand.Rand) {
	for lin := 0; lin < 2; lin++ {
		root := gauss(rng, 7)
		split := add(root, unit(rng), 16)
		dirA := unit(rng)
		dirB := unit(rng)
		// make the arms leave the split point in clearly different directions
		dirB = add(dirB, dirA, -dot(dirA, dirB))
		nb := math.Sqrt(dot(dirB, dirB))
		for l := range dirB {
			dirB[l] /= nb
		}
		tips := [2][demoLatent]float64{add(split, dirA, 14), add(split, dirB, 14)}
		for p, d := range demoPops {
			if d.lineage != lin {
				continue
			}
			from, to := root, split
			if d.segment > 0 {
				from, to = split, tips[d.segment-1]
			}
			mid := add(from, to, 1)
			for l := range mid {
				mid[l] /= 2
			}
			m.p0[p], m.p1[p] = from, to
			m.c[p] = add(mid, unit(rng), 5)
		}
	}
}

// drawMix draws the feature map: identity plus random mixing (strength 0.35,
// fading over the tail features), columns made orthonormal by Gram–Schmidt, then
// scaled by 0.86^l per latent axis so the features' variances decay like
// principal components.
func (m *demoModel) drawMix(rng *rand.Rand) {
	for f := range DemoFeatures {
		for l := range demoLatent {
			v := 0.35 * rng.NormFloat64() / math.Sqrt(DemoFeatures)
			if f >= demoLatent {
				// weaker leakage into the tail features, so they stay small
				v *= math.Pow(0.88, float64(f-demoLatent+1))
			}
			if f == l {
				v += 1
			}
			m.mix[f*demoLatent+l] = v
		}
	}
	for l := range demoLatent {
		for q := range l {
			var s float64
			for f := range DemoFeatures {
				s += m.mix[f*demoLatent+l] * m.mix[f*demoLatent+q]
			}
			for f := range DemoFeatures {
				m.mix[f*demoLatent+l] -= s * m.mix[f*demoLatent+q]
			}
		}
		var s float64
		for f := range DemoFeatures {
			s += m.mix[f*demoLatent+l] * m.mix[f*demoLatent+l]
		}
		scale := math.Pow(0.86, float64(l)) / math.Sqrt(s)
		for f := range DemoFeatures {
			m.mix[f*demoLatent+l] *= scale
		}
	}
}

func dot(a, b [demoLatent]float64) float64 {
	var s float64
	for l := range a {
		s += a[l] * b[l]
	}
	return s
}

// row draws one organism of population p into out (DemoFeatures values).
func (m *demoModel) row(p int, rng *rand.Rand, out []float32) {
	var z [demoLatent]float64
	d := demoPops[p]
	if d.lineage < 0 {
		for l := range z {
			z[l] = m.centre[p][l] + m.axis[p][l]*rng.NormFloat64()
		}
	} else {
		t := rng.Float64()
		a, b, c := (1-t)*(1-t), 2*t*(1-t), t*t
		for l := range z {
			z[l] = a*m.p0[p][l] + b*m.c[p][l] + c*m.p1[p][l] + d.spread*rng.NormFloat64()
		}
	}
	for f := range DemoFeatures {
		v := m.noise[f] * rng.NormFloat64()
		w := m.mix[f*demoLatent : (f+1)*demoLatent]
		for l, zl := range z {
			v += w[l] * zl
		}
		out[f] = float32(v)
	}
}
