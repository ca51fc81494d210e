package main

import (
	"bytes"
	"os"
	"path/filepath"
	"slices"
	"testing"

	"nightjar/gradient"
)

// TestPlaceAround is a hand-worked example of the placement. Rows 0 and 3
// are sampled at (0, 0) and (4, 0). Row 1 has affinities 0.1 to row 0 and
// 0.3 to row 3, so it goes to (0·0.1 + 4·0.3)/0.4 = (3, 0) in the first
// pass. Row 2 has affinities to rows 1 (0.2) and 3 (0.1): in the first pass
// only row 3 is placed, so row 2 goes to (4, 0) (passes do not see rows
// placed in the same pass). Row 4 has no affinities: the mean of the sampled
// rows, (2, 0).
func TestPlaceAround(t *testing.T) {
	// Symmetric P over 5 rows, columns ascending per row.
	P := gradient.Affinities{N: 5,
		Offsets: []int64{0, 1, 4, 6, 8, 8},
		Cols:    []int32{1, 0, 2, 3, 1, 3, 1, 2},
		Vals:    []float32{0.1, 0.1, 0.2, 0.3, 0.2, 0.1, 0.3, 0.1},
	}
	got := placeAround(P, []int{0, 3}, []float64{0, 0, 4, 0}, 2)
	want := []float64{0, 0, 3, 0, 4, 0, 4, 0, 2, 0}
	for k := range want {
		if d := got[k] - want[k]; d > 1e-6 || d < -1e-6 {
			t.Fatalf("placeAround = %v, want %v", got, want)
		}
	}
}

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
		code, _, errs := runCLI("embed", "--input", in, "--run", runDir, "--start", "subsample", "--start-rows", "400",
			"--late-exaggeration", "2", "--iterations", "200", "--early-iterations", "60", "--quiet", "--score-sample", "500")
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
		t.Error("two runs with --start subsample differ")
	}
	for _, bad := range [][]string{{"--start", "random"}, {"--start", "subsample", "--start-rows", "10"}, {"--late-exaggeration", "0"}} {
		code, _, errs := runCLI(slices.Concat([]string{"embed", "--input", in, "--run", filepath.Join(dir, "bad")}, bad)...)
		if code != exitBadInput {
			t.Errorf("%v: exit %d (%s), want %d", bad, code, errs, exitBadInput)
		}
	}
}
