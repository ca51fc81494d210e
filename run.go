package nightjar

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"runtime/debug"
	"strings"
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
	MapPage   string // path of map.html, the interactive map
	Report    *Report
	// Map holds the N×Dims map positions, row-major, rows in input order
	// (nil when Resume found the run already finished).
	Map []float64
	// AlreadyFinished is set by Resume on a run that had nothing left to do.
	AlreadyFinished bool
}

// Embed creates the run directory dir (it must not exist, be empty, or hold
// only a run that never finished reading its input, which is replaced),
// records the settings and the source in its manifest, and runs every
// phase: read the table, find each row's neighbours, calibrate the
// affinities, optimise the map with checkpoints, write embedding.parquet,
// map.png and report.json.
//
// One process at a time writes into a run directory: Embed takes its writer
// lock first and returns a *checkpoint.HeldError (a user fault) naming the
// holder when another live process has it. The first manifest written is
// complete (settings, input fingerprint, run id).
//
// Cancelling ctx stops the run: in the optimiser after the current
// iteration, with a checkpoint written; before it at once, the phase under
// way to be redone. Embed then returns a *StoppedError and Resume continues
// the run. obs receives progress and may be nil. Errors the caller can fix
// satisfy IsUserFault.
func Embed(ctx context.Context, src Source, dir string, s Settings, rt Runtime, obs Observer) (*Result, error) {
	return embed(ctx, src, dir, s, rt, obs, false)
}

// EmbedOrResume is Embed for a job that a batch scheduler may start again
// and again: it starts the run if dir holds none, continues it if dir holds
// the same run (the same settings; Resume then checks the input's
// fingerprint), and refuses with a *RunDirError naming a difference if the
// settings differ. With an in-memory source, the copy of the table saved in
// the run directory is the one used, and only the settings are compared.
func EmbedOrResume(ctx context.Context, src Source, dir string, s Settings, rt Runtime, obs Observer) (*Result, error) {
	return embed(ctx, src, dir, s, rt, obs, true)
}

func embed(ctx context.Context, src Source, dir string, s Settings, rt Runtime, obs Observer, again bool) (*Result, error) {
	obs = observerOrQuiet(obs)
	if err := rt.fill(nil); err != nil {
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
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, &RunDirError{Dir: dir, Msg: errorText(err)}
	}
	lock, err := checkpoint.AcquireLock(dir)
	if err != nil {
		return nil, err
	}
	defer lock.Release()
	if _, err := os.Stat(filepath.Join(dir, checkpoint.ManifestName)); err == nil {
		run, err := checkpoint.Open(dir)
		switch {
		case err == nil && neverRead(run):
			obs.Note(fmt.Sprintf("%s holds a run that never finished reading its input; replacing it", dir))
			if err := clearRun(run); err != nil {
				return nil, err
			}
		case err == nil && again:
			if err := sameSettings(run, src, s); err != nil {
				return nil, err
			}
			return resumeLocked(ctx, run, lock, rt, obs)
		case err == nil:
			return nil, &RunDirError{Dir: dir, Msg: "already holds a run; continue it with 'nightjar resume " + dir + "', or choose another directory"}
		default:
			return nil, &RunDirError{Dir: dir, Msg: errorText(err)}
		}
	}
	run, err := checkpoint.CreateFS(dir, rt.FS)
	if err != nil {
		return nil, &RunDirError{Dir: dir, Msg: errorText(err)}
	}
	if err := run.RemoveTemporaries(); err != nil {
		return nil, err
	}
	path, id, label, err := src.resolve(run.Dir, obs)
	if err != nil {
		return nil, err
	}
	s.Input, s.Inputs = path, src.inputs()
	if id != "" {
		s.ID = id
	}
	if label != "" {
		s.Label = label
	}
	fp, err := inputFingerprint(s)
	if err != nil {
		return nil, &ingest.InputError{File: s.inputName(), Reason: errorText(err), Err: err}
	}
	params, err := json.Marshal(s)
	if err != nil {
		return nil, fmt.Errorf("encoding settings: %w", err)
	}
	m := run.Manifest()
	m.Tool, m.Version = "nightjar", Version
	m.Params, m.Input, m.Runtime = params, fp, rt.kept()
	m.Phase, m.Status = checkpoint.PhaseCreated, checkpoint.StatusRunning
	m.Iterations = s.Iterations
	if err := run.SaveManifest(m); err != nil {
		return nil, err
	}
	return execute(ctx, run, lock, s, rt, false, obs)
}

