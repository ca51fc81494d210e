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
		"nightjar score runs/cells --sample 5000", stderr)
	opt := nightjar.ScoreOptions{}
	fs.IntVar(&opt.Sample, "sample", 2000, "rows sampled for the scores")
	fs.IntVar(&opt.K, "k", nightjar.ScoreK, "neighbourhood size of trustworthiness, continuity and preservation")
	fs.IntVar(&opt.Threads, "threads", runtime.GOMAXPROCS(0), "worker threads")
	pos, err := parseFlags(fs, args, 1)
	if err != nil {
		return err
	}
	if len(pos) != 1 {
		return usagef("score: name the run directory (nightjar score DIR)")
	}
	q, err := nightjar.Score(ctx, pos[0], opt)
	if err != nil {
		return err
	}
	enc := json.NewEncoder(stdout)
	enc.SetIndent("", "  ")
	return enc.Encode(q)
}
