// Command nightjar turns a large numeric feature table into a 2-D or 3-D t-SNE
// map on a CPU-only machine, with checkpoints so an interrupted run resumes where
// it stopped, and quality scores so the map can be judged.
//
// Sub-commands:
//
//	nightjar embed  --input FILE --run DIR [options]   map a table
//	nightjar demo   [--rows N] [--run DIR]             map the built-in fictional survey
//	nightjar resume DIR                                 continue an interrupted run
//	nightjar status DIR [--json]                        where a run stands
//	nightjar score  --run DIR                           (re)compute quality scores
//	nightjar bench  [options]                           accuracy-versus-speed sweeps
//
// Exit codes: 0 success; 1 internal failure; 2 bad input or usage; 130 and 143
// interrupted by SIGINT or SIGTERM after a checkpoint was written.
package main

import (
	"errors"
	"fmt"
	"io"
	"os"
	"strings"
)

// version is the tool version written into manifests and reports.
const version = "0.1.0"

// Exit codes shared by every sub-command.
const (
	exitOK        = 0
	exitInternal  = 1
	exitBadInput  = 2
	exitInterrupt = 130 // SIGINT
	exitTerm      = 143 // SIGTERM
)

// usageError marks a mistake in how the command was called (exit 2).
type usageError struct{ msg string }

func (e *usageError) Error() string { return e.msg }

func usagef(format string, args ...any) error {
	return &usageError{fmt.Sprintf(format, args...)}
}

// interrupted is returned when a signal stopped the run after a checkpoint.
type interrupted struct {
	code int
	msg  string
}

func (e *interrupted) Error() string { return e.msg }

type command struct {
	name, summary string
	run           func(args []string, stdout, stderr io.Writer) error
}

func commands() []command {
	return []command{
		{"embed", "map a feature table (Parquet, Arrow IPC or CSV) into a run directory", runEmbed},
		{"demo", "generate the built-in fictional survey and map it", runDemo},
		{"resume", "continue an interrupted run from its newest checkpoint", runResume},
		{"status", "show where a run stands: phase, iteration, KL, time left", runStatus},
		{"score", "(re)compute quality scores of a finished run", runScore},
		{"bench", "sweep settings over a dataset and record time, memory and quality", runBench},
		{"version", "print the version", func([]string, io.Writer, io.Writer) error { fmt.Println("nightjar", version); return nil }},
	}
}

func mainUsage(w io.Writer) {
	fmt.Fprintf(w, "nightjar %s: t-SNE maps of large feature tables, resumable, with quality scores.\n\n", version)
	fmt.Fprintln(w, "Usage: nightjar <command> [options]\n\nCommands:")
	for _, c := range commands() {
		fmt.Fprintf(w, "  %-8s %s\n", c.name, c.summary)
	}
	fmt.Fprintln(w, "\nRun 'nightjar <command> --help' for the options of one command.")
	fmt.Fprintln(w, "Caution: in a t-SNE map, cluster sizes and distances between clusters carry little meaning.")
}

func main() {
	os.Exit(run(os.Args[1:], os.Stdout, os.Stderr))
}

// run dispatches to a sub-command and maps its error to an exit code.
func run(args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 || args[0] == "help" || args[0] == "-h" || args[0] == "--help" {
		mainUsage(stdout)
		if len(args) == 0 {
			return exitBadInput
		}
		return exitOK
	}
	for _, c := range commands() {
		if c.name == args[0] {
			return exitCode(c.run(args[1:], stdout, stderr), stderr)
		}
	}
	fmt.Fprintf(stderr, "nightjar: unknown command %q; run 'nightjar help' for the list\n", args[0])
	return exitBadInput
}

// exitCode prints err as one line and returns the exit code it stands for.
func exitCode(err error, stderr io.Writer) int {
	if err == nil {
		return exitOK
	}
	if errors.Is(err, errHelp) {
		return exitOK
	}
	var intr *interrupted
	if errors.As(err, &intr) {
		fmt.Fprintln(stderr, "nightjar:", intr.msg)
		return intr.code
	}
	msg := strings.ReplaceAll(err.Error(), "\n", " ")
	fmt.Fprintln(stderr, "nightjar:", msg)
	if isBadInput(err) {
		return exitBadInput
	}
	return exitInternal
}
