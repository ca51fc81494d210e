package nightjar

import (
	"context"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"nightjar/bench"
	"nightjar/gradient"
	"nightjar/ingest"
	"nightjar/knn"
)

// heldOut is a finished reference run and held-out rows to place into it,
// with everything the optimisation starts from computed once.
type heldOut struct {
	name  string
	ref   *reference
	x     Matrix   // the held-out rows under the metric
	label []string // their labels
	k     int
	idx   []int32   // their reference neighbours
	p     []float64 // P_{j|i}
	y0    []float64 // the median start
	exact *gradient.Field
	// Leave-one-out: sampled reference rows, their neighbours without
	// themselves, P, start, and the map's median nearest-neighbour distance.
	looRows          []int32
	looIdx           []int32
	looP, looY0      []float64
	medianNNDistance float64
}

// referenceRun makes (or reuses, when dir holds it finished) a reference run
// of the table tab with settings s.
func referenceRun(t testing.TB, dir string, tab *ingest.Table, s Settings) *reference {
	t.Helper()
	if st, err := Status(dir); err != nil || st.Status != StatusFinished {
		os.RemoveAll(dir)
		if err := os.MkdirAll(dir, 0o755); err != nil {
			t.Fatal(err)
		}
		in := filepath.Join(filepath.Dir(dir), filepath.Base(dir)+".parquet")
		writePlaceTable(t, in, tab)
		rt := DefaultRuntime()
		rt.Threads, rt.ScoreSample = 2, 0
		t0 := time.Now()
		if _, err := Embed(context.Background(), FromFile(in), dir, s, rt, nil); err != nil {
			t.Fatal(err)
		}
		t.Logf("reference run of %d rows: %.1fs", tab.N, time.Since(t0).Seconds())
	}
	ref, err := loadReference(dir, 2, nil)
	if err != nil {
		t.Fatal(err)
	}
	return ref
}

// newHeldOut prepares the placement of the rows of tab (nil for none) into
// ref, and of loo of the reference's own rows left out one at a time.
func newHeldOut(t testing.TB, name string, ref *reference, tab *ingest.Table, loo int) *heldOut {
	t.Helper()
	h := &heldOut{name: name, ref: ref, k: ref.k()}
	rows, err := newRefRows(ref.feat.X, ref.metric(), true)
	if err != nil {
		t.Fatal(err)
	}
	if h.exact, err = gradient.NewField(ref.y, gradient.PlaceParams{Dims: ref.s.Dims, Dof: ref.s.Dof, Method: gradient.Exact, Exaggeration: 1, Threads: 2}); err != nil {
		t.Fatal(err)
	}
	var d2 []float32
	if tab != nil {
		x := tab.Matrix
		if ref.feat.PCA != nil {
			sc := ref.feat.PCA.Project(x, 2)
			x = Matrix{N: x.N, D: ref.feat.PCA.K, Data: make([]float32, len(sc))}
			for i, v := range sc {
				x.Data[i] = float32(v)
			}
		}
		if h.x, err = knn.MetricRows(x, ref.metric()); err != nil {
			t.Fatal(err)
		}
		h.label = labelStrings(tab.Label)
		if h.idx, d2, err = rows.exact(h.x, h.k, nil, 2, nil); err != nil {
			t.Fatal(err)
		}
		h.p, h.y0 = startOf(ref, h.idx, d2, h.k)
	}
	if loo > 0 {
		h.looRows = looSample(ref.feat.X.N, loo)
		q := Matrix{N: len(h.looRows), D: rows.x.D}
		for _, r := range h.looRows {
			q.Data = append(q.Data, rows.x.Row(int(r))...)
		}
		if h.looIdx, d2, err = rows.exact(q, h.k, h.looRows, 2, nil); err != nil {
			t.Fatal(err)
		}
		h.looP, h.looY0 = startOf(ref, h.looIdx, d2, h.k)
		h.medianNNDistance = medianNN(ref.y, ref.s.Dims)
	}
	return h
}

// par2Sample draws size of n rows (the seeded sampler of the scores).
func looSample(n, size int) []int32 { return knn.SampleRows(n, size, 77) }