// neverRead tells whether a run stopped before it finished reading its
// input: nothing computed from the input was saved, so it can be replaced.
func neverRead(run *checkpoint.Run) bool {
	m := run.Manifest()
	return m.Input.ValuesHash == "" && m.Status != checkpoint.StatusFinished
}

// clearRun removes a run's manifest and the files it saved, keeping the
// directory and its lock.
func clearRun(run *checkpoint.Run) error {
	entries, err := os.ReadDir(run.Dir)
	if err != nil {
		return fmt.Errorf("listing %s: %w", run.Dir, err)
	}
	for _, e := range entries {
		n := e.Name()
		if n == checkpoint.LockName || n == checkpoint.HolderName || !e.Type().IsRegular() {
			continue
		}
		if n == checkpoint.ManifestName || n == checkpoint.PrevManifestName || strings.HasSuffix(n, checkpoint.Extension) ||
			n == FileEmbedding || n == FileMap || n == FileMapPage || n == FileReport {
			if err := os.Remove(filepath.Join(run.Dir, n)); err != nil {
				return fmt.Errorf("replacing the run in %s: %w", run.Dir, err)
			}
		}
	}
	return nil
}

// sameSettings refuses to continue a run whose recorded settings differ
// from s (the input path and, for an in-memory source, the id and label
// columns come from the source and are not compared).
func sameSettings(run *checkpoint.Run, src Source, s Settings) error {
	old, err := settingsOf(run)
	if err != nil {
		return err
	}
	if src.path != "" {
		abs, err := filepath.Abs(src.path)
		if err != nil {
			return err
		}
		s.Input, s.Inputs = abs, src.inputs()
	} else {
		s.Input, s.ID, s.Label = old.Input, old.ID, old.Label
	}
	for _, o := range SettingOptions() {
		a, _ := old.Get(o.Name)
		b, _ := s.Get(o.Name)
		if a != b {
			if o.Name == "input" {
				return &RunDirError{Dir: run.Dir, Msg: fmt.Sprintf("holds a run of another input (%s, not %s); choose another directory, or continue it with 'nightjar resume %s --input %s' if the file moved", a, b, run.Dir, b)}
			}
			return &RunDirError{Dir: run.Dir, Msg: fmt.Sprintf("holds a run with other settings (--%s %s, not %s); choose another directory, or continue it as it is with 'nightjar resume %s'", o.Name, a, b, run.Dir)}
		}
	}
	return nil
}

// Resume continues the run in dir from its newest valid checkpoint,
// skipping the phases whose results are saved. A resumed run ends with the
// same bits as one never interrupted. It takes the run's writer lock (see
// Embed). It refuses (a *RunDirError) if the input changed since the run
// began, unless rt.Force; rt.Input gives the input's new location if it
// moved (its values must be the same). Checkpoint cadences that rt leaves
// at 0 are those given when the run was created. On a finished run it
// returns its report with AlreadyFinished set.
func Resume(ctx context.Context, dir string, rt Runtime, obs Observer) (*Result, error) {
	obs = observerOrQuiet(obs)
	if _, err := os.Stat(filepath.Join(dir, checkpoint.ManifestName)); err != nil {
		return nil, &RunDirError{Dir: dir, Msg: "is not a run directory (no " + checkpoint.ManifestName + ")"}
	}
	lock, err := checkpoint.AcquireLock(dir)
	if err != nil {
		return nil, err
	}
	defer lock.Release()
	run, err := checkpoint.Open(dir)
	if err != nil {
		return nil, &RunDirError{Dir: dir, Msg: errorText(err)}
	}
	return resumeLocked(ctx, run, lock, rt, obs)
}

