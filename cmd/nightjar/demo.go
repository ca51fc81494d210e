package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"os"

	"nightjar"
)

func runDemo(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	s := nightjar.DefaultSettings()
	r := defaultRuntime()
	var quiet bool
	fs := newFlags("demo", "generate invented data (a fictional survey, or document embeddings) and map it like 'embed' would",
		"nightjar demo --rows 20000 --run demo-run", stderr)
	rows := fs.Int("rows", 20000, "rows to generate")
	dir := fs.String("run", "", "run directory (default: a new ./nightjar-demo, ./nightjar-demo-2, …)")
	scenario := fs.String("scenario", "survey", "survey: households of a fictional region, 50 features; documents: invented texts as 768-wide embedding vectors (one fixed_size_list column) around 40 topics, mapped with --metric cosine")
	addSettings(fs, &s, "input", "id", "label", "features", "skip-invalid")
	addRuntime(fs, &r, &quiet)
	if _, err := parseFlags(fs, args, 0); err != nil {
		return err
	}
	if *rows < 10 {
		return usagef("demo: --rows must be at least 10, got %d", *rows)
	}
	src := nightjar.DemoSource(*rows, s.Seed, r.Threads)
	switch *scenario {
	case "survey":
	case "documents":
		src = nightjar.DocumentSource(*rows, s.Seed, r.Threads)
		metricSet := false
		fs.Visit(func(f *flag.Flag) { metricSet = metricSet || f.Name == "metric" })
		if !metricSet {
			s.Metric = "cosine"
		}
	default:
		return usagef("demo: --scenario must be survey or documents, got %q", *scenario)
	}
	if *dir == "" {
		*dir = freeDir("nightjar-demo")
	}
	u := newUI(stderr, quiet)
	res, err := nightjar.Embed(ctx, src, *dir, s, r, u)
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
