package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"runtime"
	"slices"
	"strings"

	"nightjar"
)

// errHelp reports that --help was asked for and printed.
var errHelp = errors.New("help shown")

// topics orders the options in --help, after the required ones.
var topics = []struct{ key, title string }{
	{"command", "Options of this command"},
	{"input", "The table"},
	{"map", "The map"},
	{"neighbours", "Neighbours and affinities"},
	{"optimiser", "The optimiser"},
	{"running", "Running (these do not change the result)"},
}

// newFlags makes a flag set whose --help prints a summary, an example, the
// required options, then the others by topic. required names the options
// the command cannot do without.
func newFlags(name, summary, example string, stderr io.Writer, required ...string) *flag.FlagSet {
	fs := flag.NewFlagSet(name, flag.ContinueOnError)
	fs.SetOutput(stderr)
	fs.Usage = func() {
		out := fs.Output()
		fmt.Fprintf(out, "nightjar %s: %s\n\nExample:\n  %s\n", name, summary, example)
		var all []*flag.Flag
		fs.VisitAll(func(f *flag.Flag) { all = append(all, f) })
		var req []*flag.Flag
		for _, f := range all {
			if slices.Contains(required, f.Name) {
				req = append(req, f)
			}
		}
		if len(req) > 0 {
			fmt.Fprintln(out, "\nRequired:")
			for _, f := range req {
				printFlag(out, f)
			}
		}
		for _, t := range topics {
			first := true
			for _, f := range all {
				if slices.Contains(required, f.Name) || flagTopic(f) != t.key {
					continue
				}
				if first {
					fmt.Fprintf(out, "\n%s:\n", t.title)
					first = false
				}
				printFlag(out, f)
			}
		}
	}
	return fs
}

// flagTopic is the topic of a flag: its option's, or "command".
func flagTopic(f *flag.Flag) string {
	if ov, ok := f.Value.(*optionValue); ok && ov.topic != "" {
		return ov.topic
	}
	return "command"
}

// printFlag prints one option of --help.
func printFlag(out io.Writer, f *flag.Flag) {
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
}

// parseFlags parses args, turning flag errors into one-line usage errors
// (exit 2) and --help into errHelp (exit 0). Extra positional arguments are
// refused unless positional > 0.
func parseFlags(fs *flag.FlagSet, args []string, positional int) ([]string, error) {
	out := fs.Output()
	fs.SetOutput(io.Discard) // errors are reported in one line below, not with the whole help
	defer fs.SetOutput(out)
	parse := func(a []string) error {
		err := fs.Parse(a)
		if errors.Is(err, flag.ErrHelp) {
			fs.SetOutput(out)
			fs.Usage()
			return errHelp
		}
		if err != nil {
			return flagError(fs, err)
		}
		return nil
	}
	if err := parse(args); err != nil {
		return nil, err
	}
	rest := fs.Args()
	// Allow options after the positional argument(s): nightjar resume DIR --force.
	var pos []string
	for len(rest) > 0 {
		pos = append(pos, rest[0])
		if err := parse(rest[1:]); err != nil {
			return nil, err
		}
		rest = fs.Args()
	}
	if len(pos) > positional {
		return nil, usagef("%s: unexpected argument %q (see nightjar %s --help)", fs.Name(), pos[positional], fs.Name())
	}
	return pos, nil
}

// flagError turns an error of the flag package into one line: an unknown
// option names the nearest known one.
func flagError(fs *flag.FlagSet, err error) error {
	msg := err.Error()
	if name, ok := strings.CutPrefix(msg, "flag provided but not defined: "); ok {
		name = strings.TrimLeft(name, "-")
		hint := ""
		if near := nearestFlag(fs, name); near != "" {
			hint = fmt.Sprintf("; did you mean --%s?", near)
		}
		return usagef("%s: unknown option --%s%s (see nightjar %s --help)", fs.Name(), name, hint, fs.Name())
	}
	msg = strings.Replace(msg, " for flag -", " for --", 1)
	return usagef("%s: %s (see nightjar %s --help)", fs.Name(), msg, fs.Name())
}

// nearestFlag returns the option of fs closest to name in edit distance,
// or "" when none is within a third of the name's length (at least 2).
func nearestFlag(fs *flag.FlagSet, name string) string {
	best, bestD := "", max(2, len(name)/3)+1
	fs.VisitAll(func(f *flag.Flag) {
		if d := editDistance(name, f.Name); d < bestD {
			best, bestD = f.Name, d
		}
	})
	return best
}

// editDistance is the Levenshtein distance between a and b.
func editDistance(a, b string) int {
	prev := make([]int, len(b)+1)
	cur := make([]int, len(b)+1)
	for j := range prev {
		prev[j] = j
	}
	for i := 1; i <= len(a); i++ {
		cur[0] = i
		for j := 1; j <= len(b); j++ {
			cost := 1
			if a[i-1] == b[j-1] {
				cost = 0
			}
			cur[j] = min(prev[j]+1, cur[j-1]+1, prev[j-1]+cost)
		}
		prev, cur = cur, prev
	}
	return prev[len(b)]
}

// optionValue is a flag.Value that reads and writes one option of the
// library's Settings or Runtime by name, so that the flags are generated
// from those types and cannot drift from them.
type optionValue struct {
	name  string
	kind  string
	topic string
	set   func(name, value string) error
	get   func(name string) (string, error)
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
		fs.Var(&optionValue{name: o.Name, kind: o.Kind, topic: o.Topic, set: set, get: get}, o.Name, o.Help)
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
