package main

import (
	"bytes"
	"context"
	"encoding/json"
	"io"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"nightjar/bench"
	"nightjar/checkpoint"
	"nightjar/gradient"
	"nightjar/ingest"
)

// binary is the nightjar executable built once for the tests that need a real
// process (signals, kills).
var binary string

func TestMain(m *testing.M) {
	dir, err := os.MkdirTemp("", "nightjar-bin-")
	if err != nil {
		panic(err)
	}
	binary = filepath.Join(dir, "nightjar")
	build := exec.Command("go", "build", "-o", binary, ".")
	build.Stderr = os.Stderr
	if err := build.Run(); err != nil {
		panic("building nightjar: " + err.Error())
	}
	code := m.Run()
	os.RemoveAll(dir)
	os.Exit(code)
}

// writeDemoTable writes n rows of the invented demo survey as Parquet.
func writeDemoTable(t *testing.T, dir string, n int) string {
	t.Helper()
	path := filepath.Join(dir, "survey.parquet")
	writeDemoTableSeed(t, path, n, 7)
	return path
}

func writeDemoTableSeed(t *testing.T, path string, n int, seed uint64) {
	t.Helper()
	tab := bench.Demo(n, seed, 2)
	if err := checkpoint.AtomicWrite(path, func(w io.Writer) error { return ingest.WriteTable(w, tab) }); err != nil {
		t.Fatal(err)
	}
}

func readReport(t *testing.T, dir string) map[string]any {
	t.Helper()
	b, err := os.ReadFile(filepath.Join(dir, fileReport))
	if err != nil {
		t.Fatal(err)
	}
	var rep map[string]any
	if err := json.Unmarshal(b, &rep); err != nil {
		t.Fatal(err)
	}
	return rep
}

func TestEmbedWritesOutputs(t *testing.T) {
	dir := t.TempDir()
	in := writeDemoTable(t, dir, 1200)
	runDir := filepath.Join(dir, "run")
	code, out, errs := runCLI("embed", "--input", in, "--run", runDir, "--id", "id", "--label", "population",
		"--steps", "300", "--early-steps", "100", "--quiet", "--score-sample", "300")
	if code != 0 {
		t.Fatalf("exit %d\nstdout: %s\nstderr: %s", code, out, errs)
	}
	for _, f := range []string{fileEmbedding, fileMap, fileReport} {
		if _, err := os.Stat(filepath.Join(runDir, f)); err != nil {
			t.Errorf("missing output %s: %v", f, err)
		}
	}
	rep := readReport(t, runDir)
	for _, key := range []string{"rows", "features", "parameters", "neighbours", "optimiser", "peak_memory_bytes", "seconds_total", "caution", "quality"} {
		if _, ok := rep[key]; !ok {
			t.Errorf("report.json lacks %q", key)
		}
	}
	if rep["rows"].(float64) != 1200 {
		t.Errorf("rows = %v, want 1200", rep["rows"])
	}
	if !strings.Contains(rep["caution"].(string), "distances between clusters") {
		t.Errorf("caution = %q", rep["caution"])
	}
	// The embedding joins back on the id, rows in input order.
	emb, err := ingest.Read(filepath.Join(runDir, fileEmbedding), ingest.Options{ID: "id", Label: "population"})
	if err != nil {
		t.Fatal(err)
	}
	if emb.N != 1200 || emb.D != 2 || emb.ID.Ints[0] != 1 || emb.ID.Ints[1199] != 1200 {
		t.Errorf("embedding: %d×%d, ids %v…%v", emb.N, emb.D, emb.ID.Ints[0], emb.ID.Ints[emb.N-1])
	}
	// A second embed into the same run directory is refused, not overwritten.
	code, _, errs = runCLI("embed", "--input", in, "--run", runDir, "--quiet")
	if code != exitBadInput || !strings.Contains(errs, "resume") {
		t.Errorf("embed into a used run directory: exit %d, %q", code, errs)
	}
	// status and score on the finished run.
	code, out, errs = runCLI("status", runDir, "--json")
	if code != 0 || !strings.Contains(out, `"finished"`) {
		t.Errorf("status: exit %d, %s %s", code, out, errs)
	}
	code, out, errs = runCLI("score", runDir, "--sample", "200")
	if code != 0 || !strings.Contains(out, "trustworthiness") {
		t.Errorf("score: exit %d, %s %s", code, out, errs)
	}
}

func TestHelpOnEverySubcommand(t *testing.T) {
	for _, c := range commands() {
		if c.name == "version" {
			continue
		}
		var out, errb bytes.Buffer
		code := run(context.Background(), []string{c.name, "--help"}, &out, &errb, nil)
		if code != 0 || !strings.Contains(errb.String(), "Example:") {
			t.Errorf("%s --help: exit %d, output %q", c.name, code, errb.String())
		}
	}
}

