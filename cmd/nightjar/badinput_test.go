package main

import (
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// csvTable returns a hand-made CSV table of rows×3 features plus a text
// column, with cell (row, col) of the feature block replaced by bad when
// row > 0 (rows counted from 1 after the header).
func csvTable(rows, badRow, badCol int, bad string) string {
	var b strings.Builder
	b.WriteString("id,f1,f2,f3,site\n")
	for r := 1; r <= rows; r++ {
		vals := []string{fmt.Sprint(r), fmt.Sprint(r % 7), fmt.Sprint((r * 3) % 11), fmt.Sprint((r * 5) % 13), "north"}
		if r == badRow {
			vals[badCol] = bad
		}
		b.WriteString(strings.Join(vals, ",") + "\n")
	}
	return b.String()
}

// TestBadInput runs each bad-input class of DEVELOPERS.md through the CLI: exit
// code 2, one line on stderr naming the file (and column and row where the
// fault has them), and no output file under a final name in the run directory.
func TestBadInput(t *testing.T) {
	dir := t.TempDir()
	good := filepath.Join(dir, "good.csv")
	os.WriteFile(good, []byte(csvTable(200, 0, 0, "")), 0o644)
	demo := writeDemoTable(t, dir, 300)
	demoBytes, _ := os.ReadFile(demo)
	png := []byte("\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR\x00\x00\x00\x01\x00\x00\x00\x01\x08\x02\x00\x00\x00")

	cases := []struct {
		name     string
		file     string // file name in dir
		content  []byte
		args     []string
		mentions []string // words the message must contain besides the file name
	}{
		{"NaN", "nan.csv", []byte(csvTable(200, 17, 2, "NaN")), nil, []string{`f2`, "row 17"}},
		{"Inf", "inf.csv", []byte(csvTable(200, 33, 3, "-Inf")), nil, []string{`f3`, "row 33"}},
		{"empty cell", "null.csv", []byte(csvTable(200, 5, 1, "")), nil, []string{`f1`, "row 5"}},
		{"non-numeric value", "text.csv", []byte(csvTable(200, 9, 1, "seven")), nil, []string{`f1`, "row 9"}},
		{"missing column", "good.csv", nil, []string{"--features", "f1,f9"}, []string{"f9"}},
		{"non-numeric column", "good.csv", nil, []string{"--features", "f1,site"}, []string{"site"}},
		{"missing label column", "good.csv", nil, []string{"--label", "kind"}, []string{"kind"}},
		{"empty table", "empty.csv", []byte("id,f1,f2,f3\n"), nil, []string{"0 rows"}},
		{"too few rows", "few.csv", []byte(csvTable(40, 0, 0, "")), nil, []string{"perplexity", "13"}},
		{"too few rows, uniform", "few.csv", nil, []string{"--perplexity", "5", "--uniform-neighbours", "40"}, []string{"40 neighbours", "at most 39"}},
		{"truncated parquet", "cut.parquet", demoBytes[:len(demoBytes)/2], nil, []string{"truncated"}},
		{"foreign file", "picture.png", png, nil, []string{"not a"}},
		{"no such file", "absent.csv", nil, nil, []string{"no such file"}},
		{"zero row under cosine", "zero.csv", []byte(strings.Replace(csvTable(200, 0, 0, ""), "\n12,5,3,8,", "\n12,0,0,0,", 1)),
			[]string{"--metric", "cosine"}, []string{"row 12", "cosine"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			path := filepath.Join(dir, c.file)
			if c.content != nil {
				if err := os.WriteFile(path, c.content, 0o644); err != nil {
					t.Fatal(err)
				}
			}
			runDir := filepath.Join(t.TempDir(), "run")
			args := append([]string{"embed", "--input", path, "--run", runDir, "--quiet", "--id", "id"}, c.args...)
			code, _, errs := runCLI(args...)
			if code != exitBadInput {
				t.Fatalf("exit %d, want %d; stderr %q", code, exitBadInput, errs)
			}
			if strings.Count(errs, "\n") != 1 {
				t.Errorf("want one line on stderr, got %q", errs)
			}
			if !strings.Contains(errs, c.file) {
				t.Errorf("message %q does not name the file %s", errs, c.file)
			}
			for _, w := range c.mentions {
				if !strings.Contains(strings.ToLower(errs), strings.ToLower(w)) {
					t.Errorf("message %q does not mention %q", errs, w)
				}
			}
			for _, f := range []string{fileEmbedding, fileMap, fileReport} {
				if _, err := os.Stat(filepath.Join(runDir, f)); err == nil {
					t.Errorf("%s left in the run directory after a failed run", f)
				}
			}
		})
	}
}

// TestRAMCeiling: a run whose estimated peak memory is above --ram-ceiling
// exits 2 once the table is read, its last line naming the table, its size
// and the option, with the estimate noted before it, and no output under a
// final name.
func TestRAMCeiling(t *testing.T) {
	dir := t.TempDir()
	demo := writeDemoTable(t, dir, 300)
	runDir := filepath.Join(dir, "run")
	code, _, errs := runCLI("embed", "--input", demo, "--run", runDir, "--quiet", "--id", "id", "--ram-ceiling", "0.01")
	if code != exitBadInput {
		t.Fatalf("exit %d, want %d; stderr %q", code, exitBadInput, errs)
	}
	lines := strings.Split(strings.TrimSpace(errs), "\n")
	last := lines[len(lines)-1]
	for _, w := range []string{filepath.Base(demo), "300 rows × 50 features", "estimated peak memory", "--ram-ceiling"} {
		if !strings.Contains(last, w) {
			t.Errorf("last line %q does not mention %q", last, w)
		}
	}
	if !strings.Contains(errs, "estimated peak memory: ") {
		t.Errorf("no note of the estimate in %q", errs)
	}
	for _, f := range []string{fileEmbedding, fileMap, fileReport} {
		if _, err := os.Stat(filepath.Join(runDir, f)); err == nil {
			t.Errorf("%s left in the run directory after a refused run", f)
		}
	}
}

func TestBadUsage(t *testing.T) {
	cases := [][]string{
		{"embed"},
		{"embed", "--input", "x.csv"},
		{"embed", "--input", "x.csv", "--run", "r", "--dims", "4"},
		{"embed", "--input", "x.csv", "--run", "r", "--repulsion", "magic"},
		{"embed", "--nonsense"},
		{"resume"},
		{"status", filepath.Join(os.TempDir(), "no-such-run-dir")},
		{"frobnicate"},
	}
	for _, args := range cases {
		code, _, errs := runCLI(args...)
		if code != exitBadInput || errs == "" {
			t.Errorf("%v: exit %d, stderr %q", args, code, errs)
		}
	}
}
