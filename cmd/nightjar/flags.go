package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"runtime"
	"slices"

	"nightjar"
)

// errHelp reports that --help was asked for and printed.
var errHelp = errors.New("help shown")

// newFlags makes a flag set whose --help prints a summary, an example and the options.
func newFlags(name, summary, example string, stderr io.Writer) *flag.FlagSet {
	fs := flag.NewFlagSet(name, flag.ContinueOnError)
	fs.SetOutput(stderr)
	fs.Usage = func() {
		out := fs.Output()
		fmt.Fprintf(out, "nightjar %s: %s\n\nExample:\n  %s\n\nOptions:\n", name, summary, example)
		fs.VisitAll(func(f *flag.Flag) {
			kind, usage := flag.UnquoteUsage(f)
			if ov, ok := f.Value.(*optionValue); ok {
				kind, usage = kindWord[ov.kind], f.Usage
			}
			line := "  --" + f.Name
			if kind != "" {
				line += " " + kind
			}
			fmt.Fprintf(out, "%s\n      %s", line, usage)
			if f.DefValue != "" && f.DefValue != "false" && f.DefValue != "0" && f.DefValue != "[]" {
				fmt.Fprintf(out, " (default %s)", f.DefValue)
			}
			fmt.Fprintln(out)
		})
	}
	return fs
}

// parseFlags parses args, turning flag errors into usage errors (exit 2) and
// --help into errHelp (exit 0). Extra positional arguments are refused unless
// positional > 0.
func parseFlags(fs *flag.FlagSet, args []string, positional int) ([]string, error) {
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return nil, errHelp
		}
		return nil, &usageError{err.Error()}
	}
	rest := fs.Args()
	// Allow options after the positional argument(s): nightjar resume DIR --force.
	var pos []string
	for len(rest) > 0 {
		pos = append(pos, rest[0])
		if err := fs.Parse(rest[1:]); err != nil {
			if errors.Is(err, flag.ErrHelp) {
				return nil, errHelp
			}
			return nil, &usageError{err.Error()}
		}
		rest = fs.Args()
	}
	if len(pos) > positional {
		return nil, usagef("%s: unexpected argument %q", fs.Name(), pos[positional])
	}
	return pos, nil
}

// optionValue is a flag.Value that reads and writes one option of the
// library's Settings or Runtime by name, so that the flags are generated
// from those types and cannot drift from them.
type optionValue struct {
	name string
	kind string
	set  func(name, value string) error
	get  func(name string) (string, error)
}

func (v *optionValue) String() string {
	if v.get == nil {
		return ""
	}
	s, _ := v.get(v.name)
	return s
}

func (v *optionValue) Set(s string) error {
	if err := v.set(v.name, s); err != nil {
		var se *nightjar.SettingError
		if errors.As(err, &se) {
			return errors.New(se.Msg)
		}
		return err
	}
	return nil
}

// IsBoolFlag lets a boolean option be given without a value.
func (v *optionValue) IsBoolFlag() bool { return v.kind == "bool" }

// kindWord is the placeholder of an option's value in --help.
var kindWord = map[string]string{"string": "TEXT", "int": "N", "float": "X", "uint": "N", "list": "LIST", "bool": ""}

// addOptions registers every option of opts on fs, skipping the names in
// skip; values are read and written through set and get.
func addOptions(fs *flag.FlagSet, opts []nightjar.Option, skip []string, set func(string, string) error, get func(string) (string, error)) {
	for _, o := range opts {
		if slices.Contains(skip, o.Name) {
			continue
		}
		fs.Var(&optionValue{name: o.Name, kind: o.Kind, set: set, get: get}, o.Name, o.Help)
	}
}

// addSettings registers the options of Settings but those in skip.
func addSettings(fs *flag.FlagSet, s *nightjar.Settings, skip ...string) {
	addOptions(fs, nightjar.SettingOptions(), skip, s.Set, s.Get)
}

// addRuntime registers the runtime options and --quiet.
func addRuntime(fs *flag.FlagSet, r *nightjar.Runtime, quiet *bool) {
	addOptions(fs, nightjar.RuntimeOptions(), nil, r.Set, r.Get)
	fs.BoolVar(quiet, "quiet", false, "no progress bars (for batch jobs); warnings, errors and the final summary still print")
}

// defaultRuntime is the library's default with every core the process may use.
func defaultRuntime() nightjar.Runtime {
	r := nightjar.DefaultRuntime()
	r.Threads = runtime.GOMAXPROCS(0)
	r.ReturnMemory = true
	return r
}
