package main

import (
	"bytes"
	"os"
	"path/filepath"
	"slices"
	"testing"
)

// TestSubsampleStart runs the subsample start through the CLI: two runs give
// the same bits (the draw comes from --seed), and the map keeps the
// neighbourhoods (trustworthiness ≥ 0.9: van der Maaten & Hinton 2008 report
// values this high for well-separated data — from memory).
func TestSubsampleStart(t *testing.T) {
	dir := t.TempDir()
	in := writeDemoTable(t, dir, 1500)
	var files [2][]byte
	for i := range files {
		runDir := filepath.Join(dir, "run"+string(rune('a'+i)))
		code, _, errs := runCLI("embed", "--input", in, "--run", runDir, "--start-map", "subsample", "--start-sample", "400",
			"--main-exaggeration", "2", "--steps", "200", "--early-steps", "60", "--quiet", "--score-sample", "500")
		if code != 0 {
			t.Fatalf("exit %d: %s", code, errs)
		}
		b, err := os.ReadFile(filepath.Join(runDir, fileEmbedding))
		if err != nil {
			t.Fatal(err)
		}
		files[i] = b
		rep := readReport(t, runDir)
		if _, ok := rep["phase_seconds"].(map[string]any)["start_subsample"]; !ok {
			t.Errorf("report has no start_subsample phase: %v", rep["phase_seconds"])
		}
		q := rep["quality"].(map[string]any)
		if tw := q["trustworthiness"].(float64); tw < 0.9 {
			t.Errorf("trustworthiness %v with the subsample start", tw)
		}
	}
	if !bytes.Equal(files[0], files[1]) {
		t.Error("two runs with --start-map subsample differ")
	}
	for _, bad := range [][]string{{"--start-map", "random"}, {"--start-map", "subsample", "--start-sample", "10"}, {"--main-exaggeration", "0"}} {
		code, _, errs := runCLI(slices.Concat([]string{"embed", "--input", in, "--run", filepath.Join(dir, "bad")}, bad)...)
		if code != exitBadInput {
			t.Errorf("%v: exit %d (%s), want %d", bad, code, errs, exitBadInput)
		}
	}
}
