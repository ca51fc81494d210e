package main

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"

	"nightjar/checkpoint"
)

const embedExample = "nightjar embed --input cells.parquet --run runs/cells --id cell_id --label cell_type --features 'pc_*'"

func runEmbed(args []string, stdout, stderr io.Writer) error {
	s := defaultSettings()
	var r runtimeOpts
	var features listFlag
	fs := newFlags("embed", "map a feature table into a run directory (embedding.parquet, map.png, report.json)", embedExample, stderr)
	fs.StringVar(&s.Input, "input", "", "feature table: Parquet, Arrow IPC or CSV with a header row (required)")
	runDir := fs.String("run", "", "run directory to create; it holds checkpoints and the outputs (required)")
	fs.StringVar(&s.ID, "id", "", "column carried through to the output to join on (optional)")
	fs.StringVar(&s.Label, "label", "", "column used to colour the map and score label accuracy (optional)")
	fs.Var(&features, "features", "feature columns: a `LIST` of names and glob patterns, comma-separated (default: every numeric column but --id and --label)")
	fs.BoolVar(&s.SkipInvalid, "skip-invalid", false, "drop rows with NaN, Inf or empty features instead of stopping, and report how many")
	addSettingsFlags(fs, &s)
	addRuntimeFlags(fs, &r)
	if _, err := parseFlags(fs, args, 0); err != nil {
		return err
	}
	s.Features = features
	if s.Input == "" {
		return usagef("embed: --input FILE is required (try: %s)", embedExample)
	}
	if *runDir == "" {
		return usagef("embed: --run DIR is required (try: %s)", embedExample)
	}
	if err := s.check(); err != nil {
		return err
	}
	if err := r.check(); err != nil {
		return err
	}
	abs, err := filepath.Abs(s.Input)
	if err != nil {
		return fmt.Errorf("resolving %s: %w", s.Input, err)
	}
	if _, err := os.Stat(abs); err != nil {
		return &usageError{fmt.Sprintf("%s: %v", s.Input, errors.Unwrap(err))}
	}
	s.Input = abs
	return startRun(*runDir, s, r, stdout, stderr)
}

// startRun creates the run directory and runs every phase.
func startRun(dir string, s settings, r runtimeOpts, stdout, stderr io.Writer) error {
	run, err := checkpoint.Create(dir)
	if err != nil {
		return &usageError{err.Error()}
	}
	return continueCreated(run, s, r, stdout, stderr)
}

// continueCreated records the settings in a new run's manifest and runs every phase.
func continueCreated(run *checkpoint.Run, s settings, r runtimeOpts, stdout, stderr io.Writer) error {
	params, err := json.Marshal(s)
	if err != nil {
		return fmt.Errorf("encoding settings: %w", err)
	}
	m := run.Manifest()
	m.Tool, m.Version = "nightjar", version
	m.Params = params
	m.Phase, m.Status = checkpoint.PhaseCreated, checkpoint.StatusRunning
	m.Iterations = s.Iterations
	if err := run.SaveManifest(m); err != nil {
		return err
	}
	return execute(run, s, r, false, stdout, stderr)
}
