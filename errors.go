package nightjar

import (
	"errors"
	"fmt"

	"nightjar/checkpoint"
	"nightjar/ingest"
	"nightjar/knn"
)

// SettingError reports a setting or runtime option out of its range, or a
// use of the API that cannot work (the user's to fix).
type SettingError struct {
	Name string // the option's name (Option.Name), or "" when none applies
	Msg  string
}

func (e *SettingError) Error() string {
	if e.Name == "" {
		return e.Msg
	}
	return fmt.Sprintf("--%s %s", e.Name, e.Msg)
}

// RunDirError reports a run directory that cannot be used as asked: it
// already holds a run, holds none, is not finished, or its input changed.
type RunDirError struct {
	Dir string
	Msg string
}

func (e *RunDirError) Error() string { return fmt.Sprintf("%s: %s", e.Dir, e.Msg) }

// StoppedError is returned when the context was cancelled. In the optimiser
// the run stops after the current iteration with a checkpoint written;
// before it, the phase under way is abandoned and redone on Resume. Err is
// the context's cause.
type StoppedError struct {
	Dir       string
	Phase     string
	Iteration int  // optimiser iterations done (0 before the optimiser)
	Saved     bool // a checkpoint was written at Iteration
	Err       error
}

func (e *StoppedError) Error() string {
	if e.Saved {
		return fmt.Sprintf("stopped at iteration %d after writing a checkpoint (%v)", e.Iteration, e.Err)
	}
	return fmt.Sprintf("stopped during phase %q (%v)", e.Phase, e.Err)
}

func (e *StoppedError) Unwrap() error { return e.Err }

// Typed errors of the parts of a run, re-exported so that callers can test
// for them without importing the parts.
type (
	// InputError names the file, column and row of a fault in an input table.
	InputError = ingest.InputError
	// PerplexityError reports a perplexity too large for the table.
	PerplexityError = knn.PerplexityError
	// TooFewRowsError reports a table too small for the uniform affinities'
	// neighbours.
	TooFewRowsError = knn.TooFewRowsError
	// ZeroRowError reports an all-zero row under the cosine metric.
	ZeroRowError = knn.ZeroRowError
	// TooLargeError reports a table too large for the exact neighbour search.
	TooLargeError = knn.TooLargeError
	// CorruptError reports a damaged run-directory file.
	CorruptError = checkpoint.CorruptError
	// HeldError reports a run directory that another live process writes
	// into, naming it.
	HeldError = checkpoint.HeldError
)

// IsUserFault tells whether err is the caller's to fix — bad input, a bad
// setting, a run directory that cannot be used as asked, a damaged or
// foreign state file — rather than an internal failure.
func IsUserFault(err error) bool {
	var (
		set   *SettingError
		dir   *RunDirError
		in    *ingest.InputError
		perp  *knn.PerplexityError
		few   *knn.TooFewRowsError
		bad   *checkpoint.CorruptError
		ver   *checkpoint.VersionError
		kind  *checkpoint.KindError
		magic *checkpoint.MagicError
		big   *knn.TooLargeError
		zero  *knn.ZeroRowError
		held  *checkpoint.HeldError
		mem   *MemoryError
	)
	return errors.As(err, &set) || errors.As(err, &dir) || errors.As(err, &in) || errors.As(err, &perp) || errors.As(err, &few) ||
		errors.As(err, &bad) || errors.As(err, &ver) || errors.As(err, &kind) || errors.As(err, &magic) ||
		errors.As(err, &big) || errors.As(err, &zero) || errors.As(err, &held) || errors.As(err, &mem)
}
