package nightjar

import (
	"strconv"
	"time"

	"nightjar/checkpoint"
)

// RunStatus is where a run stands, read from its manifest.
type RunStatus struct {
	Dir             string    `json:"dir"`
	Phase           string    `json:"phase"`
	Status          string    `json:"status"`
	Iteration       int       `json:"iteration"`
	Iterations      int       `json:"iterations"`
	KL              float64   `json:"kl"`
	ElapsedSeconds  float64   `json:"elapsed_seconds"`
	LeftSeconds     float64   `json:"estimated_seconds_left"`
	Updated         time.Time `json:"updated"`
	Input           string    `json:"input"`
	ToolVersion     string    `json:"tool_version"`
	ResumeCommand   string    `json:"resume_command,omitempty"`
	HasEstimateLeft bool      `json:"has_estimate"`
}

// Status reads where the run in dir stands: phase, status, iteration, KL,
// time spent and, from the optimiser's measured pace, the time left.
func Status(dir string) (*RunStatus, error) {
	run, err := checkpoint.Open(dir)
	if err != nil {
		return nil, &RunDirError{Dir: dir, Msg: errorText(err)}
	}
	m := run.Manifest()
	st := &RunStatus{Dir: run.Dir, Phase: m.Phase, Status: m.Status, Iteration: m.Iteration, Iterations: m.Iterations,
		KL: m.KL, ElapsedSeconds: m.Elapsed, Updated: m.Updated, Input: m.Input.Path, ToolVersion: m.Version}
	if m.Status == checkpoint.StatusRunning {
		// The manifest is written at phase changes and checkpoints; a run
		// that is still going has worked since its last update too.
		st.ElapsedSeconds += time.Since(m.Updated).Seconds()
	}
	if m.Status != checkpoint.StatusFinished && m.SecondsPerIteration > 0 && m.Iterations > m.Iteration {
		st.LeftSeconds = m.SecondsPerIteration * float64(m.Iterations-m.Iteration)
		st.HasEstimateLeft = true
	}
	if m.Status == checkpoint.StatusInterrupted || m.Status == checkpoint.StatusFailed {
		st.ResumeCommand = "nightjar resume " + run.Dir
	}
	return st, nil
}

// The status values of RunStatus.Status.
const (
	StatusRunning     = checkpoint.StatusRunning
	StatusInterrupted = checkpoint.StatusInterrupted
	StatusFailed      = checkpoint.StatusFailed
	StatusFinished    = checkpoint.StatusFinished
)

func itoa(n int) string { return strconv.Itoa(n) }
