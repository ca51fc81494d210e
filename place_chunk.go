package nightjar

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"slices"
	"time"

	"nightjar/checkpoint"
	"nightjar/internal/par"
)

// placeChunk is the number of new rows placed and saved at a time: a kill
// loses at most one chunk's work (a few seconds).
const placeChunk = 8192

// placed holds the results of consecutive rows of a placement.
type placed struct {
	y            []float64 // n×dims map positions
	cost0, cost1 []float64 // each row's KL term at the start and the end
	vote         []int32   // voted reference label (index into classes), −1 without labels
	share        []float64 // its share of the vote
	nearest      []float64 // distance to the nearest reference row
	hits, probes int64     // recall check: neighbours found, rows checked
}

func (p *placed) n() int { return len(p.share) }

func (p *placed) append(q *placed) {
	p.y = append(p.y, q.y...)
	p.cost0 = append(p.cost0, q.cost0...)
	p.cost1 = append(p.cost1, q.cost1...)
	p.vote = append(p.vote, q.vote...)
	p.share = append(p.share, q.share...)
	p.nearest = append(p.nearest, q.nearest...)
	p.hits += q.hits
	p.probes += q.probes
}

// chunkKey identifies the placement a chunk file belongs to.
type chunkKey struct {
	Reference string `json:"reference_run_id"`
	Input     string `json:"input_hash"`
	First     int    `json:"first_row"`
	Chunk     int    `json:"chunk"`
	Rows      int    `json:"rows"`
}

const kindChunk = "placement-chunk"

// placeAll places every row of the placement, chunk by chunk, loading the
// chunks an earlier invocation saved.
func (j *placeJob) placeAll() (*placed, error) {
	n := j.x.N
	chunks := (n + placeChunk - 1) / placeChunk
	if err := os.MkdirAll(filepath.Join(j.dir, dirChunks), 0o755); err != nil {
		return nil, err
	}
	all := &placed{}
	bar := phaseBar(j.obs, "placing rows", int64(n))
	var searchSec, optSec float64
	loaded := 0
	for c := range chunks {
		lo, hi := c*placeChunk, min(n, (c+1)*placeChunk)
		key := chunkKey{Reference: j.st.ReferenceID, Input: j.st.Input.ValuesHash, First: j.st.First + lo, Chunk: c, Rows: hi - lo}
		path := filepath.Join(j.dir, dirChunks, fmt.Sprintf("chunk-%06d%s", c, checkpoint.Extension))
		res, err := j.loadChunk(path, key)
		if err == nil {
			all.append(res)
			loaded++
			bar(int64(hi), int64(n))
			continue
		}
		if !errors.Is(err, fs.ErrNotExist) {
			j.obs.Warn(fmt.Sprintf("%v; placing those rows again", err))
		}
		if j.ctx.Err() != nil {
			return nil, j.stopped(lo)
		}
		var ss, osec float64
		done := make(chan error, 1)
		go func() {
			var err error
			res, ss, osec, err = j.placeRows(lo, hi, func(d int64) { bar(int64(lo)+d, int64(n)) })
			done <- err
		}()
		select {
		case err = <-done:
		case <-j.ctx.Done():
			return nil, j.stopped(lo)
		}
		if err != nil {
			return nil, err
		}
		searchSec, optSec = searchSec+ss, optSec+osec
		if err := j.saveChunk(path, key, res); err != nil {
			return nil, err
		}
		all.append(res)
		bar(int64(hi), int64(n))
	}
	j.obs.Done()
	if loaded > 0 {
		j.obs.Note(fmt.Sprintf("%d of %d chunks of rows loaded from an earlier invocation", loaded, chunks))
	}
	j.rep.Neighbours.Seconds, j.rep.Optimiser.Seconds = searchSec, optSec
	j.rep.Phases["neighbours"], j.rep.Phases["optimiser"] = searchSec, optSec
	return all, nil
}

// stopped returns the error of a placement stopped before row lo (every
// chunk before it is saved).
func (j *placeJob) stopped(lo int) error {
	j.obs.Done()
	return &StoppedError{Dir: j.dir, Phase: "placing", Iteration: lo, Saved: true, Err: context.Cause(j.ctx)}
}

