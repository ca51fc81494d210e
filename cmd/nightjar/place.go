package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"path/filepath"
	"strings"

	"nightjar"
)

const placeExample = "nightjar place runs/atlas --input week12.parquet --out runs/week12 --id cell_id --label cell_type"

func runPlace(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	s := nightjar.DefaultPlaceSettings()
	r := defaultRuntime()
	var quiet, prepare bool
	fs := newFlags("place", "place the rows of a new table into the map of a finished run, the map held fixed "+
		"(placed.parquet, map.png, map.html, report.json); with --shard/--shards, one part of them for 'nightjar merge'", placeExample, stderr, "input", "out")
	out := fs.String("out", "", "directory for the placement; a stopped placement continues when the same command is run again")
	fs.BoolVar(&prepare, "prepare", false, "build the reference's neighbour index and save it in the reference directory (before starting shards), then stop")
	addOptions(fs, nightjar.PlaceOptions(), nil, s.Set, s.Get)
	addPlaceRuntime(fs, &r, &quiet)
	pos, err := parseFlags(fs, args, 1)
	if err != nil {
		return err
	}
	if len(pos) != 1 {
		return usagef("place: name the finished reference run directory (try: %s)", placeExample)
	}
	ref := pos[0]
	obs := &ui{w: stderr, quiet: quiet}
	if prepare {
		info, err := nightjar.PrepareIndex(ctx, ref, r, obs)
		if err != nil {
			return err
		}
		fmt.Fprintf(stdout, "index:   %s (%d reference rows, %d trees, %d graph neighbours per row, %.1fs)\n", info.Path, info.Rows, info.Trees, info.Fan, info.Seconds)
		return nil
	}
	if s.Input == "" {
		return usagef("place: --input FILE is required (try: %s)", placeExample)
	}
	if *out == "" {
		return usagef("place: --out DIR is required (try: %s)", placeExample)
	}
	if err := s.Validate(); err != nil {
		return err
	}
	res, err := nightjar.Place(ctx, ref, nightjar.FromFile(s.Input), *out, s, r, obs)
	if err != nil {
		return err
	}
	printPlaced(stdout, res, s.Shards > 1, *out)
	return nil
}

// addPlaceRuntime registers the runtime options a placement uses and --quiet.
func addPlaceRuntime(fs *flag.FlagSet, r *nightjar.Runtime, quiet *bool) {
	addOptions(fs, nightjar.RuntimeOptions(), []string{"checkpoint-every", "checkpoint-minutes", "prediction"}, r.Set, r.Get)
	fs.BoolVar(quiet, "quiet", false, "no progress bars (for batch jobs); warnings, errors and the final summary still print")
}

// printPlaced prints where a placement's outputs are, its label scores and
// the caution.
func printPlaced(stdout io.Writer, res *nightjar.PlaceResult, shard bool, out string) {
	if res.AlreadyFinished {
		fmt.Fprintf(stdout, "%s is finished; nothing to do\n", res.Dir)
	}
	rep := res.Report
	rows := 0
	if rep != nil {
		rows = rep.Rows
	}
	if shard {
		fmt.Fprintf(stdout, "part:    %s (%d rows)\nreport:  %s\nnext:    nightjar merge %s   (once every shard has finished)\n",
			res.Placed, rows, filepath.Join(res.Dir, nightjar.FileReport), out)
		return
	}
	fmt.Fprintf(stdout, "placed:  %s (%d rows)\nmap:     %s\n", res.Placed, rows, res.MapImage)
	if res.MapPage != "" {
		fmt.Fprintf(stdout, "page:    %s (open it in a browser)\n", res.MapPage)
	}
	fmt.Fprintf(stdout, "report:  %s\n", filepath.Join(res.Dir, nightjar.FileReport))
	if rep != nil {
		printPlaceScores(stdout, rep)
	}
	fmt.Fprintln(stdout, "caution:", nightjar.PlaceCaution)
}

func printPlaceScores(stdout io.Writer, rep *nightjar.PlaceReport) {
	var parts []string
	if r := rep.Neighbours.Recall; r != nil {
		parts = append(parts, fmt.Sprintf("neighbour recall@%d %.4f", rep.Neighbours.K, *r))
	}
	if sc := rep.Scores; sc != nil {
		parts = append(parts, fmt.Sprintf("mean vote share %.3f (%.1f%% of rows below one half)", sc.VoteShareMean, 100*sc.LowShare))
		if sc.Agreement != nil {
			parts = append(parts, fmt.Sprintf("voted label = own label for %.2f%% of rows", 100**sc.Agreement))
		}
		if sc.MapAccuracy != nil {
			parts = append(parts, fmt.Sprintf("%d-NN label accuracy among the reference in the map %.4f", sc.MapK, *sc.MapAccuracy))
		}
	}
	if len(parts) > 0 {
		fmt.Fprintln(stdout, "scores: ", strings.Join(parts, "; "))
	}
}

// runResumeAny continues a stopped placement (or shard) when the directory
// named holds one, and otherwise an embedding run.
func runResumeAny(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	for _, a := range args {
		if !strings.HasPrefix(a, "-") && nightjar.IsPlacement(a) {
			return resumePlacement(ctx, args, stdout, stderr)
		}
	}
	return runResume(ctx, args, stdout, stderr)
}

func resumePlacement(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	r := defaultRuntime()
	var quiet bool
	fs := newFlags("resume", "continue a stopped placement from its saved rows", "nightjar resume runs/week12", stderr)
	addPlaceRuntime(fs, &r, &quiet)
	pos, err := parseFlags(fs, args, 1)
	if err != nil {
		return err
	}
	res, err := nightjar.ResumePlace(ctx, pos[0], r, &ui{w: stderr, quiet: quiet})
	if err != nil {
		return err
	}
	shard := res.Report != nil && res.Report.Shard != nil
	printPlaced(stdout, res, shard, filepath.Dir(filepath.Dir(res.Dir)))
	return nil
}