// TestThreadsSameBits: the same seed gives the same bits with 1 and 2 threads
// (the block-ordered reductions of internal/par).
// Both the exact and the NN-descent neighbour searches are covered.
func TestThreadsSameBits(t *testing.T) {
	dir := t.TempDir()
	in := writeDemoTable(t, dir, 2000)
	for _, method := range []string{"exact", "descent"} {
		var files [2][]byte
		for i, threads := range []string{"1", "2"} {
			runDir := filepath.Join(dir, method+threads)
			code, _, errs := runCLI("embed", "--input", in, "--run", runDir, "--threads", threads, "--neighbours", method,
				"--steps", "150", "--early-steps", "50", "--quiet", "--score-sample", "0")
			if code != 0 {
				t.Fatalf("%s, threads %s: exit %d: %s", method, threads, code, errs)
			}
			b, err := os.ReadFile(filepath.Join(runDir, fileEmbedding))
			if err != nil {
				t.Fatal(err)
			}
			files[i] = b
		}
		if !bytes.Equal(files[0], files[1]) {
			t.Errorf("--neighbours %s: embedding differs between --threads 1 and --threads 2", method)
		}
		if method == "descent" {
			rep := readReport(t, filepath.Join(dir, "descent2"))
			nb := rep["neighbours"].(map[string]any)
			// NN-descent on 2,000 rows should find nearly every true neighbour
			// (Dong, Charikar & Li 2011 report recall above 0.9 — from memory).
			if r, ok := nb["recall"].(float64); !ok || r < 0.9 {
				t.Errorf("descent recall = %v (sample %v)", nb["recall"], nb["recall_sample"])
			}
		}
	}
}

// TestEmbedReduce: --reduce projects while reading; the report says from how
// many features to how many components, with their variances descending.
func TestEmbedReduce(t *testing.T) {
	dir := t.TempDir()
	in := writeDemoTable(t, dir, 900)
	runDir := filepath.Join(dir, "run")
	code, _, errs := runCLI("embed", "--input", in, "--run", runDir, "--reduce", "8", "--id", "id",
		"--steps", "120", "--early-steps", "40", "--quiet", "--score-sample", "200")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	rep := readReport(t, runDir)
	red, ok := rep["reduced"].(map[string]any)
	if !ok || red["from_features"].(float64) != 50 || red["to_components"].(float64) != 8 || rep["features"].(float64) != 8 {
		t.Fatalf("report: reduced %v, features %v", rep["reduced"], rep["features"])
	}
	v := red["component_variances"].([]any)
	for i := 1; i < len(v); i++ {
		if v[i].(float64) > v[i-1].(float64) {
			t.Errorf("component variances not descending: %v", v)
		}
	}
}

// TestEmbedHNSW: the HNSW path runs through the CLI and reports its recall,
// measured against the exact search on a sample.
func TestEmbedHNSW(t *testing.T) {
	dir := t.TempDir()
	in := writeDemoTable(t, dir, 1500)
	runDir := filepath.Join(dir, "run")
	code, _, errs := runCLI("embed", "--input", in, "--run", runDir, "--neighbours", "hnsw", "--check-recall", "500",
		"--steps", "100", "--early-steps", "30", "--quiet", "--score-sample", "0")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	nb := readReport(t, runDir)["neighbours"].(map[string]any)
	if nb["method"] != "hnsw" || nb["recall_sample"].(float64) != 500 || len(nb["pass_recall"].([]any)) == 0 {
		t.Errorf("neighbours report: %v", nb)
	}
	// HNSW candidates refined by NN-descent: recall near 1 at this size
	// (knn's own tests measure 0.99 and above on 3,000–5,000 rows).
	if r := nb["recall"].(float64); r < 0.9 {
		t.Errorf("hnsw recall = %.4f", r)
	}
}

