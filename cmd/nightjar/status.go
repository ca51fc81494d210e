package main

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"time"

	"nightjar"
)

func runStatus(_ context.Context, args []string, stdout, stderr io.Writer) error {
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
	st, err := nightjar.Status(pos[0])
	if err != nil {
		return err
	}
	if *asJSON {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(st)
	}
	fmt.Fprintf(stdout, "run:        %s\ninput:      %s\nstatus:     %s (phase %s)\n", st.Dir, st.Input, st.Status, st.Phase)
	if st.Holder != nil {
		fmt.Fprintf(stdout, "process:    %s\n", st.Holder)
	}
	fmt.Fprintf(stdout, "iteration:  %d of %d\n", st.Iteration, st.Iterations)
	if st.Iteration > 0 {
		fmt.Fprintf(stdout, "KL:         %.4f\n", st.KL)
	}
	if st.CheckpointAge >= 0 {
		fmt.Fprintf(stdout, "checkpoint: %s ago\n", seconds(st.CheckpointAge))
	}
	fmt.Fprintf(stdout, "elapsed:    %s (last update %s)\n", seconds(st.ElapsedSeconds), st.Updated.Format(time.RFC3339))
	if st.HasEstimateLeft {
		fmt.Fprintf(stdout, "time left:  about %s for the optimiser at its measured pace\n", seconds(st.LeftSeconds))
	}
	if st.Warning != "" {
		fmt.Fprintf(stdout, "warning:    %s\n", st.Warning)
	}
	if st.Advice != "" {
		fmt.Fprintf(stdout, "next:       %s\n", st.Advice)
	}
	return nil
}

func seconds(s float64) time.Duration {
	return time.Duration(s * float64(time.Second)).Round(time.Second)
}
