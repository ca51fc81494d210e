package nightjar

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"runtime/debug"
	"sync"
	"time"

	"nightjar/checkpoint"
	"nightjar/ingest"
)

// Names of the files in a run directory besides the manifest and the
// optimiser states.
const (
	FileEmbedding = "embedding.parquet"
	FileMap       = "map.png"
	FileReport    = "report.json"
	fileGraph     = "neighbours.njg"
	fileP         = "affinities.njp"
)

// Result is what a finished run produced.
type Result struct {
	Dir       string // the run directory
	Embedding string // path of embedding.parquet
	MapImage  string // path of map.png
	Report    *Report
	// Map holds the N×Dims map positions, row-major, rows in input order
	// (nil when Resume found the run already finished).
	Map []float64
	// AlreadyFinished is set by Resume on a run that had nothing left to do.
	AlreadyFinished bool
}

// Embed creates the run directory dir (it must not exist, or be empty),
// records the settings and the source in its manifest, and runs every
// phase: read the table, find each row's neighbours, calibrate the
// affinities, optimise the map with checkpoints, write embedding.parquet,
// map.png and report.json.
//
// Cancelling ctx stops the run: in the optimiser after the current
// iteration, with a checkpoint written; before it at once, the phase under
// way to be redone. Embed then returns a *StoppedError and Resume continues
// the run. obs receives progress and may be nil. Errors the caller can fix
// satisfy IsUserFault.
func Embed(ctx context.Context, src Source, dir string, s Settings, rt Runtime, obs Observer) (*Result, error) {
	obs = observerOrQuiet(obs)
	if err := rt.Validate(); err != nil {
		return nil, err
	}
	s.Input = "-" // checked after the source is resolved
	if err := s.Validate(); err != nil {
		return nil, err
	}
	// A missing input file is refused before the run directory exists.
	if err := src.check(); err != nil {
		return nil, err
	}
	run, err := checkpoint.Create(dir)
	if err != nil {
		return nil, &RunDirError{Dir: dir, Msg: errorText(err)}
	}
	path, id, label, err := src.resolve(run.Dir, obs)
	if err != nil {
		return nil, err
	}
	s.Input = path
	if id != "" {
		s.ID = id
	}
	if label != "" {
		s.Label = label
	}
	params, err := json.Marshal(s)
	if err != nil {
		return nil, fmt.Errorf("encoding settings: %w", err)
	}
	m := run.Manifest()
	m.Tool, m.Version = "nightjar", Version
	m.Params = params
	m.Phase, m.Status = checkpoint.PhaseCreated, checkpoint.StatusRunning
	m.Iterations = s.Iterations
	if err := run.SaveManifest(m); err != nil {
		return nil, err
	}
	return execute(ctx, run, s, rt, false, obs)
}

// Resume continues the run in dir from its newest valid checkpoint,
// skipping the phases whose results are saved. A resumed run ends with the
// same bits as one never interrupted. It refuses (a *RunDirError) if the
// input changed since the run began, unless rt.Force. On a finished run it
// returns its report with AlreadyFinished set.
func Resume(ctx context.Context, dir string, rt Runtime, obs Observer) (*Result, error) {
	obs = observerOrQuiet(obs)
	if err := rt.Validate(); err != nil {
		return nil, err
	}
	run, err := checkpoint.Open(dir)
	if err != nil {
		return nil, &RunDirError{Dir: dir, Msg: errorText(err)}
	}
	m := run.Manifest()
	if m.Status == checkpoint.StatusFinished {
		res := newResult(run)
		res.AlreadyFinished = true
		res.Report, _ = ReadReport(run.Path(FileReport))
		return res, nil
	}
	s, err := settingsOf(run)
	if err != nil {
		return nil, err
	}
	return execute(ctx, run, s, rt, true, obs)
}

// settingsOf decodes and checks the settings a run's manifest records.
func settingsOf(run *checkpoint.Run) (Settings, error) {
	s := DefaultSettings()
	if err := json.Unmarshal(run.Manifest().Params, &s); err != nil {
		return s, &RunDirError{Dir: run.Dir, Msg: fmt.Sprintf("manifest parameters unreadable: %v", err)}
	}
	s.fillLegacy()
	if err := s.Validate(); err != nil {
		return s, &RunDirError{Dir: run.Dir, Msg: fmt.Sprintf("manifest parameters: %v", err)}
	}
	return s, nil
}

