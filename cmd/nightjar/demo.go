package main

import (
	"fmt"
	"io"
	"os"
	"path/filepath"

	"nightjar/bench"
	"nightjar/checkpoint"
	"nightjar/ingest"
)

func runDemo(args []string, stdout, stderr io.Writer) error {
	s := defaultSettings()
	var r runtimeOpts
	fs := newFlags("demo", "generate the built-in fictional survey (invented data) and map it like 'embed' would",
		"nightjar demo --rows 20000 --run demo-run", stderr)
	rows := fs.Int("rows", 20000, "rows of the fictional survey to generate")
	dir := fs.String("run", "", "run directory (default: a new ./nightjar-demo, ./nightjar-demo-2, …)")
	addSettingsFlags(fs, &s)
	addRuntimeFlags(fs, &r)
	if _, err := parseFlags(fs, args, 0); err != nil {
		return err
	}
	if *rows < 10 {
		return usagef("demo: --rows must be at least 10, got %d", *rows)
	}
	if err := s.check(); err != nil {
		return err
	}
	if err := r.check(); err != nil {
		return err
	}
	if *dir == "" {
		*dir = freeDir("nightjar-demo")
	}
	run, err := checkpoint.Create(*dir)
	if err != nil {
		return &usageError{err.Error()}
	}
	t := bench.Demo(*rows, s.Seed)
	input := run.Path("survey.parquet")
	if err := checkpoint.AtomicWrite(input, func(w io.Writer) error { return ingest.WriteTable(w, t) }); err != nil {
		return fmt.Errorf("writing the demo table: %w", err)
	}
	fmt.Fprintf(stderr, "demo: wrote %d rows × %d features of an invented survey to %s\n", t.N, t.D, input)
	if s.Input, err = filepath.Abs(input); err != nil {
		return err
	}
	s.ID, s.Label = t.ID.Name, t.Label.Name
	return continueCreated(run, s, r, stdout, stderr)
}

// freeDir returns base, or base-2, base-3, … whichever does not exist yet.
func freeDir(base string) string {
	name := base
	for i := 2; ; i++ {
		if _, err := os.Stat(name); os.IsNotExist(err) {
			return name
		}
		name = fmt.Sprintf("%s-%d", base, i)
	}
}
