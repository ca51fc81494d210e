package main

import (
	"encoding/csv"
	"image/png"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
)

// TestBenchSweep runs a two-setting sweep through the real binary (each setting
// is a child process) and checks the three reports.
func TestBenchSweep(t *testing.T) {
	out := filepath.Join(t.TempDir(), "sweep")
	cmd := exec.Command(binary, "bench", "--data", "demo", "--rows", "400", "--out", out, "--quiet",
		"--repulsion", "tree", "--vary", "theta=0.5,1", "--iterations", "60", "--early-iterations", "20", "--score-sample", "100")
	if b, err := cmd.CombinedOutput(); err != nil {
		t.Fatalf("bench: %v\n%s", err, b)
	}
	f, err := os.Open(filepath.Join(out, "bench.csv"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	r := csv.NewReader(f)
	r.Comment = '#'
	recs, err := r.ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if len(recs) != 3 || recs[0][1] != "theta" || recs[1][1] != "0.5" || recs[2][1] != "1" {
		t.Fatalf("bench.csv rows: %q", recs)
	}
	col := map[string]int{}
	for i, h := range recs[0] {
		col[h] = i
	}
	for _, rec := range recs[1:] {
		if rec[col["error"]] != "" || rec[col["trustworthiness"]] == "" || rec[col["peak_memory_mib"]] == "" {
			t.Errorf("bench row %q", rec)
		}
	}
	md, err := os.ReadFile(filepath.Join(out, "bench.md"))
	if err != nil || !strings.Contains(string(md), "cores") {
		t.Errorf("bench.md: %v %q", err, md)
	}
	pf, err := os.Open(filepath.Join(out, "bench.png"))
	if err != nil {
		t.Fatal(err)
	}
	defer pf.Close()
	if _, err := png.Decode(pf); err != nil {
		t.Errorf("bench.png: %v", err)
	}
}

// TestBenchNoScores: a sweep without quality scores (--score-sample 0) still
// succeeds, writes bench.csv and bench.md, says why there is no bench.png and
// removes one left by an earlier sweep in the same folder.
func TestBenchNoScores(t *testing.T) {
	out := filepath.Join(t.TempDir(), "sweep")
	if err := os.MkdirAll(out, 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(out, "bench.png"), []byte("stale"), 0o644); err != nil {
		t.Fatal(err)
	}
	cmd := exec.Command(binary, "bench", "--data", "demo", "--rows", "400", "--out", out, "--quiet",
		"--vary", "seed=1,2", "--iterations", "30", "--early-iterations", "10", "--score-sample", "0")
	b, err := cmd.CombinedOutput()
	if err != nil {
		t.Fatalf("bench: %v\n%s", err, b)
	}
	if !strings.Contains(string(b), "no bench.png") {
		t.Errorf("output does not say why bench.png is missing:\n%s", b)
	}
	for _, name := range []string{"bench.csv", "bench.md"} {
		if _, err := os.Stat(filepath.Join(out, name)); err != nil {
			t.Error(err)
		}
	}
	if _, err := os.Stat(filepath.Join(out, "bench.png")); !os.IsNotExist(err) {
		t.Errorf("stale bench.png still there (%v)", err)
	}
}
