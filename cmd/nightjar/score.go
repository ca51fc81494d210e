package main

import (
	"context"
	"encoding/json"
	"io"
	"runtime"

	"nightjar"
)

func runScore(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("score", "(re)compute the quality scores of a finished run and update its report.json",
		"nightjar score --run runs/cells --sample 5000", stderr)
	dir := fs.String("run", "", "finished run directory (required)")
	opt := nightjar.ScoreOptions{}
	fs.IntVar(&opt.Sample, "sample", 2000, "rows sampled for the scores")
	fs.IntVar(&opt.K, "k", nightjar.ScoreK, "neighbourhood size of trustworthiness, continuity and preservation")
	fs.IntVar(&opt.Threads, "threads", runtime.GOMAXPROCS(0), "worker threads")
	if _, err := parseFlags(fs, args, 0); err != nil {
		return err
	}
	if *dir == "" {
		return usagef("score: --run DIR is required")
	}
	q, err := nightjar.Score(ctx, *dir, opt)
	if err != nil {
		return err
	}
	enc := json.NewEncoder(stdout)
	enc.SetIndent("", "  ")
	return enc.Encode(q)
}
