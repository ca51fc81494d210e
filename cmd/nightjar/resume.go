package main

import (
	"encoding/json"
	"fmt"
	"io"

	"nightjar/checkpoint"
)

func runResume(args []string, stdout, stderr io.Writer) error {
	var r runtimeOpts
	fs := newFlags("resume", "continue an interrupted run from its newest valid checkpoint, skipping finished phases",
		"nightjar resume runs/cells --threads 2", stderr)
	fs.BoolVar(&r.force, "force", false, "continue even if the input file changed since the run began")
	addRuntimeFlags(fs, &r)
	pos, err := parseFlags(fs, args, 1)
	if err != nil {
		return err
	}
	if len(pos) != 1 {
		return usagef("resume: name the run directory (nightjar resume DIR)")
	}
	if err := r.check(); err != nil {
		return err
	}
	run, err := checkpoint.Open(pos[0])
	if err != nil {
		return &usageError{err.Error()}
	}
	m := run.Manifest()
	if m.Status == checkpoint.StatusFinished {
		fmt.Fprintf(stdout, "%s is finished (%d iterations, KL %.4f); nothing to resume\n", run.Dir, m.Iteration, m.KL)
		return nil
	}
	s := defaultSettings()
	if err := json.Unmarshal(m.Params, &s); err != nil {
		return &usageError{fmt.Sprintf("%s: manifest parameters unreadable: %v", run.Dir, err)}
	}
	if err := s.check(); err != nil {
		return err
	}
	return execute(run, s, r, true, stdout, stderr)
}
