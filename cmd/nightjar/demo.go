package main

import (
	"context"
	"fmt"
	"io"
	"os"

	"nightjar"
)

func runDemo(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	s := nightjar.DefaultSettings()
	r := defaultRuntime()
	var quiet bool
	fs := newFlags("demo", "generate the built-in fictional survey (invented data) and map it like 'embed' would",
		"nightjar demo --rows 20000 --run demo-run", stderr)
	rows := fs.Int("rows", 20000, "rows of the fictional survey to generate")
	dir := fs.String("run", "", "run directory (default: a new ./nightjar-demo, ./nightjar-demo-2, …)")
	addSettings(fs, &s, "input", "id", "label", "features", "skip-invalid")
	addRuntime(fs, &r, &quiet)
	if _, err := parseFlags(fs, args, 0); err != nil {
		return err
	}
	if *rows < 10 {
		return usagef("demo: --rows must be at least 10, got %d", *rows)
	}
	if *dir == "" {
		*dir = freeDir("nightjar-demo")
	}
	u := newUI(stderr, quiet)
	res, err := nightjar.Embed(ctx, nightjar.DemoSource(*rows, s.Seed, r.Threads), *dir, s, r, u)
	if err != nil {
		return err
	}
	printResult(stdout, res)
	return nil
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