// TestEmbedRecallGoal: --neighbours descent stops refining once the recall
// estimated on its own sample reaches --recall-goal; the report lists the
// estimates (one before the first pass, one after each), and the recall
// checked on another sample against the exact search agrees with the last
// one. A goal outside (0, 1] is a usage error.
func TestEmbedRecallGoal(t *testing.T) {
	dir := t.TempDir()
	in := writeDemoTable(t, dir, 12000)
	for _, goal := range []string{"0.9", "1"} {
		runDir := filepath.Join(dir, "run-"+goal)
		code, _, errs := runCLI("embed", "--input", in, "--run", runDir, "--neighbours", "descent", "--recall-goal", goal,
			"--check-recall", "500", "--steps", "50", "--early-steps", "20", "--quiet", "--score-sample", "0")
		if code != 0 {
			t.Fatalf("exit %d: %s", code, errs)
		}
		nb := readReport(t, runDir)["neighbours"].(map[string]any)
		est := nb["pass_recall"].([]any)
		passes := int(nb["passes"].(float64))
		if len(est) != passes+1 {
			t.Fatalf("goal %s: %d estimates for %d passes: %v", goal, len(est), passes, nb)
		}
		g, _ := strconv.ParseFloat(goal, 64)
		last := est[passes].(float64)
		for _, e := range est[:passes] {
			if e.(float64) >= g {
				t.Errorf("goal %s: estimates %v reached it before the last pass", goal, est)
			}
		}
		if r := nb["recall"].(float64); math.Abs(r-last) > 0.05 || (g < 1 && r < g-0.05) {
			t.Errorf("goal %s: checked recall %.4f, last estimate %.4f", goal, r, last)
		}
		t.Logf("goal %s: estimates %v, checked %.4f", goal, est, nb["recall"])
	}
	for _, bad := range []string{"0", "1.5", "-0.2"} {
		code, _, errs := runCLI("embed", "--input", in, "--run", filepath.Join(dir, "bad"), "--recall-goal", bad)
		if code != exitBadInput || !strings.Contains(errs, "--recall-goal") {
			t.Errorf("--recall-goal %s: exit %d (%s), want %d", bad, code, errs, exitBadInput)
		}
	}
}

// TestEmbedForeignParquet: a Parquet file written by another implementation
// (DuckDB 1.5, see ingest/testdata/README.md) embeds through the CLI with --id
// and --label, and the output joins back on the id in input order.
func TestEmbedForeignParquet(t *testing.T) {
	runDir := filepath.Join(t.TempDir(), "run")
	code, _, errs := runCLI("embed", "--input", "../../ingest/testdata/buoys.parquet", "--run", runDir,
		"--id", "station_id", "--label", "site", "--perplexity", "20", "--steps", "200", "--early-steps", "60", "--quiet")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	emb, err := ingest.Read(filepath.Join(runDir, fileEmbedding), ingest.Options{ID: "station_id", Label: "site"})
	if err != nil {
		t.Fatal(err)
	}
	if emb.N != 300 || emb.ID.Ints[0] != 1000 || emb.ID.Ints[299] != 1299 || emb.Label.String(1) != "kelp_bank" {
		t.Errorf("embedding: %d rows, ids %d…%d, label[1] %q", emb.N, emb.ID.Ints[0], emb.ID.Ints[emb.N-1], emb.Label.String(1))
	}
	if f := readReport(t, runDir)["features"].(float64); f != 7 {
		t.Errorf("features = %v, want the 7 numeric columns (the boolean is not numeric)", f)
	}
}

// TestEmbedAboveExactKL crosses gradient.ExactLimit, where the pipeline
// hands P to the optimiser and keeps no copy: the report then takes the
// optimiser's KL, and the peak memory is recorded after every phase.
func TestEmbedAboveExactKL(t *testing.T) {
	dir := t.TempDir()
	n := gradient.ExactLimit + 50
	in := writeDemoTable(t, dir, n)
	runDir := filepath.Join(dir, "run")
	code, _, errs := runCLI("embed", "--input", in, "--run", runDir, "--label", "population",
		"--steps", "30", "--early-steps", "10", "--quiet", "--score-sample", "200")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	rep := readReport(t, runDir)
	q := rep["quality"].(map[string]any)
	if m, _ := q["kl_method"].(string); !strings.Contains(m, "optimiser") {
		t.Errorf("kl_method = %q, want the optimiser's", m)
	}
	if _, ok := q["centroid_rank"].(float64); !ok {
		t.Errorf("no centroid_rank in %v", q)
	}
	mem := rep["peak_memory_bytes_after"].(map[string]any)
	for _, phase := range []string{"read", "neighbours", "affinities", "optimiser", "outputs", "scores"} {
		if v, ok := mem[phase].(float64); !ok || v <= 0 {
			t.Errorf("peak memory after %s: %v", phase, mem[phase])
		}
	}
}

// TestWarnsIDFeature: the demo table read without --id uses its integer id
// column as a feature; the run goes on and says so once, on stderr.
func TestWarnsIDFeature(t *testing.T) {
	dir := t.TempDir()
	in := writeDemoTable(t, dir, 300)
	args := []string{"embed", "--input", in, "--run", filepath.Join(dir, "noid"), "--perplexity", "10", "--steps", "30", "--early-steps", "10", "--quiet"}
	code, _, errs := runCLI(args...)
	if code != 0 || strings.Count(errs, `feature column "id" looks like a row identifier`) != 1 {
		t.Errorf("without --id: exit %d, stderr %q", code, errs)
	}
	code, _, errs = runCLI(append(args[:4:4], filepath.Join(dir, "withid"), "--id", "id", "--steps", "30", "--early-steps", "10", "--quiet")...)
	if code != 0 || strings.Contains(errs, "row identifier") {
		t.Errorf("with --id: exit %d, stderr %q", code, errs)
	}
}