// placeRows places rows [lo, hi) of the placement and returns the time of
// the neighbour search and of the optimisation.
func (j *placeJob) placeRows(lo, hi int, progress func(done int64)) (*placed, float64, float64, error) {
	t0 := time.Now()
	q := Matrix{N: hi - lo, D: j.x.D, Data: j.x.Data[lo*j.x.D : hi*j.x.D]}
	k, n, d := j.k, hi-lo, j.ref.s.Dims
	var idx []int32
	var d2 []float32
	var err error
	if j.index != nil {
		idx, d2, err = j.index.approx(j.rows, q, k, nil, j.rt.Threads, progress)
	} else {
		idx, d2, err = j.rows.exact(q, k, nil, j.rt.Threads, progress)
	}
	if err != nil {
		return nil, 0, 0, err
	}
	res := &placed{y: make([]float64, n*d), cost0: make([]float64, n), cost1: make([]float64, n),
		vote: make([]int32, n), share: make([]float64, n), nearest: make([]float64, n)}
	if j.recall != nil {
		res.hits, res.probes, err = j.checkRecall(q, lo, idx)
		if err != nil {
			return nil, 0, 0, err
		}
	}
	searchSec := time.Since(t0).Seconds()
	t1 := time.Now()
	p := make([]float64, n*k)
	j.startRows(idx, d2, p, res)
	if err := j.field.Place(res.y, idx, p, k, res.cost0, res.cost1); err != nil {
		return nil, 0, 0, err
	}
	return res, searchSec, time.Since(t1).Seconds(), nil
}

// startNeighbours is the number of nearest reference neighbours whose
// median map position is a new row's start. Kobak & Berens (Nat. Commun.
// 10:5416, 2019) place new points at the median of their 10 nearest
// neighbours (from memory); measured on held-out rows (bench/RESULTS.md,
// "Placing new rows"), the median of the 10 nearest starts closer to where
// the steps end than the median of all k = 90: MNIST test digits 2,001–4,000
// into a map of 10,000 training digits, mean KL term 2.49 at the start and
// 10-NN label accuracy in the map 0.898 (all 90: 3.06 and 0.82 on the
// first 2,000), and after the steps 2.25 and 0.922 (all 90: 2.36, 0.89);
// 5,000 held-out demo rows, 2.40 against 2.41 after the steps.
const startNeighbours = 10

// startRows calibrates each row's P_{j|i} over its k neighbours
// (knn.Calibrate, the reference's perplexity), puts the row at the
// coordinate-wise median of the map positions of its startNeighbours
// nearest, and counts the neighbours' labels weighted by P_{j|i}.
func (j *placeJob) startRows(idx []int32, d2 []float32, p []float64, res *placed) {
	k, d, n := j.k, j.ref.s.Dims, res.n()
	calibrate := j.ref.s.calibration()
	par.Blocks(n, 256, j.rt.Threads, func(_, _, lo, hi int) {
		m := min(k, startNeighbours)
		coord := make([]float64, m)
		weight := make([]float64, len(j.ref.classes))
		for i := lo; i < hi; i++ {
			nb, pi := idx[i*k:(i+1)*k], p[i*k:(i+1)*k]
			calibrate(pi, d2[i*k:(i+1)*k])
			for c := range d {
				for a, l := range nb[:m] {
					coord[a] = j.ref.y[int(l)*d+c]
				}
				slices.Sort(coord)
				res.y[i*d+c] = placeMedian(coord)
			}
			res.nearest[i] = math.Sqrt(float64(d2[i*k]))
			res.vote[i], res.share[i] = -1, 0
			if j.ref.class != nil {
				res.vote[i], res.share[i] = placeVote(nb, pi, j.ref.class, weight)
			}
		}
	})
}

