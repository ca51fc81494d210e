// Command nightjar turns a large numeric feature table into a 2-D or 3-D t-SNE
// map on a CPU-only machine, with checkpoints so an interrupted run resumes where
// it stopped, and quality scores so the map can be judged. It is the command
// line of the nightjar library: flags, progress bars, messages and exit codes.
//
// Sub-commands:
//
//	nightjar embed  --input FILE --run DIR [options]   map a table
//	nightjar demo   [--rows N] [--run DIR]             map the built-in fictional survey
//	nightjar resume DIR                                 continue an interrupted run
//	nightjar status DIR [--json]                        where a run stands
//	nightjar score  DIR                                 (re)compute quality scores
//	nightjar recolour DIR [--by COLUMN]                 re-draw the map coloured by any column
//	nightjar place  REF --input FILE --out DIR          place new rows into a finished map
//	nightjar merge  DIR                                 merge the parts of a sharded placement
//	nightjar bench  [options]                           accuracy-versus-speed sweeps
//
// Exit codes: 0 success; 1 internal failure; 2 bad input or usage; 130 and 143
// interrupted by SIGINT or SIGTERM (after a checkpoint was written, in the
// optimiser).
package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/signal"
	"strings"
	"sync/atomic"
	"syscall"

	"nightjar"
)

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

type command struct {
	name, summary string
	run           func(ctx context.Context, args []string, stdout, stderr io.Writer) error
}

func commands() []command {
	return []command{
		{"embed", "map a feature table (Parquet, Arrow IPC or CSV) into a run directory", runEmbed},
		{"demo", "generate the built-in fictional survey and map it", runDemo},
		{"resume", "continue an interrupted run from its newest checkpoint (or a stopped placement)", runResumeAny},
		{"status", "show where a run stands: phase, iteration, KL, time left", runStatus},
		{"score", "(re)compute quality scores of a finished run", runScore},
		{"recolour", "re-draw map.png and map.html of a finished run or placement coloured by any column", runRecolour},
		{"place", "place the rows of a new table into a finished map, in one go or in shards", runPlace},
		{"merge", "merge the parts of a sharded placement into one", runMerge},
		{"bench", "sweep settings over a dataset and record time, memory and quality", runBench},
		{"version", "print the version", func(_ context.Context, _ []string, stdout, _ io.Writer) error {
			fmt.Fprintln(stdout, "nightjar", nightjar.Version)
			return nil
		}},
	}
}

func mainUsage(w io.Writer) {
	fmt.Fprintf(w, "nightjar %s: t-SNE maps of large feature tables, resumable, with quality scores.\n\n", nightjar.Version)
	fmt.Fprintln(w, "Usage: nightjar <command> [options]\n\nCommands:")
	for _, c := range commands() {
		fmt.Fprintf(w, "  %-8s %s\n", c.name, c.summary)
	}
	fmt.Fprintln(w, "\nRun 'nightjar help <command>' for the options of one command; 'nightjar --version' for the version.")
	fmt.Fprintln(w, "Caution: in a t-SNE map, cluster sizes and distances between clusters carry little meaning.")
}

func main() {
	ctx, sig, stop := signalContext()
	code := run(ctx, os.Args[1:], os.Stdout, os.Stderr, sig)
	stop()
	os.Exit(code)
}

// signalContext returns a context cancelled by the first SIGINT or SIGTERM,
// a function that tells which signal it was, and a function that stops
// listening. After the first signal a second SIGINT ends the process at
// once (Ctrl-C twice), while a repeated SIGTERM is ignored: a batch
// scheduler may send it both to the job's script and to nightjar, which is
// then writing its checkpoint.
func signalContext() (context.Context, func() syscall.Signal, func()) {
	ctx, cancel := context.WithCancelCause(context.Background())
	var got atomic.Int32
	ch := make(chan os.Signal, 2)
	signal.Notify(ch, syscall.SIGINT, syscall.SIGTERM)
	quit := make(chan struct{})
	go func() {
		for {
			select {
			case s := <-ch:
				if got.CompareAndSwap(0, int32(s.(syscall.Signal))) {
					cancel(fmt.Errorf("%v", s))
					continue
				}
				if s == syscall.SIGINT {
					signal.Reset(syscall.SIGINT)
					_ = syscall.Kill(os.Getpid(), syscall.SIGINT)
					return
				}
			case <-quit:
				return
			}
		}
	}()
	return ctx, func() syscall.Signal { return syscall.Signal(got.Load()) }, func() { signal.Stop(ch); close(quit) }
}

// run dispatches to a sub-command and maps its error to an exit code. sig
// tells which signal, if any, cancelled ctx.
func run(ctx context.Context, args []string, stdout, stderr io.Writer, sig func() syscall.Signal) int {
	if len(args) == 2 && args[0] == "help" {
		args = []string{args[1], "--help"}
	}
	if len(args) == 0 || args[0] == "help" || args[0] == "-h" || args[0] == "--help" {
		mainUsage(stdout)
		if len(args) == 0 {
			return exitBadInput
		}
		return exitOK
	}
	if args[0] == "--version" || args[0] == "-version" {
		args[0] = "version"
	}
	for _, c := range commands() {
		if c.name == args[0] {
			return exitCode(c.run(ctx, args[1:], stdout, stderr), stderr, sig)
		}
	}
	fmt.Fprintf(stderr, "nightjar: unknown command %q; run 'nightjar help' for the list\n", args[0])
	return exitBadInput
}

// exitCode prints err as one line and returns the exit code it stands for.
func exitCode(err error, stderr io.Writer, sig func() syscall.Signal) int {
	if err == nil || errors.Is(err, errHelp) {
		return exitOK
	}
	var stop *nightjar.StoppedError
	if errors.As(err, &stop) {
		if stop.Saved {
			fmt.Fprintf(stderr, "nightjar: stopped at iteration %d after writing a checkpoint; continue with: nightjar resume %s\n", stop.Iteration, stop.Dir)
		} else {
			fmt.Fprintf(stderr, "nightjar: interrupted during phase %q; continue with: nightjar resume %s\n", stop.Phase, stop.Dir)
		}
		if sig != nil && sig() == syscall.SIGTERM {
			return exitTerm
		}
		return exitInterrupt
	}
	msg := strings.ReplaceAll(err.Error(), "\n", " ")
	fmt.Fprintln(stderr, "nightjar:", msg)
	var use *usageError
	if errors.As(err, &use) || nightjar.IsUserFault(err) {
		return exitBadInput
	}
	return exitInternal
}
