package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

func TestRecolour(t *testing.T) {
	dir := t.TempDir()
	in := writeDemoTable(t, dir, 300)
	runDir := filepath.Join(dir, "run")
	if code, out, errs := runCLI("embed", "--input", in, "--run", runDir, "--id", "id", "--label", "population",
		"--steps", "100", "--early-steps", "30", "--perplexity", "10", "--quiet", "--score-sample", "0"); code != 0 {
		t.Fatalf("embed: exit %d\n%s\n%s", code, out, errs)
	}
	if _, err := os.Stat(filepath.Join(runDir, "map.html")); err != nil {
		t.Fatalf("embed wrote no map.html: %v", err)
	}
	out := filepath.Join(dir, "by-id")
	code, stdout, stderr := runCLI("recolour", runDir, "--by", "id", "--as", "number", "--out", out, "--point-size", "3", "--title", "by id")
	if code != 0 {
		t.Fatalf("recolour: exit %d\n%s\n%s", code, stdout, stderr)
	}
	for _, want := range []string{"map.png", "map.html", "coloured by id as numbers", "300 of 300 rows have a value (matched on id)", "little meaning"} {
		if !strings.Contains(stdout, want) {
			t.Errorf("output lacks %q:\n%s", want, stdout)
		}
	}
	if _, err := os.Stat(filepath.Join(out, "map.html")); err != nil {
		t.Errorf("no page in --out: %v", err)
	}
	tests := []struct {
		args []string
		want string
	}{
		{[]string{"recolour", runDir, "--by", "nope"}, `column "nope"`},
		{[]string{"recolour", runDir, "--as", "colours"}, "--as"},
		{[]string{"recolour"}, "name the run or placement directory"},
		{[]string{"recolour", filepath.Join(dir, "missing")}, "not a run directory"},
	}
	for _, tc := range tests {
		code, _, stderr := runCLI(tc.args...)
		if code != 2 || !strings.Contains(stderr, tc.want) || strings.Count(strings.TrimSpace(stderr), "\n") > 0 {
			t.Errorf("%v: exit %d, stderr %q; want exit 2 and one line with %q", tc.args, code, stderr, tc.want)
		}
	}
}
