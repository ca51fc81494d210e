package nightjar

import (
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	"nightjar/checkpoint"
)

// RunStatus is where a run stands, read from its manifest and its lock,
// without writing anything.
type RunStatus struct {
	Dir    string `json:"dir"`
	Phase  string `json:"phase"`
	Status string `json:"status"`
	// Live is true while a process holds the run's writer lock; Holder
	// names it (when its record could be read).
	Live            bool               `json:"live"`
	Holder          *checkpoint.Holder `json:"holder,omitempty"`
	Iteration       int                `json:"iteration"`
	Iterations      int                `json:"iterations"`
	KL              float64            `json:"kl"`
	ElapsedSeconds  float64            `json:"elapsed_seconds"`
	LeftSeconds     float64            `json:"estimated_seconds_left"`
	HasEstimateLeft bool               `json:"has_estimate"`
	// CheckpointAge is the age in seconds of the newest optimiser state
	// file, −1 when there is none.
	CheckpointAge float64   `json:"checkpoint_age_seconds"`
	Updated       time.Time `json:"updated"`
	Input         string    `json:"input"`
	ToolVersion   string    `json:"tool_version"`
	// Advice says what to do next, when something is to be done.
	Advice        string `json:"advice,omitempty"`
	ResumeCommand string `json:"resume_command,omitempty"`
	// Warning says why the manifest could not be used as it is, if so.
	Warning string `json:"warning,omitempty"`
}

// The status values of RunStatus.Status. StatusStopped is a run whose
// manifest says running while no process holds its lock: it was killed.
const (
	StatusRunning     = checkpoint.StatusRunning
	StatusInterrupted = checkpoint.StatusInterrupted
	StatusFailed      = checkpoint.StatusFailed
	StatusFinished    = checkpoint.StatusFinished
	StatusStopped     = "stopped"
)

// Status reads where the run in dir stands: phase, status, whether a
// process is working on it (and which), iteration, KL, time spent, the age
// of the last checkpoint and, from the optimiser's measured pace, the time
// left. It never writes or deletes anything, so it is safe to call on a
// live run.
func Status(dir string) (*RunStatus, error) {
	run, err := checkpoint.Open(dir)
	if err != nil {
		return nil, &RunDirError{Dir: dir, Msg: errorText(err)}
	}
	m := run.Manifest()
	st := &RunStatus{Dir: run.Dir, Phase: m.Phase, Status: m.Status, Iteration: m.Iteration, Iterations: m.Iterations,
		KL: m.KL, ElapsedSeconds: m.Elapsed, Updated: m.Updated, Input: m.Input.Path, ToolVersion: m.Version,
		Warning: run.Fallback, CheckpointAge: newestStateAge(dir)}
	held, holder, known := checkpoint.Probe(dir)
	st.Live = held
	if known && held {
		st.Holder = &holder
	}
	resume := "nightjar resume " + run.Dir
	switch {
	case held:
		st.Status = StatusRunning
		// The manifest is written at phase changes and checkpoints; a run
		// that is still going has worked since its last update too.
		st.ElapsedSeconds += time.Since(m.Updated).Seconds()
	case m.Status == checkpoint.StatusRunning:
		st.Status = StatusStopped
		st.Advice = "no process holds this run (it was killed); resume it with: " + resume
		st.ResumeCommand = resume
	case m.Status == checkpoint.StatusFinished:
	case m.Input.ValuesHash == "":
		st.Advice = "the run stopped before it finished reading its input: run the same 'nightjar embed' again (corrected if it failed) with this --run directory, and it will replace this run"
	default:
		st.Advice = "continue with: " + resume
		st.ResumeCommand = resume
	}
	if m.Status != checkpoint.StatusFinished && m.SecondsPerIteration > 0 && m.Iterations > m.Iteration {
		st.LeftSeconds = m.SecondsPerIteration * float64(m.Iterations-m.Iteration)
		st.HasEstimateLeft = true
	}
	return st, nil
}

// newestStateAge returns the age in seconds of the newest state file in dir,
// or −1 when there is none.
func newestStateAge(dir string) float64 {
	entries, err := os.ReadDir(dir)
	if err != nil {
		return -1
	}
	var newest time.Time
	for _, e := range entries {
		if !strings.HasPrefix(e.Name(), "state-") || !strings.HasSuffix(e.Name(), checkpoint.Extension) {
			continue
		}
		if fi, err := os.Stat(filepath.Join(dir, e.Name())); err == nil && fi.ModTime().After(newest) {
			newest = fi.ModTime()
		}
	}
	if newest.IsZero() {
		return -1
	}
	return time.Since(newest).Seconds()
}

func itoa(n int) string { return strconv.Itoa(n) }
