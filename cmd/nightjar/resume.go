package main

import (
	"context"
	"fmt"
	"io"

	"nightjar"
)

func runResume(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	r := defaultRuntime()
	// The checkpoint cadence given when the run was created holds unless
	// given again.
	r.CheckpointEvery, r.CheckpointMinutes = 0, 0
	var quiet bool
	fs := newFlags("resume", "continue an interrupted run from its newest valid checkpoint, skipping finished phases",
		"nightjar resume runs/cells --threads 2", stderr)
	fs.BoolVar(&r.Force, "force", false, "continue even if the input file changed since the run began")
	fs.StringVar(&r.Input, "input", "", "the input's new `FILE` if it moved since the run began (its values must be the same)")
	addRuntime(fs, &r, &quiet)
	pos, err := parseFlags(fs, args, 1)
	if err != nil {
		return err
	}
	if len(pos) != 1 {
		return usagef("resume: name the run directory (nightjar resume DIR)")
	}
	res, err := nightjar.Resume(ctx, pos[0], r, newUI(stderr, quiet))
	if err != nil {
		return err
	}
	if res.AlreadyFinished {
		iters, kl := 0, 0.0
		if res.Report != nil {
			iters, kl = res.Report.Optimiser.Iterations, res.Report.Optimiser.KL
		}
		fmt.Fprintf(stdout, "%s is finished (%d iterations, KL %.4f); nothing to resume\n", res.Dir, iters, kl)
		return nil
	}
	printResult(stdout, res)
	return nil
}
