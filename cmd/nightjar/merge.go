package main

import (
	"context"
	"io"

	"nightjar"
)

func runMerge(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	r := defaultRuntime()
	var quiet bool
	fs := newFlags("merge", "check that every part of a sharded placement is there exactly once and write the merged placed.parquet, map.png, map.html and report.json",
		"nightjar merge runs/week12", stderr)
	addPlaceRuntime(fs, &r, &quiet)
	pos, err := parseFlags(fs, args, 1)
	if err != nil {
		return err
	}
	if len(pos) != 1 {
		return usagef("merge: name the placement directory the shards wrote into (nightjar merge DIR)")
	}
	res, err := nightjar.MergePlacement(ctx, pos[0], r, &ui{w: stderr, quiet: quiet})
	if err != nil {
		return err
	}
	printPlaced(stdout, res, false, pos[0])
	return nil
}
