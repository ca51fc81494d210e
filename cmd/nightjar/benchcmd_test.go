package main

import (
	"encoding/csv"
	"encoding/json"
	"image/png"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"nightjar"
)

// readBenchCSV reads a report CSV (comment lines start with #) and returns
// its records and the column index of each header.
func readBenchCSV(t *testing.T, path string) ([][]string, map[string]int) {
	t.Helper()
	f, err := os.Open(path)
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
	col := map[string]int{}
	for i, h := range recs[0] {
		col[h] = i
	}
	return recs, col
}

// runBinary runs the built nightjar (a sweep's runs are child processes
// of the binary it runs as) and returns exit code, stdout and stderr.
func runBinary(t *testing.T, args ...string) (int, string, string) {
	t.Helper()
	cmd := exec.Command(binary, args...)
	var out, errb strings.Builder
	cmd.Stdout, cmd.Stderr = &out, &errb
	err := cmd.Run()
	if cmd.ProcessState == nil {
		t.Fatalf("running nightjar: %v", err)
	}
	return cmd.ProcessState.ExitCode(), out.String(), errb.String()
}

// TestBenchSweep runs a two-setting sweep through the real binary (each setting
// is a child process) and checks the three reports.
func TestBenchSweep(t *testing.T) {
	out := filepath.Join(t.TempDir(), "sweep")
	cmd := exec.Command(binary, "bench", "--data", "demo", "--rows", "400", "--out", out, "--quiet", "--warmup", "0",
		"--repulsion", "tree", "--vary", "theta=0.5,1", "--steps", "60", "--early-steps", "20", "--score-sample", "100")
	if b, err := cmd.CombinedOutput(); err != nil {
		t.Fatalf("bench: %v\n%s", err, b)
	}
	recs, col := readBenchCSV(t, filepath.Join(out, "bench.csv"))
	if len(recs) != 3 || recs[0][1] != "theta" || recs[1][1] != "0.5" || recs[2][1] != "1" {
		t.Fatalf("bench.csv rows: %q", recs)
	}
	for _, rec := range recs[1:] {
		if rec[col["error"]] != "" || rec[col["trustworthiness"]] == "" || rec[col["peak_memory_mib_median"]] == "" {
			t.Errorf("bench row %q", rec)
		}
		// Both settings share P (θ does not change it), so KL is shown.
		if rec[col["p_group"]] != "A" || rec[col["kl"]] == "" {
			t.Errorf("P group %q, KL %q", rec[col["p_group"]], rec[col["kl"]])
		}
	}
	md, err := os.ReadFile(filepath.Join(out, "bench.md"))
	if err != nil || !strings.Contains(string(md), "cores") || !strings.Contains(string(md), "Load average") {
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

// TestBenchRepeatedInterleaved: a sweep run three times per setting, in
// rounds, writes the median and the spread of each setting's wall time and
// peak memory, and every run in the order it ran; KL is left out, with a
// note, between settings of different perplexity (different P).
func TestBenchRepeatedInterleaved(t *testing.T) {
	out := filepath.Join(t.TempDir(), "sweep")
	code, stdout, stderr := runBinary(t, "bench", "--data", "demo", "--rows", "300", "--out", out, "--quiet", "--repeat", "3",
		"--vary", "perplexity=10,30", "--steps", "40", "--early-steps", "10", "--score-sample", "100", "--threads", "1")
	if code != 0 {
		t.Fatalf("exit %d\n%s\n%s", code, stdout, stderr)
	}
	recs, col := readBenchCSV(t, filepath.Join(out, "bench.csv"))
	if len(recs) != 3 {
		t.Fatalf("bench.csv: %q", recs)
	}
	for _, rec := range recs[1:] {
		if rec[col["runs"]] != "3" {
			t.Errorf("runs %q, want 3", rec[col["runs"]])
		}
		med, _ := strconv.ParseFloat(rec[col["seconds_median"]], 64)
		lo, _ := strconv.ParseFloat(rec[col["seconds_min"]], 64)
		hi, _ := strconv.ParseFloat(rec[col["seconds_max"]], 64)
		if !(lo > 0 && lo <= med && med <= hi) || rec[col["seconds_spread_pct"]] == "" {
			t.Errorf("seconds median %g, fastest %g, slowest %g, spread %q", med, lo, hi, rec[col["seconds_spread_pct"]])
		}
		for _, c := range []string{"peak_memory_mib_median", "peak_memory_mib_min", "peak_memory_mib_max"} {
			if rec[col[c]] == "" {
				t.Errorf("%s empty", c)
			}
		}
		if rec[col["kl"]] != "" {
			t.Errorf("KL %q shown between different perplexities", rec[col["kl"]])
		}
	}
	runs, rcol := readBenchCSV(t, filepath.Join(out, "bench-runs.csv"))
	var order []string
	for _, rec := range runs[1:] {
		order = append(order, rec[rcol["perplexity"]]+"/"+rec[rcol["repeat"]])
	}
	if got := strings.Join(order, " "); got != "10/1 30/1 10/2 30/2 10/3 30/3" {
		t.Errorf("runs in the order %s, want the settings interleaved", got)
	}
	md, _ := os.ReadFile(filepath.Join(out, "bench.md"))
	for _, s := range []string{"KL is left out", "3 per setting, interleaved", "fastest–slowest"} {
		if !strings.Contains(string(md), s) {
			t.Errorf("bench.md lacks %q", s)
		}
	}
}

// TestBenchPredict: a prediction from three subsamples writes
// prediction.json with a predicted time and memory and the quality on each
// subsample; embed --prediction records the prediction for its settings in
// its report, beside the measured run.
func TestBenchPredict(t *testing.T) {
	dir := t.TempDir()
	out := filepath.Join(dir, "pred")
	opts := []string{"--steps", "40", "--early-steps", "10", "--score-sample", "100"}
	code, stdout, stderr := runBinary(t, append([]string{"bench", "--data", "demo", "--rows", "3000", "--out", out, "--quiet", "--predict", "--ladder", "5,10,20", "--warmup", "0"}, opts...)...)
	if code != 0 {
		t.Fatalf("exit %d\n%s\n%s", code, stdout, stderr)
	}
	if !strings.Contains(stdout, "prediction for 3,000 rows") || !strings.Contains(stdout, "--prediction") {
		t.Errorf("stdout: %s", stdout)
	}
	pf, err := nightjar.ReadPredictionFile(filepath.Join(out, nightjar.FilePrediction))
	if err != nil {
		t.Fatal(err)
	}
	if pf.Rows != 3000 || len(pf.Ladder) != 3 || pf.Ladder[0] != 150 || len(pf.Settings) != 1 {
		t.Fatalf("prediction file: %+v", pf)
	}
	sp := pf.Settings[0]
	if len(sp.Quality) != 3 || sp.Quality[2].Trustworthiness == nil || len(sp.Phases) == 0 {
		t.Errorf("setting: %+v", sp)
	}
	// Tiny runs on a shared machine may be refused; either way it says so.
	if sp.Seconds.Refused == "" && !(sp.Seconds.Low <= sp.Seconds.Value && sp.Seconds.Value <= sp.Seconds.High) {
		t.Errorf("seconds %+v", sp.Seconds)
	}
	for _, f := range []string{"predict.md", "predict.csv", "bench-runs.csv"} {
		if _, err := os.Stat(filepath.Join(out, f)); err != nil {
			t.Error(err)
		}
	}
	run := filepath.Join(dir, "run")
	code, stdout, stderr = runCLI(append([]string{"demo", "--rows", "3000", "--run", run, "--quiet", "--prediction", filepath.Join(out, nightjar.FilePrediction)}, opts...)...)
	if code != 0 {
		t.Fatalf("demo: exit %d\n%s\n%s", code, stdout, stderr)
	}
	var rep struct {
		Prediction *nightjar.PredictionCheck `json:"prediction"`
	}
	b, err := os.ReadFile(filepath.Join(run, fileReport))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &rep); err != nil {
		t.Fatal(err)
	}
	c := rep.Prediction
	if c == nil || c.Setting != "defaults" || c.Rows != 3000 || c.Note != "" {
		t.Fatalf("report's prediction: %+v", c)
	}
	if c.Seconds.Refused == "" && (c.SecondsRatio == nil || c.SecondsInRange == nil) {
		t.Errorf("measured against predicted seconds missing: %+v", c)
	}
	// A run whose settings the file does not hold says so in its report.
	run2 := filepath.Join(dir, "run2")
	code, _, stderr = runCLI(append([]string{"demo", "--rows", "3000", "--run", run2, "--quiet", "--perplexity", "20", "--prediction", filepath.Join(out, nightjar.FilePrediction)}, opts...)...)
	if code != 0 {
		t.Fatalf("demo: exit %d\n%s", code, stderr)
	}
	b, _ = os.ReadFile(filepath.Join(run2, fileReport))
	rep.Prediction = nil
	if err := json.Unmarshal(b, &rep); err != nil || rep.Prediction == nil || !strings.Contains(rep.Prediction.Note, "perplexity") {
		t.Errorf("mismatched settings: %+v (%v)", rep.Prediction, err)
	}
}

// TestBenchOptionErrors: options that do not go together, and a bad
// prediction file, are the user's to fix (exit 2) with one line.
func TestBenchOptionErrors(t *testing.T) {
	dir := t.TempDir()
	bogus := filepath.Join(dir, "bogus.json")
	if err := os.WriteFile(bogus, []byte(`{"tool": "other"}`), 0o644); err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		args []string
		want string
	}{
		{[]string{"bench", "--repeat", "0"}, "--repeat"},
		{[]string{"bench", "--order", "random"}, "--order"},
		{[]string{"bench", "--predict", "--scale", "100,200"}, "--scale"},
		{[]string{"bench", "--budget", "10m"}, "go with --predict"},
		{[]string{"bench", "--predict", "--rows", "1000", "--ladder", "1,3,10"}, "perplexity 30 needs at least"},
		{[]string{"bench", "--predict", "--rows", "1000", "--ladder", "20,40"}, "3 sizes or more"},
		{[]string{"bench", "--vary", "theta=abc"}, "theta"},
		{[]string{"embed", "--input", "x.csv", "--run", filepath.Join(dir, "r"), "--prediction", bogus}, "not a prediction file"},
	}
	for _, c := range cases {
		args := append(c.args, "--out", filepath.Join(dir, "out"))
		if c.args[0] == "embed" {
			args = c.args
		}
		code, _, stderr := runCLI(args...)
		lines := strings.Split(strings.TrimSpace(stderr), "\n")
		if code != 2 || !strings.Contains(lines[len(lines)-1], c.want) {
			t.Errorf("%v: exit %d, stderr %q; want 2 and %q on the last line", c.args, code, stderr, c.want)
		}
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
	cmd := exec.Command(binary, "bench", "--data", "demo", "--rows", "400", "--out", out, "--quiet", "--warmup", "0",
		"--vary", "seed=1,2", "--steps", "30", "--early-steps", "10", "--score-sample", "0")
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
