package main

import (
	"encoding/json"
	"fmt"
	"io"
	"time"

	"nightjar/checkpoint"
)

// runStatus prints where a run stands.
type statusOut struct {
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

func runStatus(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("status", "show a run's phase, iteration, current KL, time spent and an estimate of the time left",
		"nightjar status runs/cells --json", stderr)
	asJSON := fs.Bool("json", false, "print JSON for scripts")
	pos, err := parseFlags(fs, args, 1)
	if err != nil {
		return err
	}
	if len(pos) != 1 {
		return usagef("status: name the run directory (nightjar status DIR)")
	}
	run, err := checkpoint.Open(pos[0])
	if err != nil {
		return &usageError{err.Error()}
	}
	m := run.Manifest()
	st := statusOut{Dir: run.Dir, Phase: m.Phase, Status: m.Status, Iteration: m.Iteration, Iterations: m.Iterations,
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
	if *asJSON {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(st)
	}
	fmt.Fprintf(stdout, "run:        %s\ninput:      %s\nstatus:     %s (phase %s)\n", st.Dir, st.Input, st.Status, st.Phase)
	fmt.Fprintf(stdout, "iteration:  %d of %d\n", st.Iteration, st.Iterations)
	if st.Iteration > 0 {
		fmt.Fprintf(stdout, "KL:         %.4f\n", st.KL)
	}
	fmt.Fprintf(stdout, "elapsed:    %s (last update %s)\n", time.Duration(st.ElapsedSeconds*float64(time.Second)).Round(time.Second), st.Updated.Format(time.RFC3339))
	if st.HasEstimateLeft {
		fmt.Fprintf(stdout, "time left:  about %s for the optimiser at its measured pace\n", time.Duration(st.LeftSeconds*float64(time.Second)).Round(time.Second))
	}
	if st.ResumeCommand != "" {
		fmt.Fprintf(stdout, "continue:   %s\n", st.ResumeCommand)
	}
	if m.Status == checkpoint.StatusRunning {
		fmt.Fprintf(stdout, "note:       if no nightjar process is working on this run any more, it was killed; continue it with: nightjar resume %s\n", run.Dir)
	}
	return nil
}
