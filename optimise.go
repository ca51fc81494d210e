package nightjar

import (
	"errors"
	"fmt"
	"time"

	"nightjar/checkpoint"
	"nightjar/gradient"
	"nightjar/ingest"
)

// optimise runs the optimiser from the newest state (or the start map),
// writing states as it goes. The optimiser takes P over (its rows are
// renumbered in their own memory), so optimise clears *pp: the caller's P
// is gone when it returns.
func (j *job) optimise(pp *CSR) ([]float64, error) {
	n := pp.N
	params, err := j.s.gradientParams(n, j.rt.Threads)
	if err != nil {
		return nil, err
	}
	restored, err := j.restoreState(n)
	if err != nil {
		return nil, err
	}
	var y0 []float64
	switch {
	case restored != nil:
		y0 = restored.Y
	case j.s.Start == "subsample" && j.s.StartRows < n:
		if err := j.await(func() (err error) { y0, err = j.subsampleStart(*pp); return err }); err != nil {
			return nil, err
		}
	default:
		x, err := j.features()
		if err != nil {
			return nil, err
		}
		if y0, err = initialMap(x, j.s.Dims, j.rt.Threads); err != nil {
			return nil, err
		}
	}
	// The features read back for the start are garbage now: hand them
	// back before P's renumbering allocates (at 1,000,000 rows the peak
	// was 2.49 GB with them in the heap, against about 1.9 GB).
	j.freeMemory()
	// The optimiser renumbers P in P's own memory (1.5 times P at once
	// instead of twice: 0.5 GB less at 1,000,000 rows), so the caller's
	// reference goes first: nothing may hold P's arrays but the optimiser.
	// A small table's P is kept for the report's exact KL (j.P) and is
	// copied instead.
	newOpt := gradient.NewConsume
	if j.P.N > 0 {
		newOpt = gradient.New
	}
	opt, err := newOpt(takeCSR(pp), y0, params)
	if err != nil {
		return nil, err
	}
	j.freeMemory() // P as loaded or built is garbage now: reclaim it before it can stack up
	if restored != nil {
		if err := opt.Restore(*restored); err != nil {
			return nil, fmt.Errorf("restoring the optimiser state of %s: %w", j.run.Dir, err)
		}
		j.obs.Note(fmt.Sprintf("optimiser state restored at iteration %d (KL %.4f)", restored.Iteration, restored.KL))
	}
	j.setStatus(checkpoint.StatusRunning, checkpoint.PhaseOptimising)
	defer j.lowGC()()
	if err := j.iterate(opt, params.Iterations, n); err != nil {
		return nil, err
	}
	j.rep.Optimiser.Repulsion = opt.Method().String()
	j.rep.Optimiser.LearningRate = params.EffectiveLearningRate(n)
	return opt.Y(), nil
}

// restoreState loads the newest saved optimiser state, or nil when there is none.
func (j *job) restoreState(n int) (*gradient.State, error) {
	iter, secs, warns, err := j.run.LoadState()
	if errors.Is(err, checkpoint.ErrNoState) {
		return nil, nil
	}
	if err != nil {
		return nil, err
	}
	for _, w := range warns {
		j.obs.Warn(w.Error())
	}
	st, err := stateFromSections(secs, n, j.s.Dims)
	if err == nil && st.Iteration != iter {
		err = fmt.Errorf("state file says iteration %d, its name %d", st.Iteration, iter)
	}
	if err != nil {
		return nil, fmt.Errorf("restoring the optimiser state of %s: %w", j.run.Dir, err)
	}
	return &st, nil
}

// iterate steps the optimiser to its end, writing a checkpoint every
// CheckpointEvery iterations and CheckpointMinutes minutes. A cancelled
// context stops it after the current iteration, with a checkpoint.
func (j *job) iterate(opt *gradient.Optimizer, total, n int) error {
	t0 := time.Now()
	startIter := opt.Iteration()
	lastSave := time.Now()
	bar := phaseBar(j.obs, "optimising", int64(total))
	// The bar's KL costs a pass over P with a logarithm per entry: show it
	// less often on large tables.
	klEvery := 10
	if n > 100000 {
		klEvery = 50
	}
	for !opt.Done() {
		if err := opt.Step(); err != nil {
			return err
		}
		it := opt.Iteration()
		bar(int64(it), int64(total))
		if wantDetail(j.obs) && (it%klEvery == 0 || opt.Done()) {
			j.obs.Detail(fmt.Sprintf("optimising (KL %.4f)", opt.KL()))
		}
		stop := j.ctx.Err() != nil
		due := it%j.rt.CheckpointEvery == 0 || time.Since(lastSave).Minutes() >= j.rt.CheckpointMinutes
		if (due || stop) && !opt.Done() {
			if err := j.saveState(opt, time.Since(t0).Seconds(), it-startIter); err != nil {
				return err
			}
			lastSave = time.Now()
		}
		if stop && !opt.Done() {
			return j.stopped(it, true)
		}
	}
	j.obs.Done()
	j.rep.PhaseMemory["optimiser"] = peakMemory()
	j.rep.Optimiser.Iterations = opt.Iteration()
	j.rep.Optimiser.KL = opt.KL()
	j.rep.Optimiser.Seconds = time.Since(t0).Seconds()
	j.obs.Note(fmt.Sprintf("optimised %d iterations in %.1fs, KL %.4f", opt.Iteration()-startIter, j.rep.Optimiser.Seconds, opt.KL()))
	return nil
}

// saveState writes the optimiser state and records progress in the manifest.
func (j *job) saveState(opt *gradient.Optimizer, secs float64, iters int) error {
	st := opt.State()
	if err := j.run.SaveState(st.Iteration, stateSections(st, j.s.Seed)); err != nil {
		return fmt.Errorf("writing a checkpoint: %w", err)
	}
	if j.lock != nil {
		if err := j.lock.Beat(); err != nil {
			j.obs.Warn(err.Error())
		}
	}
	j.mu.Lock()
	defer j.mu.Unlock()
	m := j.run.Manifest()
	m.Iteration, m.KL, m.Updated = st.Iteration, st.KL, time.Now()
	m.Elapsed = j.elapsed0 + time.Since(j.start).Seconds()
	if iters > 0 {
		m.SecondsPerIteration = secs / float64(iters)
	}
	return j.run.SaveManifest(m)
}

// initialMap returns the first dims principal-component scores of x, scaled
// so the first column has standard deviation 1e-4 (Kobak & Berens, Nat.
// Commun. 10:5416, 2019).
func initialMap(x Matrix, dims, threads int) ([]float64, error) {
	if x.D < dims {
		return nil, &SettingError{Name: "dims", Msg: fmt.Sprintf("is %d, but the table has %d feature columns; a %d-D map needs at least %d", dims, x.D, dims, dims)}
	}
	pca, err := ingest.FitPCA(x, dims, threads)
	if err != nil {
		return nil, fmt.Errorf("initial map: %w", err)
	}
	y := pca.Project(x, threads)
	gradient.InitScale(y, dims, 1e-4)
	return y, nil
}

// takeCSR returns *pp and clears it, so that the value returned is the
// only reference to P's arrays.
func takeCSR(pp *CSR) CSR {
	p := *pp
	*pp = CSR{}
	return p
}