// vote returns the label with the largest sum of P_{j|i} over the
// neighbours nb (nearest first) and that sum; a tie goes to the tied label
// with the nearest member. weight is zeroed scratch, left zeroed.
func placeVote(nb []int32, p []float64, class []int32, weight []float64) (int32, float64) {
	for a, l := range nb {
		weight[class[l]] += p[a]
	}
	best, top := int32(-1), -1.0
	for _, l := range nb {
		if w := weight[class[l]]; w > top {
			best, top = class[l], w
		}
	}
	var sum float64
	for a, l := range nb {
		sum += p[a]
		weight[class[l]] = 0
	}
	return best, top / sum
}

// checkRecall compares the index's neighbours of the sampled rows among
// rows [lo, lo+q.N) with the exact search's.
func (j *placeJob) checkRecall(q Matrix, lo int, idx []int32) (hits, probes int64, err error) {
	var rows []int
	for i := range q.N {
		if j.recall[int32(lo+i)] {
			rows = append(rows, i)
		}
	}
	if len(rows) == 0 {
		return 0, 0, nil
	}
	sub := Matrix{N: len(rows), D: q.D, Data: make([]float32, 0, len(rows)*q.D)}
	for _, i := range rows {
		sub.Data = append(sub.Data, q.Row(i)...)
	}
	k := j.k
	truth, _, err := j.rows.exact(sub, k, nil, j.rt.Threads, nil)
	if err != nil {
		return 0, 0, err
	}
	for a, i := range rows {
		hits += int64(countShared(idx[i*k:(i+1)*k], truth[a*k:(a+1)*k]))
	}
	return hits, int64(len(rows)), nil
}

// countShared counts the values of a found in b.
func countShared(a, b []int32) int {
	set := make(map[int32]bool, len(b))
	for _, v := range b {
		set[v] = true
	}
	n := 0
	for _, v := range a {
		if set[v] {
			n++
		}
	}
	return n
}

func (j *placeJob) saveChunk(path string, key chunkKey, r *placed) error {
	kb, err := json.Marshal(key)
	if err != nil {
		return err
	}
	secs := []checkpoint.Section{
		{Name: "key", Data: kb},
		{Name: "y", Data: checkpoint.View(r.y)},
		{Name: "cost0", Data: checkpoint.View(r.cost0)},
		{Name: "cost1", Data: checkpoint.View(r.cost1)},
		{Name: "vote", Data: checkpoint.View(r.vote)},
		{Name: "share", Data: checkpoint.View(r.share)},
		{Name: "nearest", Data: checkpoint.View(r.nearest)},
		{Name: "recall", Data: checkpoint.EncodeValues([]int64{r.hits, r.probes})},
	}
	if err := checkpoint.WriteFile(path, kindChunk, secs); err != nil {
		return fmt.Errorf("saving placed rows: %w", err)
	}
	return nil
}

// loadChunk reads a chunk saved by saveChunk and checks it is the one
// wanted (key) and complete.
func (j *placeJob) loadChunk(path string, key chunkKey) (*placed, error) {
	secs, err := checkpoint.ReadFile(path, kindChunk)
	if err != nil {
		return nil, err
	}
	var got chunkKey
	if err := jsonSection(secs, "key", &got); err != nil || got != key {
		return nil, fmt.Errorf("%s belongs to another placement", path)
	}
	r := &placed{}
	n, d := key.Rows, j.ref.s.Dims
	for _, f := range []struct {
		name string
		dst  *[]float64
		len  int
	}{{"y", &r.y, n * d}, {"cost0", &r.cost0, n}, {"cost1", &r.cost1, n}, {"share", &r.share, n}, {"nearest", &r.nearest, n}} {
		v, err := checkpoint.SectionValues[float64](secs, f.name)
		if err != nil || len(v) != f.len {
			return nil, fmt.Errorf("%s: section %q damaged", path, f.name)
		}
		*f.dst = v
	}
	if r.vote, err = checkpoint.SectionValues[int32](secs, "vote"); err != nil || len(r.vote) != n {
		return nil, fmt.Errorf("%s: section %q damaged", path, "vote")
	}
	rc, err := checkpoint.SectionValues[int64](secs, "recall")
	if err != nil || len(rc) != 2 {
		return nil, fmt.Errorf("%s: section %q damaged", path, "recall")
	}
	r.hits, r.probes = rc[0], rc[1]
	return r, nil
}