// resumeLocked continues run, whose lock the caller holds.
func resumeLocked(ctx context.Context, run *checkpoint.Run, lock *checkpoint.Lock, rt Runtime, obs Observer) (*Result, error) {
	if run.Fallback != "" {
		obs.Warn(run.Fallback)
	}
	if err := rt.fill(run.Manifest().Runtime); err != nil {
		return nil, err
	}
	run.FS = rt.FS
	m := run.Manifest()
	if m.Status == checkpoint.StatusFinished {
		res := newResult(run)
		res.AlreadyFinished = true
		res.Report, _ = ReadReport(run.Path(FileReport))
		return res, nil
	}
	if err := run.RemoveTemporaries(); err != nil {
		return nil, err
	}
	s, err := settingsOf(run)
	if err != nil {
		return nil, err
	}
	if rt.Input != "" {
		abs, err := filepath.Abs(rt.Input)
		if err != nil {
			return nil, err
		}
		if _, err := os.Stat(abs); err != nil {
			return nil, &ingest.InputError{File: rt.Input, Reason: errorText(err), Err: err}
		}
		if abs != s.Input {
			obs.Note(fmt.Sprintf("reading the input from its new location %s (recorded: %s)", abs, s.Input))
		}
		s.Input = abs
	}
	return execute(ctx, run, lock, s, rt, true, obs)
}

// settingsOf decodes and checks the settings a run's manifest records. A
// setting this version does not know is refused rather than dropped: the
// run would continue without it and end with other bits.
func settingsOf(run *checkpoint.Run) (Settings, error) {
	s := DefaultSettings()
	m := run.Manifest()
	if err := json.Unmarshal(m.Params, &s); err != nil {
		if unknown := (*UnknownSettingsError)(nil); errors.As(err, &unknown) {
			return s, &RunDirError{Dir: run.Dir, Msg: fmt.Sprintf("its manifest records settings this build of nightjar (%s) does not have (%s): the run was made by another build (nightjar %s); continue it with that build", Version, strings.Join(unknown.Keys, ", "), m.Version)}
		}
		return s, &RunDirError{Dir: run.Dir, Msg: fmt.Sprintf("manifest parameters unreadable: %v", err)}
	}
	s.fillLegacy()
	if err := s.Validate(); err != nil {
		return s, &RunDirError{Dir: run.Dir, Msg: fmt.Sprintf("manifest parameters: %v", err)}
	}
	return s, nil
}

func newResult(run *checkpoint.Run) *Result {
	return &Result{Dir: run.Dir, Embedding: run.Path(FileEmbedding), MapImage: run.Path(FileMap), MapPage: run.Path(FileMapPage)}
}

// job holds one invocation's state while it runs the phases.
type job struct {
	ctx   context.Context
	run   *checkpoint.Run
	lock  *checkpoint.Lock
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
func execute(ctx context.Context, run *checkpoint.Run, lock *checkpoint.Lock, s Settings, rt Runtime, resumed bool, obs Observer) (res *Result, err error) {
	j := &job{ctx: ctx, run: run, lock: lock, s: s, rt: rt, obs: obs, start: time.Now()}
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
	if err := j.checkMemory(0); err != nil {
		return nil, err
	}
	p, err := j.affinities()
	if err != nil {
		return nil, err
	}
	if err := j.checkMemory(int64(len(p.Vals))); err != nil {
		return nil, err
	}
	if p.N <= exactKLRows {
		j.P = p // for the exact KL of the report
	}
	y, err := j.optimise(&p)
	if err != nil {
		return nil, err
	}
	j.freeMemory() // the optimiser's P is garbage now: the outputs and the scores need little

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

// await runs fn, a phase before the optimiser or the scores after it, and
// returns its error, or returns at once when the context is cancelled: the
// phase is then abandoned (fn finishes in the background and its result is
// dropped; it writes nothing, and reads no file that a stop rewrites) and
// redone on resume. The StoppedError counts the optimiser's iterations
// done: none before it.
func (j *job) await(fn func() error) error {
	if j.ctx.Err() != nil {
		return j.stopped(j.rep.Optimiser.Iterations, false)
	}
	done := make(chan error, 1)
	go func() { done <- fn() }()
	select {
	case err := <-done:
		return err
	case <-j.ctx.Done():
		return j.stopped(j.rep.Optimiser.Iterations, false)
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
// neighbour search or the optimiser runs, when the runtime options ask for
// it, and returns the function that restores it. Measured at 1,000,000 demo
// rows: the whole process stayed under 2 GiB through the neighbour phase
// (2.01 GB against 2.11 GB), for about the same time. In the optimiser the
// saved states (copies of the map, its update and gains) are the garbage:
// with the default target of 100 % the heap grew well past the live arrays
// before a collection (300,000 demo rows: 781 MB resident through the
// optimiser, about 550 MB with the lower target).
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