// startOf calibrates P and returns it with the median start;
// NIGHTJAR_PLACE_TUNE_PERP calibrates it at another perplexity than the
// reference run's (a measurement of TestPlaceTune only).
func startOf(ref *reference, idx []int32, d2 []float32, k int) ([]float64, []float64) {
	if v := placeEnvFloat("NIGHTJAR_PLACE_TUNE_PERP", 0); v > 0 {
		r := *ref
		r.s.Perplexity = v
		ref = &r
	}
	j := &placeJob{ref: ref, k: k, rt: Runtime{Threads: 2}}
	n := len(idx) / k
	res := &placed{y: make([]float64, n*ref.s.Dims), vote: make([]int32, n), share: make([]float64, n), nearest: make([]float64, n)}
	p := make([]float64, n*k)
	j.startRows(idx, d2, p, res)
	return p, res.y
}

// medianStart puts each row at the median of the map positions of its
// first m reference neighbours.
func medianStart(ref *reference, idx []int32, k, m int) []float64 {
	d := ref.s.Dims
	n := len(idx) / k
	y := make([]float64, n*d)
	coord := make([]float64, m)
	for i := range n {
		for c := range d {
			for a, l := range idx[i*k : i*k+m] {
				coord[a] = ref.y[int(l)*d+c]
			}
			slices.Sort(coord)
			y[i*d+c] = placeMedian(coord)
		}
	}
	return y
}

// medianNN is the median over the map's points of the distance to the
// nearest other point (exact, O(N²)).
func medianNN(y []float64, dims int) float64 {
	n := len(y) / dims
	nn := make([]float64, n)
	for i := range n {
		best := math.Inf(1)
		for j := range n {
			if j == i {
				continue
			}
			var d2 float64
			for c := range dims {
				t := y[i*dims+c] - y[j*dims+c]
				d2 += t * t
			}
			best = math.Min(best, d2)
		}
		nn[i] = math.Sqrt(best)
	}
	slices.Sort(nn)
	return placeMedian(nn)
}

// outcome is what one setting of the optimiser gives on held-out rows.
type outcome struct {
	accuracy, lowered, costStart, costEnd, looRatio float64
	seconds                                         float64
}

// run places the held-out rows with pp and measures: the 10-NN label
// accuracy among the reference in the map, the share of rows whose exact
// KL term went down from the start, its mean at the start and the end, and
// the leave-one-out median displacement over the map's median nearest-
// neighbour distance.
func (h *heldOut) run(t testing.TB, pp gradient.PlaceParams) outcome {
	t.Helper()
	f, err := gradient.NewField(h.ref.y, pp)
	if err != nil {
		t.Fatal(err)
	}
	var o outcome
	y := slices.Clone(h.y0)
	t0 := time.Now()
	if err := f.Place(y, h.idx, h.p, h.k, nil, nil); err != nil {
		t.Fatal(err)
	}
	o.seconds = time.Since(t0).Seconds()
	n, d, k := h.x.N, h.ref.s.Dims, h.k
	rows := make([]int32, n)
	for i := range rows {
		rows[i] = int32(i)
	}
	o.accuracy = mapAccuracy(h.ref, y, h.label, rows, 2)
	lowered := 0
	for i := range n {
		c0 := h.exact.PointCost(h.y0[i*d:(i+1)*d], h.idx[i*k:(i+1)*k], h.p[i*k:(i+1)*k])
		c1 := h.exact.PointCost(y[i*d:(i+1)*d], h.idx[i*k:(i+1)*k], h.p[i*k:(i+1)*k])
		o.costStart += c0 / float64(n)
		o.costEnd += c1 / float64(n)
		if c1 < c0 {
			lowered++
		}
	}
	o.lowered = float64(lowered) / float64(n)
	if h.looRows != nil {
		ly := slices.Clone(h.looY0)
		if err := f.Place(ly, h.looIdx, h.looP, k, nil, nil); err != nil {
			t.Fatal(err)
		}
		disp := make([]float64, len(h.looRows))
		for a, r := range h.looRows {
			var d2 float64
			for c := range d {
				v := ly[a*d+c] - h.ref.y[int(r)*d+c]
				d2 += v * v
			}
			disp[a] = math.Sqrt(d2)
		}
		slices.Sort(disp)
		o.looRatio = placeMedian(disp) / h.medianNNDistance
	}
	return o
}

