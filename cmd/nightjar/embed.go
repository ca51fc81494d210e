package main

import (
	"context"
	"fmt"
	"io"
	"math"

	"nightjar"
)

const embedExample = "nightjar embed --input cells.parquet --run runs/cells --id cell_id --label cell_type --features 'pc_*'"

func runEmbed(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	s := nightjar.DefaultSettings()
	r := defaultRuntime()
	var quiet bool
	fs := newFlags("embed", "map a feature table into a run directory (embedding.parquet, map.png, report.json)", embedExample, stderr, "input", "run")
	runDir := fs.String("run", "", "run directory to create; it holds checkpoints and the outputs")
	orContinue := fs.Bool("or-continue", false, "for batch jobs that may be started again: start the run, or continue it if the run directory already holds the same run (refused if its settings differ)")
	var inputs []string
	addSettings(fs, &s, "input")
	fs.Func("input", inputHelp(), func(v string) error { inputs = append(inputs, v); return nil })
	addRuntime(fs, &r, &quiet)
	// Further arguments are inputs too: a shell expands --input parts/*.parquet
	// into several paths.
	more, err := parseFlags(fs, args, math.MaxInt)
	if err != nil {
		return err
	}
	inputs = append(inputs, more...)
	if len(inputs) == 0 {
		return usagef("embed: --input FILE is required (try: %s)", embedExample)
	}
	s.Input = inputs[0]
	if *runDir == "" {
		return usagef("embed: --run DIR is required (try: %s)", embedExample)
	}
	if err := s.Validate(); err != nil {
		return err
	}
	embed := nightjar.Embed
	if *orContinue {
		embed = nightjar.EmbedOrResume
	}
	res, err := embed(ctx, nightjar.FromFiles(inputs...), *runDir, s, r, newUI(stderr, quiet))
	if err != nil {
		return err
	}
	printResult(stdout, res)
	return nil
}

// inputHelp is the help of the "input" option of Settings.
func inputHelp() string {
	for _, o := range nightjar.SettingOptions() {
		if o.Name == "input" {
			return o.Help
		}
	}
	return "feature table"
}

// printResult prints where a finished run's outputs are, its headline
// scores and the caution.
func printResult(stdout io.Writer, res *nightjar.Result) {
	fmt.Fprintf(stdout, "run:       %s\nembedding: %s\nmap:       %s\npage:      %s (open it in a browser)\nreport:    %s\n",
		res.Dir, res.Embedding, res.MapImage, res.MapPage, res.Dir+"/"+nightjar.FileReport)
	if res.AlreadyFinished {
		fmt.Fprintf(stdout, "%s is finished already; nothing to do\n", res.Dir)
	}
	if res.Report != nil {
		if q := res.Report.Quality; q != nil {
			fmt.Fprintf(stdout, "quality:   trustworthiness@%d %.4f, neighbourhood kept@%d %.4f, KL %.4f\n", q.K, q.Trustworthiness, q.K, q.Preservation, q.KL)
		}
	}
	fmt.Fprintln(stdout, "caution:  ", nightjar.Caution)
}
