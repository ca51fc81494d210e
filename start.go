package nightjar

import (
	"fmt"
	"math/rand/v2"
	"slices"
	"time"

	"nightjar/gradient"
	"nightjar/knn"
)

// startStream separates the subsample draw from the other uses of the seed.
const startStream = 0x5ab5a3

// subsampleStart maps StartRows random rows first and places every other row
// at the P-weighted mean of the map positions of its neighbours that are
// already placed, in passes until every row is placed. Kobak & Berens 2019
// (Nat. Commun. 10:5416) start very large maps this way so that the layout
// of the clusters comes from a map small enough to settle; they place a row
// at the median of its nearest subsample rows, we use its affinities as
// weights since P is at hand. The result is scaled like the PCA start.
//
// It is deterministic for a seed, and so a resumed run that has no state yet
// recomputes the same start. A stop during it stops at once (nothing is
// saved; the start is recomputed on resume).
func (j *job) subsampleStart(P CSR) ([]float64, error) {
	x, err := j.features()
	if err != nil {
		return nil, err
	}
	d, threads := j.s.Dims, j.rt.Threads
	n := x.N
	m := min(n, j.s.StartRows)
	t0 := time.Now()
	// rand.Perm's stream is kept (not par.Sample's) so that maps made
	// with this start keep their bits.
	rng := rand.New(rand.NewPCG(j.s.Seed, startStream))
	rows := rng.Perm(n)[:m]
	slices.Sort(rows)
	sub := Matrix{N: m, D: x.D, Data: make([]float32, 0, m*x.D)}
	for _, i := range rows {
		sub.Data = append(sub.Data, x.Row(i)...)
	}
	// The subsample's own perplexity, lowered if it has too few rows
	// (uniform affinities take the graph's k, itself at most m−1).
	own := j.s
	own.Perplexity = min(j.s.Perplexity, float64(m-1)/3)
	k := own.neighbourCount(m)
	metric, _ := knn.ParseMetric(j.s.Metric)
	method := knn.ByDescent
	if m <= knn.ExactLimit/4 {
		method = knn.ByExact
	}
	g, _, err := knn.Build(sub, k, method, knn.BuildOptions{Options: knn.Options{Threads: threads, Metric: metric}, Seed: j.s.Seed})
	if err != nil {
		return nil, fmt.Errorf("subsample start: %w", err)
	}
	Psub, err := own.consumeAffinity(g, threads)
	if err != nil {
		return nil, fmt.Errorf("subsample start: %w", err)
	}
	y0, err := initialMap(sub, d, threads)
	if err != nil {
		return nil, err
	}
	params, err := j.s.gradientParams(m, threads)
	if err != nil {
		return nil, err
	}
	o, err := gradient.New(*Psub, y0, params)
	if err != nil {
		return nil, fmt.Errorf("subsample start: %w", err)
	}
	bar := phaseBar(j.obs, fmt.Sprintf("start: mapping %d sampled rows", m), int64(params.Iterations))
	for !o.Done() {
		if err := o.Step(); err != nil {
			return nil, fmt.Errorf("subsample start: %w", err)
		}
		bar(int64(o.Iteration()), int64(params.Iterations))
	}
	j.obs.Done()
	y := placeAround(P, rows, o.Y(), d)
	gradient.InitScale(y, d, 1e-4)
	j.obs.Note(fmt.Sprintf("start: %d sampled rows mapped, the other %d placed among their neighbours, %.1fs", m, n-m, time.Since(t0).Seconds()))
	j.mu.Lock()
	j.rep.Phases["start_subsample"] = time.Since(t0).Seconds()
	j.mu.Unlock()
	return y, nil
}

// placeAround returns an N×d map where row rows[s] is at ysub[s] and every
// other row at the P-weighted mean of its neighbours placed in an earlier
// pass (passes are Jacobi-style, so the result does not depend on the order
// of rows). Rows that no pass reaches (a component of P without a sampled
// row) go to the mean of the sampled rows.
func placeAround(P CSR, rows []int, ysub []float64, d int) []float64 {
	n := P.N
	y := make([]float64, n*d)
	placed := make([]bool, n)
	var centre [3]float64
	for s, i := range rows {
		copy(y[i*d:i*d+d], ysub[s*d:s*d+d])
		placed[i] = true
		for c := 0; c < d; c++ {
			centre[c] += ysub[s*d+c] / float64(len(rows))
		}
	}
	var pending []int32
	for i := range n {
		if !placed[i] {
			pending = append(pending, int32(i))
		}
	}
	type position struct {
		row int32
		at  [3]float64
	}
	var fresh []position
	for len(pending) > 0 {
		fresh = fresh[:0]
		next := pending[:0:0]
		for _, i := range pending {
			var sum [3]float64
			var w float64
			for e := P.Offsets[i]; e < P.Offsets[i+1]; e++ {
				if j := int(P.Cols[e]); placed[j] {
					p := float64(P.Vals[e])
					w += p
					for c := 0; c < d; c++ {
						sum[c] += p * y[j*d+c]
					}
				}
			}
			if w == 0 {
				next = append(next, i)
				continue
			}
			for c := 0; c < d; c++ {
				sum[c] /= w
			}
			fresh = append(fresh, position{i, sum})
		}
		if len(fresh) == 0 { // no sampled row reaches these
			for _, i := range next {
				copy(y[int(i)*d:int(i)*d+d], centre[:d])
			}
			break
		}
		for _, f := range fresh {
			copy(y[int(f.row)*d:int(f.row)*d+d], f.at[:d])
			placed[f.row] = true
		}
		pending = next
	}
	return y
}