// TestPlaceTune measures the optimiser settings of a placement on held-out
// rows (NIGHTJAR_PLACE_TUNE=1; a measurement printed for
// bench/RESULTS.md, not a check): MNIST test digits placed into a map of
// training digits (LeCun, Cortes & Burges), and held-out rows of the demo
// survey. NIGHTJAR_PLACE_TUNE_DIR keeps the reference runs between calls.
//
//	NIGHTJAR_PLACE_TUNE=1 NIGHTJAR_PLACE_TUNE_DIR=/tmp/tune go test . -run PlaceTune -v -timeout 2h
func TestPlaceTune(t *testing.T) {
	if os.Getenv("NIGHTJAR_PLACE_TUNE") == "" {
		t.Skip("a measurement: set NIGHTJAR_PLACE_TUNE=1")
	}
	dir := os.Getenv("NIGHTJAR_PLACE_TUNE_DIR")
	if dir == "" {
		dir = t.TempDir()
	}
	sets := tuneSets(t, dir)
	grid := strings.Split(placeEnvString("NIGHTJAR_PLACE_TUNE_GRID", "0,25,50,100,200/0.25,1,4/0,0.5,0.8/1,2,4/0,1"), "/")
	for _, h := range sets {
		if m := placeEnvInt("NIGHTJAR_PLACE_TUNE_START", 0); m > 0 {
			h.y0 = medianStart(h.ref, h.idx, h.k, m)
		}
		for _, steps := range placeInts(grid[0]) {
			for _, lr := range placeFloats(grid[1]) {
				for _, mom := range placeFloats(grid[2]) {
					for _, ex := range placeFloats(grid[3]) {
						for _, gains := range placeInts(grid[4]) {
							pp := gradient.PlaceParams{Dims: h.ref.s.Dims, Dof: h.ref.s.Dof, Method: gradient.Auto, Theta: 0.5,
								Steps: steps, LearningRate: lr, Momentum: mom, Exaggeration: ex, ExaggerationSteps: int(float64(steps) * placeEnvFloat("NIGHTJAR_PLACE_TUNE_EXFRAC", 0.25)), Gains: gains == 1, Threads: 2}
							o := h.run(t, pp)
							placeLogf("%s steps %d lr %g momentum %g exaggeration %g gains %d: accuracy %.4f lowered %.4f cost %.4f → %.4f loo %.3f (%.2fs)",
								h.name, steps, lr, mom, ex, gains, o.accuracy, o.lowered, o.costStart, o.costEnd, o.looRatio, o.seconds)
							if steps == 0 {
								break
							}
						}
						if steps == 0 {
							break
						}
					}
					if steps == 0 {
						break
					}
				}
				if steps == 0 {
					break
				}
			}
		}
	}
}

// tuneSets returns the held-out sets of TestPlaceTune.
func tuneSets(t *testing.T, dir string) []*heldOut {
	mdir, err := bench.MNISTDir()
	if err != nil {
		t.Skip(err)
	}
	train, err := bench.MNIST(mdir, 10000)
	if err != nil {
		t.Fatal(err)
	}
	// Digits 2,001–4,000 of the test set: not the 2,000 the MNIST test of
	// placement checks.
	test, err := bench.MNISTTest(mdir, 4000)
	if err != nil {
		t.Fatal(err)
	}
	s := DefaultSettings()
	s.ID, s.Label, s.Reduce = "id", "digit", 50
	name := "mnist10k"
	if v := os.Getenv("NIGHTJAR_PLACE_TUNE_REF"); v != "" {
		for _, kv := range strings.Split(v, ",") {
			a, b, _ := strings.Cut(kv, "=")
			if err := s.Set(a, b); err != nil {
				t.Fatal(err)
			}
		}
		name += "-" + strings.NewReplacer("=", "", ",", "-").Replace(v)
	}
	mnist := referenceRun(t, filepath.Join(dir, name), train, s)
	all := bench.Demo(25000, 21, 2)
	s = DefaultSettings()
	s.ID, s.Label = "id", "population"
	demo := referenceRun(t, filepath.Join(dir, "demo20k"), tableRows(all, 0, 20000), s)
	sets := []*heldOut{newHeldOut(t, "mnist", mnist, tableRows(test, 2000, 4000), 2000), newHeldOut(t, "demo", demo, tableRows(all, 20000, 25000), 2000)}
	if only := os.Getenv("NIGHTJAR_PLACE_TUNE_SET"); only != "" {
		sets = slices.DeleteFunc(sets, func(h *heldOut) bool { return h.name != only })
	}
	return sets
}

func placeEnvFloat(name string, def float64) float64 {
	if v, err := strconv.ParseFloat(os.Getenv(name), 64); err == nil {
		return v
	}
	return def
}