func newResult(run *checkpoint.Run) *Result {
	return &Result{Dir: run.Dir, Embedding: run.Path(FileEmbedding), MapImage: run.Path(FileMap)}
}

// job holds one invocation's state while it runs the phases.
type job struct {
	ctx   context.Context
	run   *checkpoint.Run
	s     Settings
	rt    Runtime
	obs   Observer
	start time.Time

	mu       sync.Mutex // guards the manifest
	rep      Report
	table    *ingest.Table
	P        CSR     // kept for the exact KL of the report (small tables only)
	elapsed0 float64 // seconds of work recorded before this invocation
}

// execute runs (or, when resumed, continues) every phase of a run.
func execute(ctx context.Context, run *checkpoint.Run, s Settings, rt Runtime, resumed bool, obs Observer) (res *Result, err error) {
	j := &job{ctx: ctx, run: run, s: s, rt: rt, obs: obs, start: time.Now()}
	j.rep = newReport(s, rt)
	defer func() {
		if err != nil {
			obs.Done()
			var stop *StoppedError
			if !errors.As(err, &stop) {
				j.setStatus(checkpoint.StatusFailed, "")
			}
		}
	}()
	m := run.Manifest()
	j.elapsed0 = m.Elapsed
	if resumed {
		j.rep.Resumed = true
		obs.Note(fmt.Sprintf("resuming %s at phase %q, iteration %d", run.Dir, m.Phase, m.Iteration))
	}
	j.setStatus(checkpoint.StatusRunning, "")
	if err := j.readInput(resumed); err != nil {
		return nil, err
	}
	p, err := j.affinities()
	if err != nil {
		return nil, err
	}
	if p.N <= exactKLRows {
		j.P = p // for the exact KL of the report
	}
	y, err := j.optimise(&p)
	if err != nil {
		return nil, err
	}
	if err := j.finish(y); err != nil {
		return nil, err
	}
	res = newResult(run)
	res.Report, res.Map = &j.rep, y
	return res, nil
}

// setStatus records status (and phase, when not empty) in the manifest.
func (j *job) setStatus(status, phase string) {
	j.mu.Lock()
	defer j.mu.Unlock()
	m := j.run.Manifest()
	m.Status = status
	if phase != "" {
		m.Phase = phase
	}
	switch {
	case status == checkpoint.StatusFailed:
		m.Phase = checkpoint.PhaseFailed
	case m.Phase == checkpoint.PhaseFailed:
		// A failed run being resumed starts again from its files.
		m.Phase = checkpoint.PhaseCreated
	}
	m.Updated = time.Now()
	m.Elapsed = j.elapsed0 + time.Since(j.start).Seconds()
	if err := j.run.SaveManifest(m); err != nil {
		j.obs.Warn(err.Error())
	}
}

// stopped marks the run interrupted and returns the error that says so.
func (j *job) stopped(iteration int, saved bool) error {
	j.obs.Done()
	j.setStatus(checkpoint.StatusInterrupted, "")
	return &StoppedError{Dir: j.run.Dir, Phase: j.run.Manifest().Phase, Iteration: iteration, Saved: saved, Err: context.Cause(j.ctx)}
}

// await runs fn, a phase before the optimiser, and returns its error, or
// returns at once when the context is cancelled: the phase is then
// abandoned (fn finishes in the background and its result is dropped; it
// writes nothing to the run directory) and redone on resume.
func (j *job) await(fn func() error) error {
	if j.ctx.Err() != nil {
		return j.stopped(0, false)
	}
	done := make(chan error, 1)
	go func() { done <- fn() }()
	select {
	case err := <-done:
		return err
	case <-j.ctx.Done():
		return j.stopped(0, false)
	}
}

// freeMemory hands memory that became garbage back to the operating system,
// when the runtime options ask for it.
func (j *job) freeMemory() {
	if j.rt.ReturnMemory {
		debug.FreeOSMemory()
	}
}

// lowGC lowers the garbage collector's target to 20 % while an approximate
// neighbour search runs, when the runtime options ask for it, and returns
// the function that restores it. Measured at 1,000,000 demo rows: the whole
// process stayed under 2 GiB through the neighbour phase (2.01 GB against
// 2.11 GB), for about the same time.
func (j *job) lowGC() func() {
	if !j.rt.ReturnMemory {
		return func() {}
	}
	const percent = 20
	old := debug.SetGCPercent(percent)
	if old < percent {
		debug.SetGCPercent(old)
	}
	return func() { debug.SetGCPercent(old) }
}
